/* Reports: report.html (one self-contained page: inline SVG and CSS, no scripts, no network) and
 * the comparison of two runs (`squall compare`).
 *
 * Concepts. The *series* is a run's series.csv: one row per class per second (see
 * DEVELOPERS.md, "series.csv"); columns are found by their header names, so added columns are
 * ignored. A *comparison* pairs the (phase, class) cells of a BASE and a NEW run and tests, for
 * each of p50, p99, p99.9 and the error rate, whether NEW differs from BASE (Mann-Whitney U over
 * the per-second samples, see compare.c), giving a verdict: regression, improvement or no
 * significant change.
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
} report_row_t;

typedef struct report_series report_series_t;

/* Reads a series.csv. SQ_EIO when it cannot be opened, SQ_EPARSE (with a line on o naming the
 * file and line) when a required column is missing or a number is malformed. */
int report_series_read(const char *path, report_series_t **out, out_t *o);
/* An empty series (for a run whose series.csv is missing). */
int report_series_new(report_series_t **out);
void report_series_free(report_series_t *s);
size_t report_series_count(const report_series_t *s);
const report_row_t *report_series_at(const report_series_t *s, size_t i);
/* True when the file had the p999_ms column (an older squall wrote none). */
bool report_series_has_p999(const report_series_t *s);

/* ---- report.html ------------------------------------------------------------------------ */

/* Writes the report of res (with its per-second series s, which may be empty) to f. */
int report_html_write(FILE *f, const results_t *res, const report_series_t *s);
/* Writes DIR/report.html from res and DIR/series.csv (plots over time are left out, with a note,
 * when series.csv is missing). SQ_EIO with a line on o when the file cannot be written. */
int report_html_write_dir(const char *dir, const results_t *res, out_t *o);

/* ---- comparison ------------------------------------------------------------------------- */

enum report_verdict { REPORT_SAME, REPORT_REGRESSION, REPORT_IMPROVEMENT, REPORT_UNTESTED };

/* Change thresholds: a difference is a regression or an improvement only when the test says it
 * is significant (p < alpha) AND the medians of the per-second samples differ by more than
 * both an absolute floor (min_abs_ms for p50, min_tail_ms for p99 and p99.9, min_abs_err for
 * error rates) and min_rel (a fraction of BASE). Tails get a wider floor because on a shared
 * machine they move with the machine's load from one run to the next (measured on our 2-core
 * test machines: same-configuration runs differed by up to ~2.7 ms at p99.9 around 5 ms). */
typedef struct {
    double alpha;       /* 0.01 */
    double min_abs_ms;  /* 1.0 */
    double min_tail_ms; /* 3.0 */
    double min_rel;     /* 0.10 */
    double min_abs_err; /* 0.01 (one percentage point) */
} report_cmp_opts_t;

void report_cmp_opts_default(report_cmp_opts_t *opts);

/* One metric of one (phase, class) in both runs. */
typedef struct {
    const char *phase, *cls;
    const char *metric;       /* "p50", "p99", "p99.9" or "error_rate" */
    double base, new_value;   /* whole-phase values: ms from the histograms, or a fraction */
    double base_med, new_med; /* medians of the per-second samples the test used */
    size_t n_base, n_new;     /* per-second samples */
    double u, z, p;           /* Mann-Whitney U of NEW vs BASE, its z and two-sided p */
    const char *tested_on;    /* which per-second column: "p50_ms", "p99_ms", "max_ms", ... */
    enum report_verdict verdict;
} report_cmp_line_t;

typedef struct report_cmp report_cmp_t;

/* Compares two runs (results and series of each). (phase, class) pairs present in only one run
 * are listed as untested. SQ_ENOMEM. */
int report_compare(const results_t *base, const report_series_t *bs, const results_t *nw,
                   const report_series_t *ns, const report_cmp_opts_t *opts, report_cmp_t **out);
void report_cmp_free(report_cmp_t *c);
size_t report_cmp_count(const report_cmp_t *c);
const report_cmp_line_t *report_cmp_at(const report_cmp_t *c, size_t i);
bool report_cmp_regressed(const report_cmp_t *c);
const char *report_verdict_name(enum report_verdict v);

/* Outputs: a terminal table (results stream), JSON (a new reference), an HTML side-by-side. */
void report_cmp_print(const report_cmp_t *c, out_t *o);
json_t *report_cmp_json(const report_cmp_t *c, const report_cmp_opts_t *opts);
int report_cmp_html(const report_cmp_t *c, const results_t *base, const results_t *nw,
                    const char *path, out_t *o);

/* Mann-Whitney U test, two-sided, normal approximation with tie correction and continuity
 * correction (Mann & Whitney 1947; tie correction as in Lehmann, "Nonparametrics", 1975). U is
 * that of x (the count of pairs x > y, ties counting one half). p = 1 when either sample is
 * empty or every value is tied. Uses scratch space of (nx + ny) values; SQ_ENOMEM. */
int report_mann_whitney(const double *x, size_t nx, const double *y, size_t ny, double *u,
                        double *z, double *p);

#endif
