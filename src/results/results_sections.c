/* A merge's sections, combined once every input was added: what a verdict rests on must agree,
 * the generator's health and the phases combine by wall-clock time, counts add up. Storm ticks
 * are in results_storms.c. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "results_int.h"
#include "squall/err.h"

/* Sections whose inputs must be equal: the judgement (a merged run is judged on one set of
 * objectives) and the brakes in force. */
static const char *const must_agree[] = {"judgement", "brakes"};

static int agree(const results_input_t *in, size_t n, results_t *dst, out_t *o)
{
    for (size_t k = 0; k < sizeof must_agree / sizeof must_agree[0]; k++) {
        const json_t *first = json_object_get(in[0].sections, must_agree[k]);
        for (size_t i = 1; i < n; i++) {
            const json_t *s = json_object_get(in[i].sections, must_agree[k]);
            if ((!first && !s) || (first && s && json_equal(first, s)))
                continue;
            out_error(o,
                      "%s: its \"%s\" section %s %s's: refusing to merge (a merged run is "
                      "judged once, so its inputs must share the plan's objectives and brakes)",
                      in[i].name, must_agree[k],
                      !first || !s ? "is missing or extra against" : "differs from", in[0].name);
            return SQ_EMISMATCH;
        }
        if (first && results_set_section(dst, must_agree[k], json_deep_copy(first)))
            return SQ_ENOMEM;
    }
    return 0;
}

/* ---- phases: each phase from the earliest start to the latest end, its elapsed time the
 * union of the inputs' intervals (shards side by side run once; runs one after another add) */

typedef struct {
    double from, to; /* ms, wall clock */
} span_t;

static int cmp_span(const void *a, const void *b)
{
    double x = ((const span_t *)a)->from, y = ((const span_t *)b)->from;
    return (x > y) - (x < y);
}

static double union_ms(span_t *s, size_t n)
{
    qsort(s, n, sizeof(*s), cmp_span);
    double total = 0, from = 0, to = 0;
    for (size_t i = 0; i < n; i++) {
        if (i == 0 || s[i].from > to) {
            total += to - from;
            from = s[i].from;
            to = s[i].to;
        } else if (s[i].to > to) {
            to = s[i].to;
        }
    }
    return total + to - from;
}

static json_t *phase_json(const results_input_t *in, size_t n, const char *name, int64_t start_ms,
                          span_t *s)
{
    size_t k = 0;
    for (size_t i = 0; i < n; i++) {
        const json_t *list = json_object_get(json_object_get(in[i].sections, "phases"), "phases");
        size_t j;
        const json_t *p;
        double from;
        json_array_foreach(list, j, p)
        {
            const char *pn = json_string_value(json_object_get(p, "name"));
            if (pn && !strcmp(pn, name) && results_input_phase_ms(&in[i], name, &from)) {
                s[k].from = from;
                s[k++].to = from + 1e3 * json_number_value(json_object_get(p, "elapsed_s"));
                break; /* one interval an input */
            }
        }
    }
    double first = k ? s[0].from : 0;
    for (size_t i = 1; i < k; i++)
        first = s[i].from < first ? s[i].from : first;
    double elapsed = k ? union_ms(s, k) : 0;
    return json_pack("{s:s, s:f, s:f}", "name", name, "start_s",
                     k ? (first - (double)start_ms) / 1e3 : 0.0, "elapsed_s", elapsed / 1e3);
}

static bool listed(const json_t *list, const char *name)
{
    size_t k;
    const json_t *q;
    json_array_foreach(list, k, q)
    {
        const char *n = json_string_value(json_object_get(q, "name"));
        if (n && !strcmp(n, name))
            return true;
    }
    return false;
}

/* The phases of every input, in the order the inputs name them. */
static json_t *phases_json(const results_input_t *in, size_t n, int64_t start_ms)
{
    json_t *list = json_array();
    span_t *s = calloc(n, sizeof(*s));
    bool any = false;
    for (size_t i = 0; list && s && i < n; i++) {
        const json_t *sec = json_object_get(in[i].sections, "phases"), *p;
        size_t j;
        any |= sec != NULL;
        json_array_foreach(json_object_get(sec, "phases"), j, p)
        {
            const char *name = json_string_value(json_object_get(p, "name"));
            if (name && !listed(list, name))
                json_array_append_new(list, phase_json(in, n, name, start_ms, s));
        }
    }
    free(s);
    if (!any) {
        json_decref(list);
        return NULL;
    }
    return list ? json_pack("{s:o}", "phases", list) : NULL;
}

/* ---- the generator's health: seconds by wall clock, peaks as the largest, counts added ---- */

/* A second of input i as a second of the merge: by wall clock, to the nearest second. */
static int64_t merged_second(const results_input_t *in, int64_t k, int64_t start_ms)
{
    return k + (int64_t)llround((double)(in->start_ms - start_ms) / 1e3);
}

static int cmp_i64(const void *a, const void *b)
{
    int64_t x = *(const int64_t *)a, y = *(const int64_t *)b;
    return (x > y) - (x < y);
}

/* A second is bound when any input was bound in it; seconds an input counted but did not
 * list (it keeps at most 10,000) are added as they are: an upper bound. */
static json_t *bound_json(const results_input_t *in, size_t n, const char *kind, int64_t start_ms)
{
    int64_t *v = NULL, unlisted = 0, last = INT64_MIN;
    size_t nv = 0, cap = 0;
    const char *why = NULL;
    for (size_t i = 0; i < n; i++) {
        const json_t *b = json_object_get(json_object_get(in[i].sections, "generator"), kind), *s;
        const json_t *list = json_object_get(b, "list");
        size_t j;
        unlisted += json_integer_value(json_object_get(b, "seconds")) - json_array_size(list);
        json_array_foreach(list, j, s)
        {
            if (nv == cap) {
                cap = cap ? 2 * cap : 64;
                int64_t *nw = realloc(v, cap * sizeof(*v));
                if (!nw) {
                    free(v);
                    return NULL;
                }
                v = nw;
            }
            v[nv] = merged_second(&in[i], json_integer_value(s), start_ms);
            if (v[nv] >= last && json_string_value(json_object_get(b, "last_reason"))) {
                last = v[nv];
                why = json_string_value(json_object_get(b, "last_reason"));
            }
            nv++;
        }
    }
    if (nv)
        qsort(v, nv, sizeof(*v), cmp_i64);
    json_t *list = json_array();
    size_t distinct = 0;
    for (size_t i = 0; list && i < nv; i++)
        if (i == 0 || v[i] != v[i - 1]) {
            json_array_append_new(list, json_integer(v[i]));
            distinct++;
        }
    free(v);
    return json_pack("{s:I, s:o, s:s?}", "seconds", (json_int_t)(distinct + unlisted), "list", list,
                     "last_reason", why);
}

/* Keys of the generator section and how they combine. */
static const char *const gen_max[] = {
    "max_queue_wait_ms",      "max_queued",          "max_in_flight",       "max_loop_pass_ms",
    "max_loop_busy_fraction", "schedule_lag_max_ms", "schedule_lag_p50_ms", "schedule_lag_p99_ms",
    "send_lag_max_ms",        "send_lag_p50_ms",     "send_lag_p99_ms"};
static const char *const gen_sum[] = {"started", "completed", "errors"};

static json_t *generator_json(const results_input_t *in, size_t n, int64_t start_ms)
{
    json_t *g = NULL;
    for (size_t i = 0; i < n; i++) {
        const json_t *s = json_object_get(in[i].sections, "generator");
        if (!s)
            continue;
        if (!g) {
            g = json_deep_copy(s);
            continue;
        }
        for (size_t k = 0; k < sizeof gen_max / sizeof gen_max[0]; k++) {
            const json_t *a = json_object_get(g, gen_max[k]), *b = json_object_get(s, gen_max[k]);
            if (json_number_value(b) > json_number_value(a))
                json_object_set(g, gen_max[k], (json_t *)b);
        }
        for (size_t k = 0; k < sizeof gen_sum / sizeof gen_sum[0]; k++)
            json_object_set_new(g, gen_sum[k],
                                json_integer(json_integer_value(json_object_get(g, gen_sum[k])) +
                                             json_integer_value(json_object_get(s, gen_sum[k]))));
        if (json_is_true(json_object_get(s, "closed_loop")))
            json_object_set_new(g, "closed_loop", json_true());
    }
    if (!g)
        return NULL;
    json_object_set_new(g, "generator_bound", bound_json(in, n, "generator_bound", start_ms));
    json_object_set_new(g, "connection_bound", bound_json(in, n, "connection_bound", start_ms));
    /* A percentile of pooled samples lies between the inputs' own, so the largest is an upper
     * bound (the lag histograms themselves are not kept). */
    if (n > 1)
        json_object_set_new(
            g, "merged",
            json_pack("{s:i, s:s, s:s}", "inputs", (int)n, "schedule_lag_percentiles",
                      "the largest input's: an upper bound for all inputs together",
                      "send_lag_percentiles", "the same"));
    return g;
}

/* ---- counts: watches and lifecycle add up ------------------------------------------------- */

/* Adds src into dst, key by key: integers add, true wins for booleans, nested objects
 * recurse, arrays append, strings keep dst's, a null takes src's value, other numbers keep the
 * larger (durations that ran side by side). */
static void add_into(json_t *dst, const json_t *src)
{
    const char *key;
    json_t *v;
    json_object_foreach((json_t *)src, key, v)
    {
        json_t *d = json_object_get(dst, key);
        if (!d || json_is_null(d))
            json_object_set_new(dst, key, json_deep_copy(v));
        else if (json_is_integer(d) && json_is_integer(v))
            json_object_set_new(dst, key,
                                json_integer(json_integer_value(d) + json_integer_value(v)));
        else if (json_is_boolean(d) && json_is_true(v))
            json_object_set_new(dst, key, json_true());
        else if (json_is_object(d) && json_is_object(v))
            add_into(d, v);
        else if (json_is_array(d) && json_is_array(v))
            json_array_extend(d, (json_t *)v);
        else if (json_is_number(d) && json_is_number(v) &&
                 json_number_value(v) > json_number_value(d))
            json_object_set(dst, key, v);
    }
}

/* A watch phase's reconnect log, its times moved from the input's phase start to the merge's. */
static void shift_log(json_t *log, double by_ms)
{
    static const char *const cols[] = {"ended_ns", "sent_ns"};
    for (size_t c = 0; c < 2; c++) {
        json_t *col = json_object_get(log, cols[c]), *v;
        size_t i;
        json_array_foreach(col, i, v)
        {
            json_int_t t = json_integer_value(v);
            if (t >= 0)
                json_integer_set(v, t + (json_int_t)llround(by_ms * 1e6));
        }
    }
}

static json_t *watches_json(const results_input_t *in, size_t n)
{
    json_t *w = NULL;
    for (size_t i = 0; i < n; i++) {
        json_t *s = json_deep_copy(json_object_get(in[i].sections, "watches")), *ph;
        const char *name;
        json_object_foreach(s, name, ph)
        {
            double mine, first;
            if (results_input_phase_ms(&in[i], name, &mine) &&
                results_first_phase_ms(in, n, name, &first))
                shift_log(json_object_get(ph, "reconnect_log"), mine - first);
        }
        if (s && !w)
            w = s;
        else if (s) {
            add_into(w, s);
            json_decref(s);
        }
    }
    return w;
}

static json_t *lifecycle_json(const results_input_t *in, size_t n)
{
    json_t *l = NULL;
    bool reached = true, churn = false;
    for (size_t i = 0; i < n; i++) {
        const json_t *s = json_object_get(in[i].sections, "lifecycle");
        const json_t *r = json_object_get(s, "churn_population_reached");
        churn |= r != NULL;
        reached &= !r || json_is_true(r);
        if (s && !l)
            l = json_deep_copy(s);
        else if (s)
            add_into(l, s);
    }
    if (!l)
        return NULL;
    /* The population of all inputs together lies between the sums of their minima and maxima;
     * a band is shown only when every input reached its population. */
    if (churn) {
        json_object_set_new(l, "churn_population_reached", json_boolean(reached));
        if (!reached) {
            json_object_set_new(l, "churn_population_min", json_null());
            json_object_set_new(l, "churn_population_max", json_null());
        }
        /* The allowed bands add up like the populations; held again from the sums. */
        const json_t *lo = json_object_get(l, "churn_population_low"),
                     *hi = json_object_get(l, "churn_population_high");
        if (json_is_integer(lo) && json_is_integer(hi))
            json_object_set_new(
                l, "churn_population_held",
                json_boolean(reached &&
                             json_integer_value(json_object_get(l, "churn_population_min")) >=
                                 json_integer_value(lo) &&
                             json_integer_value(json_object_get(l, "churn_population_max")) <=
                                 json_integer_value(hi)));
    }
    /* The teardowns' percentiles cannot be pooled from the inputs' percentiles. */
    json_t *t = json_object_get(l, "teardown");
    if (n > 1) {
        json_object_del(t, "response_p50_ms");
        json_object_del(t, "response_p99_ms");
    }
    return l;
}

/* ---- the whole ------------------------------------------------------------------------------ */

/* Replaces section name with value; NULL means no input had it (else: out of memory). */
static int put(results_t *r, const char *name, json_t *value, const results_input_t *in, size_t n)
{
    json_object_del(r->sections, name);
    if (value)
        return results_set_section(r, name, value);
    for (size_t i = 0; i < n; i++)
        if (json_object_get(in[i].sections, name))
            return SQ_ENOMEM;
    return 0;
}

int results_merge_finish(results_t *dst, out_t *o)
{
    size_t n;
    results_input_t *in = results_inputs_of(dst, &n);
    if (!in)
        return SQ_ENOMEM;
    int rc = n ? agree(in, n, dst, o) : 0, storms_rc = 0;
    int64_t start = dst->meta.start_unix_ms;
    if (rc == 0 && n) {
        rc = put(dst, "phases", phases_json(in, n, start), in, n);
        rc = rc ? rc : put(dst, "generator", generator_json(in, n, start), in, n);
        rc = rc ? rc : put(dst, "watches", watches_json(in, n), in, n);
        rc = rc ? rc : put(dst, "lifecycle", lifecycle_json(in, n), in, n);
        json_t *storms = rc ? NULL : results_merge_storms(in, n, &storms_rc);
        rc = rc ? rc : storms_rc ? storms_rc : put(dst, "storms", storms, in, n);
        int sync_rc = 0;
        json_t *sync = rc ? NULL : results_merge_sync(in, n, start, &sync_rc);
        if (sync_rc == SQ_EMISMATCH)
            out_error(o, "the inputs' \"sync\" sections give one fleet action different periods");
        rc = rc ? rc : sync_rc ? sync_rc : put(dst, "sync", sync, in, n);
        /* The merge is judged again from its own figures: the inputs' verdicts stay in their
         * entries. */
        json_object_del(dst->sections, "objectives");
        json_object_del(dst->sections, "run");
    }
    free(in);
    return rc;
}
