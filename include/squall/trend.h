/* Trends over many runs (`squall trend`): runs ordered by start time, per phase x class the
 * p50, p99, p99.9 and error rate of each run, and the change points of each such series.
 *
 * Concepts. A *group* is the runs that share one plan (the plan file's SHA-256), one list of
 * --set overrides and one squall version: only those are compared with each other. A *series*
 * is one metric of one (phase, class) over a group's runs. A *change point* splits a series into
 * segments with different means; it is found by PELT (Killick, Fearnhead & Eckley, "Optimal
 * Detection of Changepoints With a Linear Computational Cost", JASA 107(500), 2012) with the
 * normal mean-change cost, the known variance estimated from the series (MAD of first
 * differences) and the penalty 2 ln n (Schwarz's criterion, two parameters per change: its
 * place and the new mean). Each change's *confidence* is 1 - p of the two-sided Mann-Whitney U
 * test between the segment before and the one after it; a change is *significant* when p is
 * below the false-alarm level and its size (difference of the segment means) passes the same
 * floors as `squall compare` (report_cmp_opts_t). Candidates that are not significant are
 * merged away weakest first and the others tested again (trend_judge); they stay listed.
 * Ownership: a trend_t owns its groups, series and copies of every string. */
#ifndef SQUALL_TREND_H
#define SQUALL_TREND_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "squall/out.h"
#include "squall/report.h"
#include "squall/results.h"

#define TREND_METHOD "PELT (Killick, Fearnhead & Eckley, JASA 2012), normal mean change"

/* ---- the method (trend_pelt.c) ----------------------------------------------------------- */

/* The noise of a series: the median absolute deviation of its first differences divided by
 * 0.6745 sqrt(2) (the normal consistency factor; a difference has twice the variance), at
 * least floor. NaN values are skipped. */
double trend_sigma(const double *y, size_t n, double floor);

/* PELT (Killick et al. 2012, Algorithm 2) with the cost C(y[a..b)) = sum (y_i - mean)^2 / sigma^2
 * and penalty beta (K = 0 for this cost), every segment at least min_len values long. Writes
 * the starts of the segments after the first (indices in [min_len, n - min_len], increasing)
 * into starts (room for n) and their number into *n_starts. sigma > 0. SQ_ENOMEM. */
int trend_pelt(const double *y, size_t n, double sigma, double beta, size_t min_len, size_t *starts,
               size_t *n_starts);

/* The shortest segment trend uses: two runs (one run apart from its neighbours is an outlier,
 * not a new level). */
#define TREND_MIN_SEGMENT 2

/* The penalty used: 2 ln n (n >= 2), 0 below. */
double trend_penalty(size_t n);

/* ---- runs, groups and series (trend.c) --------------------------------------------------- */

typedef struct {
    size_t first;         /* index in the group of the first run after the change */
    double before, after; /* means of the segment before and after it */
    double p;             /* two-sided Mann-Whitney p between the two segments */
    bool significant;     /* p < false_alarm and |after - before| past the floors */
    bool worse;           /* after > before: slower, more errors, more synchronised */
} trend_change_t;

/* Judges PELT's candidates starts[0..n) of y[0..k): each is tested between the segments its
 * live neighbours bound; while some are not significant, the weakest (the largest p; on a tie
 * the smallest size) is merged into its neighbours and the rest are tested again. Without this
 * a split of noise beside a real change shortens the real change's segments below what the
 * test can resolve (5 runs against 3 cannot reach p < 1 %). out[i] (room for n): the survivors
 * with their final test, all significant; each merged candidate with the test that merged it,
 * not significant. out[i].first is an index of y. floor: the metric's minimum change.
 * SQ_ENOMEM. */
int trend_judge(const double *y, size_t k, const size_t *starts, size_t n, double floor,
                const report_cmp_opts_t *o, trend_change_t *out);

typedef struct {
    const char *phase, *cls;
    const char *metric; /* "p50", "p99", "p99.9" (ms of response time), "error_rate", or
                         * "sync_max" (a fleet action's largest R̄ of a whole window) */
    double *values;     /* one per run of the group; NaN where the run has no such cell */
    double sigma;
    double objective; /* the plan's limit on this metric for this (phase, class); NaN none */
    trend_change_t *changes;
    size_t n_changes;
} trend_series_t;

typedef struct {
    const char *plan, *plan_sha256, *overrides, *version; /* overrides: "a=1 b=2" or "" */
    size_t n_runs;
    const char **dirs; /* in start order */
    int64_t *start_ms; /* unix ms */
    trend_series_t *series; /* per (phase, class) the four metrics in order, n_series / 4 */
    size_t n_series;
    trend_series_t *sync; /* per fleet action (phase, class) gauged: "sync_max" */
    size_t n_sync;
} trend_group_t;

typedef struct trend trend_t;

/* Groups the runs (res[i] read from dirs[i]; res stays the caller's), orders each group by start
 * time and finds the change points of every series. SQ_ENOMEM. */
int trend_new(results_t *const *res, const char *const *dirs, size_t n,
              const report_cmp_opts_t *opts, trend_t **out);
void trend_free(trend_t *t);
size_t trend_group_count(const trend_t *t);
const trend_group_t *trend_group_at(const trend_t *t, size_t i);
/* True when the newest segment of a series begins with a significant change for the worse. */
bool trend_newest_worse(const trend_t *t);

/* ---- outputs (trend_out.c) ---------------------------------------------------------------- */

void trend_print(const trend_t *t, out_t *o);
/* {"format": "squall-trend", "version": 1, ...}; NULL when out of memory. */
json_t *trend_json(const trend_t *t);
/* One page: per group, one plot per phase x class (p50, p99, p99.9 over runs, change points
 * marked, objectives drawn) and a table of the changes. SQ_EIO with a line on o. */
int trend_html(const trend_t *t, const char *path, out_t *o);

#endif
