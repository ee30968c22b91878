/* Reports: report.html (one self-contained page: inline SVG and CSS, no scripts, no network) and
 * the comparison of two runs (`squall compare`).
 *
 * Concepts. The *series* is a run's series.csv: one row per class per second (see
 * DEVELOPERS.md, "series.csv"); columns are found by their header names, so added columns are
 * ignored. A *comparison* pairs the (phase, class) cells of a BASE and a NEW run and tests, for
 * each of p50, p99, p99.9 and the error rate, whether NEW differs from BASE, over per-second
 * samples (series.csv), per-tick samples (a fleet phase's "storms" section) or a watch class's
 * histograms, giving a verdict: slower, faster, within noise or untested. A *sample* is one
 * value the test counts: a second's p50, a tick's p99, a watch's propagation latency.
 * Ownership: strings in rows are owned by their report_series_t; strings in comparison lines
 * point into the two results_t compared (keep them until report_cmp_free). Every function
 * writing a file writes a temporary and renames it. */
#ifndef SQUALL_REPORT_H
#define SQUALL_REPORT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include <jansson.h>

#include "squall/out.h"
#include "squall/results.h"

#define REPORT_HTML_FILE   "report.html"
#define REPORT_SERIES_FILE "series.csv"

/* ---- series.csv ------------------------------------------------------------------------- */

typedef struct {
    int64_t second; /* since the run's start */
    const char *phase, *cls;
    int64_t started, completed, errors;
    double rate_per_s, p50_ms, p90_ms, p99_ms, max_ms; /* latencies are 0 when completed = 0 */
    double p999_ms; /* NaN in a file written before the column existed */
    double planned; /* requests the schedule planned to start that second; NaN when not written */
    int64_t unix_ms; /* wall-clock start of the second; 0 when not written */
    /* The whole run's figures of the second (RESULTS_SERIES_RUN_MAP: every phase and class,
     * the same on each row of the second); NaN when not written. A merge's propagation p99 and
     * peaks are upper bounds (report_series_upper). */
    double run[RESULTS_RUN__COUNT]; /* by enum results_run_figure */
} report_row_t;

/* A second's response times of one (phase, class) from series-hist.csv, counted into
 * REPORT_HEAT_BINS latency bins with edges report_heat_edge(k) ms (log spaced, 4 per decade from
 * 0.01 ms; the first and last bins also take what lies beyond them). */
#define REPORT_HEAT_BINS 32
typedef struct {
    int64_t second;
    const char *phase, *cls;
    double bins[REPORT_HEAT_BINS];
} report_heat_row_t;
double report_heat_edge(size_t k);

typedef struct report_series report_series_t;

/* Reads a series.csv. SQ_EIO when it cannot be opened, SQ_EPARSE (with a line on o naming the
 * file and line) when a required column is missing or a number is malformed. */
int report_series_read(const char *path, report_series_t **out, out_t *o);
/* An empty series (for a run whose series.csv is missing). */
int report_series_new(report_series_t **out);
void report_series_free(report_series_t *s);
size_t report_series_count(const report_series_t *s);
const report_row_t *report_series_at(const report_series_t *s, size_t i);
/* Adds series-hist.csv's rows (bin counts) to s. SQ_EIO when it cannot be opened, SQ_EPARSE on a
 * malformed line. */
int report_series_read_hist(report_series_t *s, const char *path, out_t *o);
size_t report_series_heat_count(const report_series_t *s);
const report_heat_row_t *report_series_heat_at(const report_series_t *s, size_t i);
/* True when the file had the p999_ms column (an older squall wrote none). */
bool report_series_has_p999(const report_series_t *s);
/* The run's figures carry a merge's _upper names: its propagation p99 is the largest shard's and
 * its peaks the shards' added, upper bounds of the pooled figures. */
bool report_series_upper(const report_series_t *s);

/* ---- report.html ------------------------------------------------------------------------ */

/* Writes the report of res (with its per-second series s, which may be empty) to f. */
int report_html_write(FILE *f, const results_t *res, const report_series_t *s);
/* Writes DIR/report.html from res and DIR/series.csv (plots over time are left out, with a note,
 * when series.csv is missing). SQ_EIO with a line on o when the file cannot be written. */
int report_html_write_dir(const char *dir, const results_t *res, out_t *o);

/* ---- comparison ------------------------------------------------------------------------- */

/* A line's verdict: NEW is worse (slower, or more errors), better (faster, fewer errors), within
 * noise, or untested (too few samples for the test to ever reach the false-alarm level). */
enum report_verdict { REPORT_WITHIN_NOISE, REPORT_WORSE, REPORT_BETTER, REPORT_UNTESTED };

/* A difference is worse or better only when the test says it is unlikely under "same
 * configuration" (p < false_alarm) AND the two runs differ by more than both an absolute floor
 * (min_abs_ms for p50, min_tail_ms for p99 and p99.9, min_abs_err for error rates) and min_rel
 * (a fraction of BASE). Tails get a wider floor because on a shared machine they move with the
 * machine's load from one run to the next (measured on our 2-core test machines:
 * same-configuration runs differed by up to ~2.7 ms at p99.9 around 5 ms). */
typedef struct {
    double
        false_alarm;   /* 0.01: per line, the chance of calling same-configuration runs different */
    double min_abs_ms; /* 1.0 */
    double min_tail_ms; /* 3.0 */
    double min_rel;     /* 0.10 */
    double min_abs_err; /* 0.01 (one percentage point) */
} report_cmp_opts_t;

void report_cmp_opts_default(report_cmp_opts_t *opts);

/* What a line's samples are: series.csv's seconds, a fleet phase's ticks (the "storms"
 * section), or a watch class's recorded values (its histograms), counted as at most one per
 * stream and at most one per second of the phase (see compare.c, watch_line). */
/* REPORT_UNIT_WINDOWS: a fleet action's whole windows of one period (the "sync" section), for
 * its synchronisation gauge R̄. */
enum report_unit { REPORT_UNIT_SECONDS, REPORT_UNIT_TICKS, REPORT_UNIT_WATCH, REPORT_UNIT_WINDOWS };
enum report_test {
    REPORT_TEST_NONE,
    REPORT_TEST_MW_EXACT,
    REPORT_TEST_MW_NORMAL,
    REPORT_TEST_QUANTILE
};

/* One metric of one (phase, class) in both runs. */
typedef struct {
    const char *phase, *cls;
    const char *latency;      /* "response", "open", "propagation", "sync" (a fleet action's
                               * R̄ per whole window); NULL for the error rate */
    const char *metric;       /* "p50", "p99", "p99.9", "error_rate" or "r_bar" */
    double base, new_value;   /* whole-phase values: ms from the histograms, or a fraction */
    double base_med, new_med; /* what the minimum change is measured between: the medians of
                               * the per-second or per-tick samples; for watch lines the
                               * percentiles themselves */
    enum report_unit unit;
    size_t n_base, n_new;               /* samples the test counted */
    size_t recorded_base, recorded_new; /* watch lines: values in the histograms */
    size_t streams_base, streams_new;   /* watch lines: the class's streams (0 unknown) */
    size_t seconds_base, seconds_new;   /* watch lines: the seconds the phase ran (0 unknown) */
    size_t need_base, need_new;         /* untested lines: sample counts that would do */
    enum report_test test;
    double stat; /* Mann-Whitney U of NEW; quantile test: NEW's samples above the percentile */
    double z, p; /* z of the normal approximation (else 0); two-sided p */
    const char *tested_on; /* the samples' column: "p50_ms", "ticks.p50_ns", "open", ... */
    enum report_verdict verdict;
} report_cmp_line_t;

typedef struct report_cmp report_cmp_t;

/* Compares two runs (results and series of each), per (phase, class) of either run:
 * request classes on p50, p99, p99.9 and the error rate per second (series.csv), fleet classes
 * of a fleet phase on their ticks (the error rate per second), watch classes on open latency
 * (p50, p99) and propagation latency (p50, p99, p99.9) from their histograms. A (phase, class)
 * only one run has is untested. SQ_ENOMEM. */
int report_compare(const results_t *base, const report_series_t *bs, const results_t *nw,
                   const report_series_t *ns, const report_cmp_opts_t *opts, report_cmp_t **out);
void report_cmp_free(report_cmp_t *c);
size_t report_cmp_count(const report_cmp_t *c);
const report_cmp_line_t *report_cmp_at(const report_cmp_t *c, size_t i);
/* True when a line is worse: exit 1 for `squall compare`. */
bool report_cmp_worse(const report_cmp_t *c);
/* The verdict in words: "slower", "faster" (latency), "more errors", "fewer errors" (error
 * rate), "more synchronised", "less synchronised" (sync), "within noise", "untested". */
const char *report_verdict_word(const report_cmp_line_t *l);
const char *report_unit_name(enum report_unit u); /* "seconds", "ticks", "samples" */
const char *report_test_name(enum report_test t);

/* One warning line on o for each difference between the runs that can explain a change by
 * itself: another plan (meta plan_sha256), another target (meta target), other overrides
 * (sections.run.overrides; a run without that section is unknown there and not compared), and
 * a series.csv without p999_ms. Returns the number of lines. */
int report_cmp_warn(const report_cmp_t *c, const results_t *base, const results_t *nw, out_t *o);

/* Outputs: a terminal table (results stream), JSON (a new reference), an HTML side-by-side. */
void report_cmp_print(const report_cmp_t *c, out_t *o);
json_t *report_cmp_json(const report_cmp_t *c, const report_cmp_opts_t *opts);
int report_cmp_html(const report_cmp_t *c, const results_t *base, const results_t *nw,
                    const char *path, out_t *o);

/* ---- the tests (compare_stats.c) -------------------------------------------------------- */

typedef struct {
    double u, z, p; /* U of x (pairs x > y, ties one half); z (normal approximation only) */
    bool exact;     /* p from the exact null distribution */
} report_mw_t;

/* Mann-Whitney U test, two-sided, as scipy.stats.mannwhitneyu(method="auto") in scipy 1.10:
 * exact when a side has at most 8 values and none is tied (and the other at most 1,000), else
 * the normal approximation with tie and continuity corrections. p = 1 when either sample is
 * empty or every value is tied. SQ_ENOMEM. */
int report_mann_whitney(const double *x, size_t nx, const double *y, size_t ny, report_mw_t *r);
/* The smallest p the test can give for nx vs ny values (complete separation, no ties). */
double report_mann_whitney_best(size_t nx, size_t ny);
/* Fisher's exact test of the 2 x 2 table [[a, b], [c, d]], two-sided. */
double report_fisher_exact(int64_t a, int64_t b, int64_t c, int64_t d);

/* The quantile test of two histograms at percentile q: each one's values above the pooled q-th
 * percentile (threshold) against those at or below it, each row divided by div_b / div_n (values
 * that share one cause count once) and rounded, then Fisher's exact test. Both histograms must
 * have the same configuration. SQ_ENOMEM, SQ_EMISMATCH. */
typedef struct {
    int64_t threshold;
    int64_t above_base, below_base, above_new, below_new;
    double p;
} report_qt_t;
int report_quantile_test(const hist_t *b, const hist_t *n, double q, double div_b, double div_n,
                         report_qt_t *r);
/* The smallest p the quantile test can give for nb vs nn values at percentile q. */
double report_quantile_best(int64_t nb, int64_t nn, double q);

#endif
