/* Two runs compared per (phase, class): p50, p99, p99.9 and the error rate, each with a
 * verdict from the Mann-Whitney U test over the per-second samples of series.csv plus a
 * minimum change, so run-to-run noise is not called a regression. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/report.h"

struct report_cmp {
    report_cmp_line_t *lines;
    size_t n, cap;
};

/* The four metrics: the percentile read from the histograms (or -1 for the error rate) and the
 * series.csv column tested (series.csv has no per-second p99.9: its nearest tail column, the
 * per-second max, stands in for it). */
static const struct {
    const char *name;
    double pct;
    const char *column;
} metrics[] = {
    {"p50", 50, "p50_ms"},
    {"p99", 99, "p99_ms"},
    {"p99.9", 99.9, "max_ms"},
    {"error_rate", -1, "errors/completed"},
};
#define N_METRICS (sizeof metrics / sizeof metrics[0])

void report_cmp_opts_default(report_cmp_opts_t *opts)
{
    *opts = (report_cmp_opts_t){
        .alpha = 0.01, .min_abs_ms = 1.0, .min_tail_ms = 3.0, .min_rel = 0.10, .min_abs_err = 0.01};
}

const char *report_verdict_name(enum report_verdict v)
{
    static const char *const names[] = {"no significant change", "regression", "improvement",
                                        "untested"};
    return names[v];
}

static bool answered(const char *oc)
{
    return strcmp(oc, "cancelled") != 0;
}

/* Whole-phase values of (phase, cls): percentiles in ms and the error rate; false if absent. */
static bool whole(const results_t *r, const char *phase, const char *cls, hist_t *h,
                  double out[N_METRICS])
{
    int64_t n = 0, errors = 0;
    hist_reset(h);
    for (size_t i = 0; i < results_cell_count(r); i++) {
        const results_cell_t *c = results_cell_at(r, i);
        const char *oc = results_cell_outcome(c);
        if (strcmp(results_cell_phase(c), phase) || strcmp(results_cell_class(c), cls) ||
            !answered(oc))
            continue;
        int64_t k = results_cell_counters((results_cell_t *)c)->count;
        n += k;
        errors += strcmp(oc, "2xx") && strcmp(oc, "3xx") ? k : 0;
        const hist_t *rh = results_cell_hist_find(c, RESULTS_M_RESPONSE);
        if (rh)
            hist_merge(h, rh);
    }
    for (size_t m = 0; m < N_METRICS; m++)
        out[m] = metrics[m].pct < 0 ? (n ? (double)errors / (double)n : 0)
                                    : (double)hist_value_at(h, metrics[m].pct) / 1e6;
    return n > 0;
}

/* Per-second samples of metric m for (phase, cls): seconds in which something completed. */
static size_t samples(const report_series_t *s, const char *phase, const char *cls, size_t m,
                      double *out)
{
    size_t n = 0;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (r->completed <= 0 || strcmp(r->phase, phase) || strcmp(r->cls, cls))
            continue;
        double v[] = {r->p50_ms, r->p99_ms, r->max_ms, (double)r->errors / (double)r->completed};
        out[n++] = v[m];
    }
    return n;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *v, size_t n)
{
    if (n == 0)
        return NAN;
    qsort(v, n, sizeof(*v), cmp_double);
    return n % 2 ? v[n / 2] : (v[n / 2 - 1] + v[n / 2]) / 2;
}

static report_cmp_line_t *add_line(report_cmp_t *c)
{
    if (c->n == c->cap) {
        size_t cap = c->cap ? 2 * c->cap : 32;
        report_cmp_line_t *nl = realloc(c->lines, cap * sizeof(*nl));
        if (!nl)
            return NULL;
        c->lines = nl;
        c->cap = cap;
    }
    memset(&c->lines[c->n], 0, sizeof(c->lines[0]));
    return &c->lines[c->n++];
}

/* True when n and m per-second samples can reach p < alpha at all: with complete separation
 * and no ties, |U - mu| = n m / 2 (e.g. 5 seconds against 5 cannot reach 0.01). */
static bool resolvable(size_t n, size_t m, double alpha)
{
    double fn = (double)n, fm = (double)m;
    if (n < 2 || m < 2)
        return false;
    double z = (fn * fm / 2 - 0.5) / sqrt(fn * fm * (fn + fm + 1) / 12);
    return erfc(z / sqrt(2)) < alpha;
}

/* The verdict of one line from its test and the minimum change. */
static void decide(report_cmp_line_t *l, size_t m, const report_cmp_opts_t *o)
{
    double change = l->new_med - l->base_med;
    double floor_abs = metrics[m].pct < 0    ? o->min_abs_err
                       : metrics[m].pct > 50 ? o->min_tail_ms
                                             : o->min_abs_ms;
    double floor_rel = o->min_rel * fabs(l->base_med);
    if (!resolvable(l->n_base, l->n_new, o->alpha))
        l->verdict = REPORT_UNTESTED;
    else if (l->p < o->alpha && fabs(change) > floor_abs && fabs(change) > floor_rel)
        l->verdict = change > 0 ? REPORT_REGRESSION : REPORT_IMPROVEMENT;
    else
        l->verdict = REPORT_SAME;
}

/* Lines for one (phase, cls) of BASE; scratch holds the samples of both runs. */
static int compare_pair(report_cmp_t *c, const results_t *b, const report_series_t *bs,
                        const results_t *nw, const report_series_t *ns, const char *phase,
                        const char *cls, hist_t *h, double *sb, double *sn,
                        const report_cmp_opts_t *o)
{
    double vb[N_METRICS], vn[N_METRICS];
    whole(b, phase, cls, h, vb);
    bool in_new = whole(nw, phase, cls, h, vn);
    for (size_t m = 0; m < N_METRICS; m++) {
        report_cmp_line_t *l = add_line(c);
        if (!l)
            return SQ_ENOMEM;
        *l = (report_cmp_line_t){.phase = phase,
                                 .cls = cls,
                                 .metric = metrics[m].name,
                                 .base = vb[m],
                                 .new_value = in_new ? vn[m] : NAN,
                                 .tested_on = metrics[m].column,
                                 .p = 1};
        l->n_base = samples(bs, phase, cls, m, sb);
        l->n_new = in_new ? samples(ns, phase, cls, m, sn) : 0;
        int rc = report_mann_whitney(sn, l->n_new, sb, l->n_base, &l->u, &l->z, &l->p);
        if (rc)
            return rc;
        l->base_med = median(sb, l->n_base);
        l->new_med = median(sn, l->n_new);
        decide(l, m, o);
    }
    return 0;
}

/* Distinct (phase, class) pairs of BASE's answered cells, walked in file order. */
static bool seen_before(const results_t *r, size_t upto, const char *phase, const char *cls)
{
    for (size_t i = 0; i < upto; i++) {
        const results_cell_t *c = results_cell_at(r, i);
        if (!strcmp(results_cell_phase(c), phase) && !strcmp(results_cell_class(c), cls) &&
            answered(results_cell_outcome(c)))
            return true;
    }
    return false;
}

/* A (phase, class) only NEW has: its values, untested. */
static int only_new(report_cmp_t *c, const results_t *nw, const char *phase, const char *cls,
                    hist_t *h)
{
    double vn[N_METRICS];
    whole(nw, phase, cls, h, vn);
    for (size_t m = 0; m < N_METRICS; m++) {
        report_cmp_line_t *l = add_line(c);
        if (!l)
            return SQ_ENOMEM;
        *l = (report_cmp_line_t){.phase = phase,
                                 .cls = cls,
                                 .metric = metrics[m].name,
                                 .base = NAN,
                                 .new_value = vn[m],
                                 .base_med = NAN,
                                 .new_med = NAN,
                                 .tested_on = metrics[m].column,
                                 .p = 1,
                                 .verdict = REPORT_UNTESTED};
    }
    return 0;
}

int report_compare(const results_t *base, const report_series_t *bs, const results_t *nw,
                   const report_series_t *ns, const report_cmp_opts_t *opts, report_cmp_t **out)
{
    *out = NULL;
    report_cmp_t *c = calloc(1, sizeof(*c));
    size_t cap = report_series_count(bs) + report_series_count(ns) + 1;
    double *sb = malloc(cap * sizeof(double)), *sn = malloc(cap * sizeof(double));
    hist_t *h = NULL;
    int64_t lo, hi;
    int digits;
    results_hist_config(base, &lo, &hi, &digits);
    int rc = c && sb && sn ? hist_new(lo, hi, digits, &h) : SQ_ENOMEM;
    for (size_t i = 0; rc == 0 && i < results_cell_count(base); i++) {
        const results_cell_t *cell = results_cell_at(base, i);
        const char *phase = results_cell_phase(cell), *cls = results_cell_class(cell);
        if (answered(results_cell_outcome(cell)) && !seen_before(base, i, phase, cls))
            rc = compare_pair(c, base, bs, nw, ns, phase, cls, h, sb, sn, opts);
    }
    for (size_t i = 0; rc == 0 && i < results_cell_count(nw); i++) {
        const results_cell_t *cell = results_cell_at(nw, i);
        const char *phase = results_cell_phase(cell), *cls = results_cell_class(cell);
        if (answered(results_cell_outcome(cell)) && !seen_before(nw, i, phase, cls) &&
            !seen_before(base, results_cell_count(base), phase, cls))
            rc = only_new(c, nw, phase, cls, h);
    }
    hist_free(h);
    free(sb);
    free(sn);
    if (rc) {
        report_cmp_free(c);
        return rc;
    }
    *out = c;
    return 0;
}

void report_cmp_free(report_cmp_t *c)
{
    if (c)
        free(c->lines);
    free(c);
}

size_t report_cmp_count(const report_cmp_t *c)
{
    return c->n;
}

const report_cmp_line_t *report_cmp_at(const report_cmp_t *c, size_t i)
{
    return i < c->n ? &c->lines[i] : NULL;
}

bool report_cmp_regressed(const report_cmp_t *c)
{
    for (size_t i = 0; i < c->n; i++)
        if (c->lines[i].verdict == REPORT_REGRESSION)
            return true;
    return false;
}
