/* The comparison's internals, shared by compare.c (the lines), compare_samples.c (where samples
 * come from), compare_runs.c (warnings) and compare_out.c (outputs). */
#ifndef SQUALL_COMPARE_INT_H
#define SQUALL_COMPARE_INT_H

#include "squall/report.h"

struct report_cmp {
    report_cmp_line_t *lines;
    size_t n, cap;
    bool lacks_p999[2]; /* BASE's, NEW's series.csv has rows but no p999_ms column */
    const report_series_t *series[2]; /* borrowed from report_compare's caller, for the page */
};

/* One run as the comparison reads it. */
typedef struct {
    const results_t *res;
    const report_series_t *series;
} cmp_run_t;

/* Per-second columns of series.csv the tests use. */
enum cmp_col { CMP_P50, CMP_P99, CMP_P999, CMP_MAX, CMP_ERRORS };

/* The smallest change of a fleet action's R̄ that counts (compare.c explains it). */
#define CMP_SYNC_MIN_CHANGE 0.05

/* Growable scratch for samples. */
typedef struct {
    double *v;
    size_t n, cap;
} cmp_vec_t;

/* Whole-phase value of (phase, cls) from its cells (cancelled left out): the percentile pct of
 * histogram metric m in ms, or with pct < 0 the error rate. False when nothing was recorded. h
 * is scratch of the run's histogram configuration. */
bool cmp_whole(const results_t *r, const char *phase, const char *cls, int m, double pct, hist_t *h,
               double *out);
/* The per-second samples of one column: seconds in which something of (phase, cls) completed.
 * SQ_ENOMEM. */
int cmp_seconds(const report_series_t *s, const char *phase, const char *cls, enum cmp_col col,
                cmp_vec_t *out);
/* The per-tick values of key ("p50_ns", ...) in ms, from the "storms" section's actions of cls
 * in phase. SQ_ENOMEM. */
int cmp_ticks(const results_t *r, const char *phase, const char *cls, const char *key,
              cmp_vec_t *out);
/* R̄ of every whole window (not partial) of the fleet action cls in phase, from the "sync"
 * section. SQ_ENOMEM. */
int cmp_sync_windows(const results_t *r, const char *phase, const char *cls, cmp_vec_t *out);
/* Ticks recorded for cls in phase (0 when it was no fleet action there). */
size_t cmp_tick_count(const results_t *r, const char *phase, const char *cls);
/* True when cls is a watch class in phase (the "watches" section, or an open histogram). */
bool cmp_is_watch(const results_t *r, const char *phase, const char *cls);
/* The watch class's streams in phase (the "watches" section), 0 when unknown. */
size_t cmp_streams(const results_t *r, const char *phase, const char *cls);
/* The seconds phase ran (the "phases" section, else its seconds in series.csv); 0 unknown. */
size_t cmp_phase_seconds(const results_t *r, const report_series_t *s, const char *phase);
/* compare_out.c, also for trend's outputs: a value as "-", "1.23%" (a rate) or "4.56 ms", and
 * a change d from base as "+1.00 pt", "+5.10 ms (+85%)" or "+5.10 ms". */
void cmp_value_text(bool rate, double v, char *buf, size_t cap);
void cmp_change_text(bool rate, double base, double d, char *buf, size_t cap);
/* The merged histogram of metric m of (phase, cls) into h; false when none was recorded. */
bool cmp_hist(const results_t *r, const char *phase, const char *cls, int m, hist_t *h);

#endif
