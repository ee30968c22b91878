/* Two runs compared per (phase, class), one line per metric with a verdict: a test that the
 * difference is unlikely between runs of one configuration, plus a minimum change, so that
 * run-to-run noise is not called slower or faster. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "compare_int.h"
#include "squall/err.h"

/* One line's metric: what is shown (latency, metric, percentile of histogram m) and what the
 * test counts (a series.csv column per second, a storms key per tick). */
typedef struct {
    const char *latency, *metric;
    double pct; /* < 0: the error rate */
    int m;
    enum cmp_col col;
    const char *tick_key, *tick_column; /* NULL: per second also in a fleet phase */
} spec_t;

static const spec_t request_specs[] = {
    {"response", "p50", 50, RESULTS_M_RESPONSE, CMP_P50, "p50_ns", "ticks.p50_ns"},
    {"response", "p99", 99, RESULTS_M_RESPONSE, CMP_P99, "p99_ns", "ticks.p99_ns"},
    /* A tick's max is its p99.9 by nearest rank when it had fewer than 500 requests. */
    {"response", "p99.9", 99.9, RESULTS_M_RESPONSE, CMP_P999, "max_ns", "ticks.max_ns"},
    {NULL, "error_rate", -1, RESULTS_M_RESPONSE, CMP_ERRORS, NULL, NULL},
};
static const spec_t watch_specs[] = {
    {"open", "p50", 50, RESULTS_M_OPEN, 0, NULL, NULL},
    {"open", "p99", 99, RESULTS_M_OPEN, 0, NULL, NULL},
    {"propagation", "p50", 50, RESULTS_M_PROPAGATION, 0, NULL, NULL},
    {"propagation", "p99", 99, RESULTS_M_PROPAGATION, 0, NULL, NULL},
    {"propagation", "p99.9", 99.9, RESULTS_M_PROPAGATION, 0, NULL, NULL},
};
#define N_SPECS(a) (sizeof(a) / sizeof((a)[0]))
/* A fleet action's synchronisation: R̄ of its whole windows (the "sync" section), compared like a
 * latency (Mann-Whitney U over the windows). The smallest change of the median R̄ that counts is
 * CMP_SYNC_MIN_CHANGE, 0.05: an evenly spread or jittered fleet's R̄ wanders by about 1/sqrt(n) from window to window
 * by chance (Rayleigh: E[n R̄²] = 1 for uniform phases), under 0.06 from 300 sends on. */
static const spec_t sync_spec = {"sync", "r_bar", 50, RESULTS_M_RESPONSE, 0, NULL, NULL};

/* The state of one comparison while its lines are built. */
typedef struct {
    report_cmp_t *c;
    cmp_run_t run[2]; /* BASE, NEW */
    const report_cmp_opts_t *o;
    hist_t *h[2]; /* scratch, each in its run's histogram configuration */
    cmp_vec_t v[2];
    const char *phase, *cls;
    bool present[2];
} ctx_t;

void report_cmp_opts_default(report_cmp_opts_t *opts)
{
    *opts = (report_cmp_opts_t){.false_alarm = 0.01,
                                .min_abs_ms = 1.0,
                                .min_tail_ms = 3.0,
                                .min_rel = 0.10,
                                .min_abs_err = 0.01};
}

const char *report_verdict_word(const report_cmp_line_t *l)
{
    bool err = !l->latency, sync = l->latency && !strcmp(l->latency, "sync");
    switch (l->verdict) {
    case REPORT_WORSE:
        return err ? "more errors" : sync ? "more synchronised" : "slower";
    case REPORT_BETTER:
        return err ? "fewer errors" : sync ? "less synchronised" : "faster";
    case REPORT_UNTESTED:
        return "untested";
    default:
        return "within noise";
    }
}

const char *report_unit_name(enum report_unit u)
{
    return u == REPORT_UNIT_TICKS     ? "ticks"
           : u == REPORT_UNIT_WATCH   ? "samples"
           : u == REPORT_UNIT_WINDOWS ? "windows"
                                      : "seconds";
}

const char *report_test_name(enum report_test t)
{
    static const char *const names[] = {"none", "mann-whitney exact", "mann-whitney normal",
                                        "quantile"};
    return names[t];
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

/* ---- untested lines: how many samples would do ------------------------------------------- */

/* The smallest p a test can give for nb vs nn samples (at percentile q, where it matters). */
typedef double (*best_fn)(size_t nb, size_t nn, double q);

static double mw_best(size_t nb, size_t nn, double q)
{
    (void)q;
    return report_mann_whitney_best(nb, nn);
}

static double qt_best(size_t nb, size_t nn, double q)
{
    return report_quantile_best((int64_t)nb, (int64_t)nn, q);
}

#define NEED_MAX ((size_t)1 << 40)

/* The first k in (lo, hi] with best(k, other) < alpha, given best(hi, other) < alpha. */
static size_t bisect(best_fn best, size_t lo, size_t hi, size_t other, double q, double alpha)
{
    while (hi > lo + 1) {
        size_t mid = lo + (hi - lo) / 2;
        if (best(mid, other ? other : mid, q) < alpha)
            hi = mid;
        else
            lo = mid;
    }
    return hi;
}

/* Sample counts that would be enough: the larger side as it is and the fewest on the smaller
 * side, when that can do; else the fewest equal counts on both. */
static void needs(report_cmp_line_t *l, best_fn best, double q, double alpha)
{
    size_t k = 1;
    while (k < NEED_MAX && best(k, k, q) >= alpha)
        k *= 2;
    if (k >= NEED_MAX)
        return; /* no count would do: left 0 */
    size_t equal = bisect(best, k / 2, k, 0, q, alpha);
    bool base_small = l->n_base <= l->n_new;
    size_t small = base_small ? l->n_base : l->n_new, big = base_small ? l->n_new : l->n_base;
    size_t ns = equal, nb = equal;
    if (big >= equal && best(equal, big, q) < alpha) {
        ns = bisect(best, small, equal, big, q, alpha);
        nb = big;
    }
    l->need_base = base_small ? ns : nb;
    l->need_new = base_small ? nb : ns;
}

/* The verdict of a line from its test, the minimum change and what its sample counts allow. */
static void decide(const ctx_t *x, report_cmp_line_t *l, double pct, best_fn best)
{
    const report_cmp_opts_t *o = x->o;
    double change = l->new_med - l->base_med;
    double floor_abs = l->unit == REPORT_UNIT_WINDOWS ? CMP_SYNC_MIN_CHANGE
                       : pct < 0                      ? o->min_abs_err
                       : pct > 50                     ? o->min_tail_ms
                                                      : o->min_abs_ms;
    double q = pct < 0 ? 50 : pct;
    if (best(l->n_base, l->n_new, q) >= o->false_alarm) {
        l->verdict = REPORT_UNTESTED;
        needs(l, best, q, o->false_alarm);
    } else if (l->p < o->false_alarm && fabs(change) > floor_abs &&
               fabs(change) > o->min_rel * fabs(l->base_med)) {
        l->verdict = change > 0 ? REPORT_WORSE : REPORT_BETTER;
    } else {
        l->verdict = REPORT_WITHIN_NOISE;
    }
}

/* ---- lines ---------------------------------------------------------------------------------- */

static report_cmp_line_t *new_line(ctx_t *x, const spec_t *sp, enum report_unit unit)
{
    report_cmp_line_t *l = add_line(x->c);
    if (!l)
        return NULL;
    *l = (report_cmp_line_t){.phase = x->phase,
                             .cls = x->cls,
                             .latency = sp->latency,
                             .metric = sp->metric,
                             .base = NAN,
                             .new_value = NAN,
                             .base_med = NAN,
                             .new_med = NAN,
                             .unit = unit,
                             .p = 1};
    for (int k = 0; k < 2; k++) {
        double *v = k ? &l->new_value : &l->base;
        if (x->present[k] &&
            !cmp_whole(x->run[k].res, x->phase, x->cls, sp->m, sp->pct, x->h[k], v))
            *v = NAN;
    }
    return l;
}

/* The samples of both runs into x->v: per tick (key of the storms section's ticks) or per
 * second (column col of series.csv). */
static int gather(ctx_t *x, const char *tick_key, enum cmp_col col)
{
    for (int k = 0; k < 2; k++) {
        const cmp_run_t *r = &x->run[k];
        x->v[k].n = 0;
        int rc = !x->present[k] ? 0
                 : tick_key     ? cmp_ticks(r->res, x->phase, x->cls, tick_key, &x->v[k])
                                : cmp_seconds(r->series, x->phase, x->cls, col, &x->v[k]);
        if (rc)
            return rc;
    }
    return 0;
}

/* The Mann-Whitney U test of NEW's samples x->v[1] against BASE's x->v[0] into l, their medians
 * and the line's verdict. */
static int mw_test(ctx_t *x, report_cmp_line_t *l, double pct)
{
    report_mw_t mw;
    int rc = report_mann_whitney(x->v[1].v, x->v[1].n, x->v[0].v, x->v[0].n, &mw);
    if (rc)
        return rc;
    l->n_base = l->recorded_base = x->v[0].n;
    l->n_new = l->recorded_new = x->v[1].n;
    l->stat = mw.u;
    l->z = mw.z;
    l->p = mw.p;
    l->test = !l->n_base || !l->n_new ? REPORT_TEST_NONE
              : mw.exact              ? REPORT_TEST_MW_EXACT
                                      : REPORT_TEST_MW_NORMAL;
    l->base_med = median(x->v[0].v, x->v[0].n);
    l->new_med = median(x->v[1].v, x->v[1].n);
    decide(x, l, pct, mw_best);
    return 0;
}

/* Per-second or per-tick samples of one metric, and the Mann-Whitney U test of NEW vs BASE. */
static int mw_line(ctx_t *x, const spec_t *sp, enum report_unit unit)
{
    static const char *const cols[] = {"p50_ms", "p99_ms", "p999_ms", "max_ms", "errors/completed"};
    report_cmp_line_t *l = new_line(x, sp, unit);
    if (!l)
        return SQ_ENOMEM;
    bool ticks = unit == REPORT_UNIT_TICKS && sp->tick_key;
    bool fallback = sp->col == CMP_P999 && (x->c->lacks_p999[0] || x->c->lacks_p999[1]);
    enum cmp_col col = fallback ? CMP_MAX : sp->col;
    l->unit = ticks ? REPORT_UNIT_TICKS : REPORT_UNIT_SECONDS;
    l->tested_on = ticks ? sp->tick_column : cols[col];
    int rc = gather(x, ticks ? sp->tick_key : NULL, col);
    return rc ? rc : mw_test(x, l, sp->pct);
}

/* The divisor of a watch histogram's counts: values that share one cause count once. Each write
 * reaches every stream of the class and streams open together, so up to `streams` values share
 * a cause; values of one second share its conditions (the machine's load, a fleet's burst), so
 * the histogram counts at most one sample per second the phase ran, the unit of evidence of the
 * per-second tests. Measured on a 20 s storm against the embedded target: without the second
 * bound, two runs of one configuration differed at propagation p99 with p = 2e-24. */
static double watch_divisor(size_t recorded, size_t streams, size_t seconds)
{
    double d = streams ? (double)streams : 1;
    if (seconds && (double)recorded / (double)seconds > d)
        d = (double)recorded / (double)seconds;
    return d;
}

/* A watch metric: the quantile test of the two histograms, their counts divided as above. */
static int watch_line(ctx_t *x, const spec_t *sp)
{
    report_cmp_line_t *l = new_line(x, sp, REPORT_UNIT_WATCH);
    if (!l)
        return SQ_ENOMEM;
    l->tested_on = sp->latency;
    bool has[2];
    double div[2];
    for (int k = 0; k < 2; k++) {
        const cmp_run_t *r = &x->run[k];
        has[k] = x->present[k] && cmp_hist(r->res, x->phase, x->cls, sp->m, x->h[k]);
        size_t rec = has[k] ? (size_t)hist_count(x->h[k]) : 0;
        size_t streams = x->present[k] ? cmp_streams(r->res, x->phase, x->cls) : 0;
        size_t secs = x->present[k] ? cmp_phase_seconds(r->res, r->series, x->phase) : 0;
        div[k] = watch_divisor(rec, streams, secs);
        *(k ? &l->recorded_new : &l->recorded_base) = rec;
        *(k ? &l->streams_new : &l->streams_base) = streams;
        *(k ? &l->seconds_new : &l->seconds_base) = secs;
        *(k ? &l->n_new : &l->n_base) = (size_t)floor((double)rec / div[k] + 0.5);
    }
    l->base_med = l->base;
    l->new_med = l->new_value;
    if (has[0] && has[1]) {
        report_qt_t qt;
        int rc = report_quantile_test(x->h[0], x->h[1], sp->pct, div[0], div[1], &qt);
        if (rc && rc != SQ_EMISMATCH)
            return rc;
        l->n_base = (size_t)(qt.above_base + qt.below_base);
        l->n_new = (size_t)(qt.above_new + qt.below_new);
        l->stat = (double)qt.above_new;
        l->p = qt.p;
        l->test = rc ? REPORT_TEST_NONE : REPORT_TEST_QUANTILE;
    }
    decide(x, l, sp->pct, qt_best);
    return 0;
}

/* The synchronisation line of a fleet action: the whole windows' R̄ of both runs, their medians
 * as the line's values. */
static int sync_line(ctx_t *x)
{
    report_cmp_line_t *l = new_line(x, &sync_spec, REPORT_UNIT_WINDOWS);
    if (!l)
        return SQ_ENOMEM;
    l->tested_on = "sync.windows.r_bar";
    for (int k = 0; k < 2; k++) {
        x->v[k].n = 0;
        int rc = x->present[k] ? cmp_sync_windows(x->run[k].res, x->phase, x->cls, &x->v[k]) : 0;
        if (rc)
            return rc;
    }
    int rc = mw_test(x, l, sync_spec.pct);
    l->base = l->base_med;
    l->new_value = l->new_med;
    return rc;
}

/* True when (phase, cls) has any answered cell in r. */
static bool present(const results_t *r, const char *phase, const char *cls)
{
    for (size_t i = 0; i < results_cell_count(r); i++) {
        const results_cell_t *c = results_cell_at(r, i);
        if (!strcmp(results_cell_phase(c), phase) && !strcmp(results_cell_class(c), cls) &&
            strcmp(results_cell_outcome(c), "cancelled") != 0)
            return true;
    }
    return false;
}

/* The lines of one (phase, class): a watch class on its histograms; a fleet class per tick
 * when every run that has it recorded ticks; anything else per second. */
static int compare_pair(ctx_t *x, const char *phase, const char *cls)
{
    x->phase = phase;
    x->cls = cls;
    size_t ticks[2];
    for (int k = 0; k < 2; k++) {
        x->present[k] = present(x->run[k].res, phase, cls);
        ticks[k] = x->present[k] ? cmp_tick_count(x->run[k].res, phase, cls) : 0;
    }
    int rc = 0;
    if (cmp_is_watch(x->run[0].res, phase, cls) || cmp_is_watch(x->run[1].res, phase, cls)) {
        for (size_t i = 0; rc == 0 && i < N_SPECS(watch_specs); i++)
            rc = watch_line(x, &watch_specs[i]);
        return rc;
    }
    bool per_tick =
        (ticks[0] || ticks[1]) && (ticks[0] || !x->present[0]) && (ticks[1] || !x->present[1]);
    enum report_unit unit = per_tick ? REPORT_UNIT_TICKS : REPORT_UNIT_SECONDS;
    for (size_t i = 0; rc == 0 && i < N_SPECS(request_specs); i++)
        rc = mw_line(x, &request_specs[i], unit);
    bool gauged = false;
    for (int k = 0; k < 2; k++) {
        x->v[k].n = 0;
        if (rc == 0 && x->present[k])
            rc = cmp_sync_windows(x->run[k].res, phase, cls, &x->v[k]);
        gauged |= x->v[k].n > 0;
    }
    return rc == 0 && gauged ? sync_line(x) : rc;
}

/* True when an answered cell of (phase, class) comes before index upto in r. */
static bool seen_before(const results_t *r, size_t upto, const char *phase, const char *cls)
{
    for (size_t i = 0; i < upto; i++) {
        const results_cell_t *c = results_cell_at(r, i);
        if (!strcmp(results_cell_phase(c), phase) && !strcmp(results_cell_class(c), cls) &&
            strcmp(results_cell_outcome(c), "cancelled") != 0)
            return true;
    }
    return false;
}

/* Every (phase, class) of BASE in file order, then those only NEW has. */
static int compare_all(ctx_t *x)
{
    int rc = 0;
    for (int k = 0; k < 2; k++) {
        const results_t *r = x->run[k].res;
        for (size_t i = 0; rc == 0 && i < results_cell_count(r); i++) {
            const results_cell_t *cell = results_cell_at(r, i);
            const char *phase = results_cell_phase(cell), *cls = results_cell_class(cell);
            if (strcmp(results_cell_outcome(cell), "cancelled") == 0 ||
                seen_before(r, i, phase, cls) ||
                (k == 1 &&
                 seen_before(x->run[0].res, results_cell_count(x->run[0].res), phase, cls)))
                continue;
            rc = compare_pair(x, phase, cls);
        }
    }
    return rc;
}

static int scratch_hist(const results_t *r, hist_t **h)
{
    int64_t lo, hi;
    int digits;
    results_hist_config(r, &lo, &hi, &digits);
    return hist_new(lo, hi, digits, h);
}

int report_compare(const results_t *base, const report_series_t *bs, const results_t *nw,
                   const report_series_t *ns, const report_cmp_opts_t *opts, report_cmp_t **out)
{
    *out = NULL;
    ctx_t x = {.c = calloc(1, sizeof(report_cmp_t)), .run = {{base, bs}, {nw, ns}}, .o = opts};
    int rc = x.c ? 0 : SQ_ENOMEM;
    for (int k = 0; rc == 0 && k < 2; k++) {
        const report_series_t *s = x.run[k].series;
        x.c->lacks_p999[k] = report_series_count(s) > 0 && !report_series_has_p999(s);
        x.c->series[k] = s;
        rc = scratch_hist(x.run[k].res, &x.h[k]);
    }
    if (rc == 0)
        rc = compare_all(&x);
    for (int k = 0; k < 2; k++) {
        hist_free(x.h[k]);
        free(x.v[k].v);
    }
    if (rc) {
        report_cmp_free(x.c);
        return rc;
    }
    *out = x.c;
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

bool report_cmp_worse(const report_cmp_t *c)
{
    for (size_t i = 0; i < c->n; i++)
        if (c->lines[i].verdict == REPORT_WORSE)
            return true;
    return false;
}
