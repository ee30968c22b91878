/* `squall trend`'s model: runs grouped by plan, overrides and version, ordered by start time,
 * one series per (phase, class) and metric, and each series' change points (trend_pelt.c)
 * with their size and confidence. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "compare_int.h"
#include "squall/err.h"
#include "squall/hist.h"
#include "squall/trend.h"

#define N_METRICS 4
static const char *const metric_names[N_METRICS] = {"p50", "p99", "p99.9", "error_rate"};
static const double metric_pct[N_METRICS] = {50, 99, 99.9, -1};

struct trend {
    trend_group_t *groups;
    size_t n_groups;
    char **strings; /* every string the groups point at */
    size_t n_strings, cap_strings;
    report_cmp_opts_t opts;
};

static const char *keep(trend_t *t, const char *s)
{
    if (!s)
        s = "";
    if (t->n_strings == t->cap_strings) {
        size_t cap = t->cap_strings ? 2 * t->cap_strings : 64;
        char **v = realloc(t->strings, cap * sizeof(*v));
        if (!v)
            return NULL;
        t->strings = v;
        t->cap_strings = cap;
    }
    char *c = strdup(s);
    if (c)
        t->strings[t->n_strings++] = c;
    return c;
}

/* The --set overrides of a run ("" when none or unknown), space-separated. */
static char *overrides_text(const results_t *r)
{
    const json_t *list = json_object_get(results_section(r, "run"), "overrides"), *v;
    size_t i, len = 1;
    json_array_foreach(list, i, v) len +=
        strlen(json_string_value(v) ? json_string_value(v) : "") + 1;
    char *s = calloc(1, len);
    json_array_foreach(list, i, v)
    {
        if (!s)
            break;
        if (i)
            strcat(s, " ");
        strcat(s, json_string_value(v) ? json_string_value(v) : "");
    }
    return s;
}

/* The grouping key of a run: plan bytes, overrides, version. */
static bool same_group(const results_t *a, const results_t *b)
{
    const results_meta_t *ma = results_meta(a), *mb = results_meta(b);
    char *oa = overrides_text(a), *ob = overrides_text(b);
    bool same = oa && ob && strcmp(oa, ob) == 0 &&
                strcmp(ma->plan_sha256 ? ma->plan_sha256 : "",
                       mb->plan_sha256 ? mb->plan_sha256 : "") == 0 &&
                strcmp(ma->squall_version ? ma->squall_version : "",
                       mb->squall_version ? mb->squall_version : "") == 0;
    free(oa);
    free(ob);
    return same;
}

/* One run's four figures for (phase, cls): response p50, p99, p99.9 in ms and the error rate,
 * the whole-phase values `squall compare` reports (cmp_whole); NaN when the run has none. */
static int run_figures(const results_t *r, const char *phase, const char *cls, double *v)
{
    int64_t lo, hi;
    int digits;
    results_hist_config(r, &lo, &hi, &digits);
    hist_t *h;
    if (hist_new(lo, hi, digits, &h))
        return SQ_ENOMEM;
    for (int m = 0; m < N_METRICS; m++)
        if (!cmp_whole(r, phase, cls, RESULTS_M_RESPONSE, metric_pct[m], h, &v[m]))
            v[m] = NAN;
    hist_free(h);
    return 0;
}

/* The plan's tightest limit on metric m of (phase, cls), from the judgement section; NaN none. */
static double objective_of(const results_t *r, const char *phase, const char *cls, int m)
{
    const json_t *j = results_section(r, "judgement"), *o;
    double best = NAN;
    size_t i;
    json_array_foreach(json_object_get(j, "objectives"), i, o)
    {
        const char *oc = json_string_value(json_object_get(o, "class"));
        const char *op = json_string_value(json_object_get(o, "phase"));
        const char *metric = json_string_value(json_object_get(o, "metric"));
        const char *limit = json_string_value(json_object_get(o, "limit"));
        if (!oc || !limit || (strcmp(oc, "*") && strcmp(oc, cls)) || (op && strcmp(op, phase)))
            continue;
        double v = NAN;
        if (m < 3 && !strcmp(limit, "percentile") && metric && !strcmp(metric, "response") &&
            fabs(json_number_value(json_object_get(o, "percentile")) - metric_pct[m]) < 1e-9)
            v = json_number_value(json_object_get(o, "max_ms"));
        else if (m == 3 && !strcmp(limit, "error-rate"))
            v = json_number_value(json_object_get(o, "value"));
        if (!isnan(v) && (isnan(best) || v < best))
            best = v;
    }
    if (m == 3 && isnan(best) && json_is_number(json_object_get(j, "default_error_rate")))
        best = json_number_value(json_object_get(j, "default_error_rate"));
    return best;
}

/* The absolute floor a change of metric m must pass (compare's floors). */
static double abs_floor(const report_cmp_opts_t *o, int m)
{
    return m == 0 ? o->min_abs_ms : m < 3 ? o->min_tail_ms : o->min_abs_err;
}

static double mean_of(const double *x, size_t a, size_t b)
{
    double s = 0;
    for (size_t i = a; i < b; i++)
        s += x[i];
    return s / (double)(b - a);
}

/* The test of candidate j of starts[0..n) between the segments its live neighbours bound. */
static int test_one(const double *y, size_t k, const size_t *starts, size_t n, const bool *live,
                    size_t j, double floor, const report_cmp_opts_t *o, trend_change_t *ch)
{
    size_t a = 0, e = k, b = starts[j];
    for (size_t i = j; i-- > 0;)
        if (live[i]) {
            a = starts[i];
            break;
        }
    for (size_t i = j + 1; i < n; i++)
        if (live[i]) {
            e = starts[i];
            break;
        }
    report_mw_t mw;
    int rc = report_mann_whitney(y + b, e - b, y + a, b - a, &mw);
    if (rc)
        return rc;
    *ch = (trend_change_t){.first = b, .before = mean_of(y, a, b), .after = mean_of(y, b, e),
                           .p = mw.p};
    double d = fabs(ch->after - ch->before);
    ch->worse = ch->after > ch->before;
    ch->significant = mw.p < o->false_alarm && d > floor && d > o->min_rel * fabs(ch->before);
    return 0;
}

int trend_judge(const double *y, size_t k, const size_t *starts, size_t n, double floor,
                const report_cmp_opts_t *o, trend_change_t *out)
{
    bool *live = malloc((n + 1) * sizeof(*live));
    if (!live)
        return SQ_ENOMEM;
    for (size_t i = 0; i < n; i++)
        live[i] = true;
    int rc = 0;
    for (;;) {
        size_t weakest = n;
        for (size_t i = 0; i < n; i++) {
            if (!live[i])
                continue;
            if ((rc = test_one(y, k, starts, n, live, i, floor, o, &out[i])))
                goto out;
            const trend_change_t *c = &out[i], *w = weakest < n ? &out[weakest] : NULL;
            if (!c->significant &&
                (!w || c->p > w->p ||
                 (c->p == w->p && fabs(c->after - c->before) < fabs(w->after - w->before))))
                weakest = i;
        }
        if (weakest == n)
            break;
        live[weakest] = false; /* out[weakest] keeps the test that merged it away */
    }
out:
    free(live);
    return rc;
}

/* The change points of one series and their size, confidence and significance. The noise is
 * at least half the floor, so that a series steadier than the machine's resolution is not
 * split on differences too small to ever count. */
static int find_changes(trend_series_t *s, size_t n, double floor, const report_cmp_opts_t *o)
{
    double *x = malloc((n + 1) * sizeof(*x));
    size_t *idx = malloc((n + 1) * sizeof(*idx)), *st = malloc((n + 1) * sizeof(*st));
    size_t k = 0, ns = 0;
    int rc = SQ_ENOMEM;
    if (!x || !idx || !st)
        goto out;
    for (size_t i = 0; i < n; i++)
        if (!isnan(s->values[i])) {
            idx[k] = i;
            x[k++] = s->values[i];
        }
    s->sigma = trend_sigma(x, k, floor / 2);
    if ((rc = trend_pelt(x, k, s->sigma, trend_penalty(k), TREND_MIN_SEGMENT, st, &ns)) || ns == 0)
        goto out;
    rc = SQ_ENOMEM;
    if (!(s->changes = calloc(ns, sizeof(*s->changes))))
        goto out;
    if ((rc = trend_judge(x, k, st, ns, floor, o, s->changes)))
        goto out;
    for (size_t c = 0; c < ns; c++)
        s->changes[c].first = idx[s->changes[c].first];
    s->n_changes = ns;
out:
    free(x);
    free(idx);
    free(st);
    return rc;
}

/* Adds one series per metric for (phase, cls) to g, unless it is there already. */
static int add_key(trend_t *t, trend_group_t *g, const char *phase, const char *cls)
{
    for (size_t i = 0; i < g->n_series; i += N_METRICS)
        if (!strcmp(g->series[i].phase, phase) && !strcmp(g->series[i].cls, cls))
            return 0;
    trend_series_t *v = realloc(g->series, (g->n_series + N_METRICS) * sizeof(*v));
    if (!v)
        return SQ_ENOMEM;
    g->series = v;
    for (int m = 0; m < N_METRICS; m++) {
        trend_series_t *s = &g->series[g->n_series + (size_t)m];
        *s = (trend_series_t){.phase = keep(t, phase),
                              .cls = keep(t, cls),
                              .metric = metric_names[m],
                              .objective = NAN};
        s->values = malloc(g->n_runs * sizeof(double));
        for (size_t r = 0; s->values && r < g->n_runs; r++)
            s->values[r] = NAN;
        if (!s->values || !s->phase || !s->cls) {
            g->n_series += (size_t)m + 1;
            return SQ_ENOMEM;
        }
    }
    g->n_series += N_METRICS;
    return 0;
}

/* A run's largest R̄ over the whole windows of fleet action cls in phase; NaN when none. */
static double sync_max(const results_t *r, const char *phase, const char *cls)
{
    cmp_vec_t v = {0};
    double m = NAN;
    if (cmp_sync_windows(r, phase, cls, &v) == 0)
        for (size_t i = 0; i < v.n; i++)
            m = isnan(m) || v.v[i] > m ? v.v[i] : m;
    free(v.v);
    return m;
}

/* The tightest max-sync bound on (phase, cls) in the judgement section; NaN none. */
static double sync_bound(const results_t *r, const char *cls)
{
    const json_t *o;
    double best = NAN;
    size_t i;
    json_array_foreach(json_object_get(results_section(r, "judgement"), "objectives"), i, o)
    {
        const char *oc = json_string_value(json_object_get(o, "class"));
        const char *limit = json_string_value(json_object_get(o, "limit"));
        double v = json_number_value(json_object_get(o, "value"));
        if (oc && limit && !strcmp(limit, "max-sync") && (!strcmp(oc, "*") || !strcmp(oc, cls)) &&
            (isnan(best) || v < best))
            best = v;
    }
    return best;
}

/* One "sync_max" series per fleet action any run of the group gauged ("sync" section): the
 * largest R̄ of a whole window per run, with change points like a latency's (floor
 * CMP_SYNC_MIN_CHANGE). */
static int fill_sync(trend_t *t, trend_group_t *g, results_t *const *res)
{
    for (size_t r = 0; r < g->n_runs; r++) {
        const char *phase;
        json_t *ph, *a;
        json_object_foreach(results_section(res[r], "sync"), phase, ph)
        {
            size_t i;
            json_array_foreach(json_object_get(ph, "actions"), i, a)
            {
                const char *cls = json_string_value(json_object_get(a, "class"));
                size_t k = 0;
                while (cls && k < g->n_sync &&
                       (strcmp(g->sync[k].phase, phase) || strcmp(g->sync[k].cls, cls)))
                    k++;
                if (!cls || k < g->n_sync)
                    continue;
                trend_series_t *v = realloc(g->sync, (g->n_sync + 1) * sizeof(*v));
                if (!v)
                    return SQ_ENOMEM;
                g->sync = v;
                trend_series_t *s = &g->sync[g->n_sync++];
                *s = (trend_series_t){.phase = keep(t, phase), .cls = keep(t, cls),
                                      .metric = "sync_max", .objective = NAN};
                s->values = malloc(g->n_runs * sizeof(double));
                if (!s->values || !s->phase || !s->cls)
                    return SQ_ENOMEM;
            }
        }
    }
    for (size_t k = 0; k < g->n_sync; k++) {
        trend_series_t *s = &g->sync[k];
        for (size_t r = 0; r < g->n_runs; r++)
            s->values[r] = sync_max(res[r], s->phase, s->cls);
        s->objective = sync_bound(res[g->n_runs - 1], s->cls);
        int rc = find_changes(s, g->n_runs, CMP_SYNC_MIN_CHANGE, &t->opts);
        if (rc)
            return rc;
    }
    return 0;
}

/* Fills a group's series from its runs (res in start order). */
static int fill_group(trend_t *t, trend_group_t *g, results_t *const *res)
{
    for (size_t r = 0; r < g->n_runs; r++)
        for (size_t i = 0; i < results_cell_count(res[r]); i++) {
            results_cell_t *c = results_cell_at(res[r], i);
            if (cmp_is_watch(res[r], results_cell_phase(c), results_cell_class(c)))
                continue;
            int rc = add_key(t, g, results_cell_phase(c), results_cell_class(c));
            if (rc)
                return rc;
        }
    for (size_t i = 0; i < g->n_series; i += N_METRICS) {
        trend_series_t *s = &g->series[i];
        for (size_t r = 0; r < g->n_runs; r++) {
            double v[N_METRICS];
            if (run_figures(res[r], s->phase, s->cls, v))
                return SQ_ENOMEM;
            for (int m = 0; m < N_METRICS; m++)
                s[m].values[r] = v[m];
        }
        for (int m = 0; m < N_METRICS; m++) {
            s[m].objective = objective_of(res[g->n_runs - 1], s->phase, s->cls, m);
            int rc = find_changes(&s[m], g->n_runs, abs_floor(&t->opts, m), &t->opts);
            if (rc)
                return rc;
        }
    }
    return fill_sync(t, g, res);
}

typedef struct {
    size_t i;
    int64_t start;
    const char *dir;
} order_t;

static int by_start(const void *a, const void *b)
{
    const order_t *x = a, *y = b;
    if (x->start != y->start)
        return (x->start > y->start) - (x->start < y->start);
    return strcmp(x->dir, y->dir);
}

/* Starts group g with the runs of ord (in start order) that belong with ord[first]. */
static int make_group(trend_t *t, results_t *const *res, const order_t *ord, size_t n, size_t first,
                      bool *taken)
{
    trend_group_t *g = &t->groups[t->n_groups++];
    results_t **mine = calloc(n, sizeof(*mine));
    g->dirs = calloc(n, sizeof(*g->dirs));
    g->start_ms = calloc(n, sizeof(*g->start_ms));
    if (!mine || !g->dirs || !g->start_ms) {
        free(mine);
        return SQ_ENOMEM;
    }
    const results_t *lead = res[ord[first].i];
    for (size_t k = first; k < n; k++) {
        if (taken[k] || !same_group(lead, res[ord[k].i]))
            continue;
        taken[k] = true;
        mine[g->n_runs] = res[ord[k].i];
        g->start_ms[g->n_runs] = ord[k].start;
        g->dirs[g->n_runs++] = keep(t, ord[k].dir);
    }
    const results_meta_t *m = results_meta(lead);
    char *ov = overrides_text(lead);
    g->plan = keep(t, m->plan_path);
    g->plan_sha256 = keep(t, m->plan_sha256);
    g->version = keep(t, m->squall_version);
    g->overrides = ov ? keep(t, ov) : NULL;
    free(ov);
    int rc = g->plan && g->plan_sha256 && g->version && g->overrides ? fill_group(t, g, mine)
                                                                     : SQ_ENOMEM;
    free(mine);
    return rc;
}

int trend_new(results_t *const *res, const char *const *dirs, size_t n,
              const report_cmp_opts_t *opts, trend_t **out)
{
    trend_t *t = calloc(1, sizeof(*t));
    order_t *ord = calloc(n + 1, sizeof(*ord));
    bool *taken = calloc(n + 1, sizeof(*taken));
    int rc = SQ_ENOMEM;
    if (!t || !ord || !taken || !(t->groups = calloc(n + 1, sizeof(*t->groups))))
        goto fail;
    t->opts = *opts;
    for (size_t i = 0; i < n; i++)
        ord[i] = (order_t){.i = i, .start = results_meta(res[i])->start_unix_ms, .dir = dirs[i]};
    qsort(ord, n, sizeof(*ord), by_start);
    for (size_t k = 0; k < n; k++)
        if (!taken[k] && (rc = make_group(t, res, ord, n, k, taken)))
            goto fail;
    free(ord);
    free(taken);
    *out = t;
    return 0;
fail:
    free(ord);
    free(taken);
    trend_free(t);
    *out = NULL;
    return rc;
}

void trend_free(trend_t *t)
{
    if (!t)
        return;
    for (size_t g = 0; t->groups && g < t->n_groups; g++) {
        for (size_t i = 0; i < t->groups[g].n_series; i++) {
            free(t->groups[g].series[i].values);
            free(t->groups[g].series[i].changes);
        }
        for (size_t i = 0; i < t->groups[g].n_sync; i++) {
            free(t->groups[g].sync[i].values);
            free(t->groups[g].sync[i].changes);
        }
        free(t->groups[g].series);
        free(t->groups[g].sync);
        free(t->groups[g].dirs);
        free(t->groups[g].start_ms);
    }
    free(t->groups);
    for (size_t i = 0; i < t->n_strings; i++)
        free(t->strings[i]);
    free(t->strings);
    free(t);
}

size_t trend_group_count(const trend_t *t)
{
    return t->n_groups;
}

const trend_group_t *trend_group_at(const trend_t *t, size_t i)
{
    return i < t->n_groups ? &t->groups[i] : NULL;
}

bool trend_newest_worse(const trend_t *t)
{
    for (size_t g = 0; g < t->n_groups; g++) {
        const trend_group_t *gr = &t->groups[g];
        for (size_t i = 0; i < gr->n_series + gr->n_sync; i++) {
            const trend_series_t *s =
                i < gr->n_series ? &gr->series[i] : &gr->sync[i - gr->n_series];
            size_t c = s->n_changes;
            while (c > 0 && !s->changes[c - 1].significant)
                c--; /* merged away: not a boundary of the newest segment */
            if (c > 0 && s->changes[c - 1].worse)
                return true;
        }
    }
    return false;
}
