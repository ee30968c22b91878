/* Where the comparison's samples come from: series.csv's seconds, the "storms" section's ticks,
 * a watch class's histograms, and the whole-phase values shown beside each verdict. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "compare_int.h"
#include "squall/err.h"

static bool answered(const results_cell_t *c)
{
    return strcmp(results_cell_outcome(c), "cancelled") != 0;
}

static bool of(const results_cell_t *c, const char *phase, const char *cls)
{
    return !strcmp(results_cell_phase(c), phase) && !strcmp(results_cell_class(c), cls) &&
           answered(c);
}

bool cmp_hist(const results_t *r, const char *phase, const char *cls, int m, hist_t *h)
{
    bool any = false;
    hist_reset(h);
    for (size_t i = 0; i < results_cell_count(r); i++) {
        const results_cell_t *c = results_cell_at(r, i);
        const hist_t *ch = of(c, phase, cls) ? results_cell_hist_find(c, m) : NULL;
        if (ch && hist_merge(h, ch) == 0)
            any |= hist_count(ch) > 0;
    }
    return any;
}

/* The error rate of (phase, cls): answers other than 2xx and 3xx among all answered. */
static bool error_rate(const results_t *r, const char *phase, const char *cls, double *out)
{
    int64_t n = 0, errors = 0;
    for (size_t i = 0; i < results_cell_count(r); i++) {
        results_cell_t *c = results_cell_at(r, i);
        if (!of(c, phase, cls))
            continue;
        const char *oc = results_cell_outcome(c);
        int64_t k = results_cell_counters(c)->count;
        n += k;
        errors += strcmp(oc, "2xx") && strcmp(oc, "3xx") ? k : 0;
    }
    *out = n ? (double)errors / (double)n : 0;
    return n > 0;
}

bool cmp_whole(const results_t *r, const char *phase, const char *cls, int m, double pct, hist_t *h,
               double *out)
{
    if (pct < 0)
        return error_rate(r, phase, cls, out);
    bool any = cmp_hist(r, phase, cls, m, h);
    *out = any ? (double)hist_value_at(h, pct) / 1e6 : NAN;
    return any;
}

static int push(cmp_vec_t *v, double x)
{
    if (v->n == v->cap) {
        size_t cap = v->cap ? 2 * v->cap : 64;
        double *nv = realloc(v->v, cap * sizeof(*nv));
        if (!nv)
            return SQ_ENOMEM;
        v->v = nv;
        v->cap = cap;
    }
    v->v[v->n++] = x;
    return 0;
}

int cmp_sync_windows(const results_t *r, const char *phase, const char *cls, cmp_vec_t *out)
{
    json_t *acts = json_object_get(json_object_get(results_section(r, "sync"), phase), "actions");
    json_t *a, *w;
    size_t i, k;
    json_array_foreach(acts, i, a)
    {
        const char *c = json_string_value(json_object_get(a, "class"));
        if (!c || strcmp(c, cls))
            continue;
        json_array_foreach(json_object_get(a, "windows"), k, w)
        {
            json_t *r = json_object_get(w, "r_bar"); /* null: a window without sends */
            if (json_is_true(json_object_get(w, "partial")) || !json_is_number(r))
                continue;
            int rc = push(out, json_number_value(r));
            if (rc)
                return rc;
        }
    }
    return 0;
}

static double column(const report_row_t *r, enum cmp_col col)
{
    switch (col) {
    case CMP_P50:
        return r->p50_ms;
    case CMP_P99:
        return r->p99_ms;
    case CMP_P999:
        return r->p999_ms;
    case CMP_MAX:
        return r->max_ms;
    default:
        return (double)r->errors / (double)r->completed;
    }
}

int cmp_seconds(const report_series_t *s, const char *phase, const char *cls, enum cmp_col col,
                cmp_vec_t *out)
{
    out->n = 0;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (r->completed <= 0 || strcmp(r->phase, phase) || strcmp(r->cls, cls))
            continue;
        /* A merged second without its inputs' histograms has unknown percentiles (nan). */
        double v = column(r, col);
        if (!isnan(v) && push(out, v))
            return SQ_ENOMEM;
    }
    return 0;
}

/* The actions of phase in the "storms" section (an array), or NULL. */
static json_t *storm_actions(const results_t *r, const char *phase)
{
    json_t *storms = results_section(r, "storms");
    return json_object_get(json_object_get(storms, phase), "actions");
}

static bool action_of(const json_t *a, const char *cls)
{
    const char *c = json_string_value(json_object_get(a, "class"));
    return c && strcmp(c, cls) == 0;
}

int cmp_ticks(const results_t *r, const char *phase, const char *cls, const char *key,
              cmp_vec_t *out)
{
    out->n = 0;
    size_t i, k;
    json_t *a, *t;
    json_array_foreach(storm_actions(r, phase), i, a)
    {
        if (!action_of(a, cls))
            continue;
        json_array_foreach(json_object_get(a, "ticks"), k, t)
        {
            json_t *v = json_object_get(t, key);
            if (json_is_number(v) && push(out, json_number_value(v) / 1e6))
                return SQ_ENOMEM;
        }
    }
    return 0;
}

size_t cmp_tick_count(const results_t *r, const char *phase, const char *cls)
{
    size_t i, n = 0;
    json_t *a;
    json_array_foreach(storm_actions(r, phase), i, a)
    {
        if (action_of(a, cls))
            n += json_array_size(json_object_get(a, "ticks"));
    }
    return n;
}

static json_t *watch_class(const results_t *r, const char *phase, const char *cls)
{
    json_t *w = json_object_get(results_section(r, "watches"), phase);
    return json_object_get(json_object_get(w, "classes"), cls);
}

bool cmp_is_watch(const results_t *r, const char *phase, const char *cls)
{
    if (watch_class(r, phase, cls))
        return true;
    for (size_t i = 0; i < results_cell_count(r); i++) {
        const results_cell_t *c = results_cell_at(r, i);
        if (of(c, phase, cls) && (results_cell_hist_find(c, RESULTS_M_OPEN) ||
                                  results_cell_hist_find(c, RESULTS_M_PROPAGATION)))
            return true;
    }
    return false;
}

size_t cmp_streams(const results_t *r, const char *phase, const char *cls)
{
    json_t *n = json_object_get(watch_class(r, phase, cls), "streams");
    return json_is_integer(n) && json_integer_value(n) > 0 ? (size_t)json_integer_value(n) : 0;
}

/* The phase's elapsed seconds from the "phases" section, rounded up. */
static size_t elapsed_seconds(const results_t *r, const char *phase)
{
    size_t i;
    json_t *p;
    json_array_foreach(json_object_get(results_section(r, "phases"), "phases"), i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        double s = json_number_value(json_object_get(p, "elapsed_s"));
        if (name && !strcmp(name, phase) && s > 0)
            return (size_t)ceil(s);
    }
    return 0;
}

size_t cmp_phase_seconds(const results_t *r, const report_series_t *s, const char *phase)
{
    size_t n = elapsed_seconds(r, phase);
    if (n)
        return n;
    int64_t last = -1; /* else the distinct seconds of its rows (written in order) */
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *row = report_series_at(s, i);
        if (!strcmp(row->phase, phase) && row->second != last) {
            n++;
            last = row->second;
        }
    }
    return n;
}
