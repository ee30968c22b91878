/* A merge's storm ticks: the inputs' ticks of one fleet action combined per tick instant on the
 * wall clock (aligned ticks of separate processes fire together), requests and dispatch shape
 * added, latency percentiles from the ticks' merged histograms. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "results_int.h"
#include "squall/err.h"

#define BINS 10 /* a tick's dispatch shape: sends in 10 equal parts of its window */

/* One input tick placed in the merge: its merged index k and how far (ns) its own instant lies
 * after the merged tick's instant. */
typedef struct {
    int64_t k;
    int64_t shift;
    const json_t *t;
} tref_t;

static int cmp_tref(const void *a, const void *b)
{
    const tref_t *x = a, *y = b;
    return (x->k > y->k) - (x->k < y->k);
}

static json_int_t ival(const json_t *o, const char *key)
{
    return json_integer_value(json_object_get(o, key));
}

/* A histogram's encoding as a JSON string, or NULL. */
static json_t *hist_text(const hist_t *h)
{
    char *text;
    if (hist_encode(h, &text) != 0)
        return NULL;
    json_t *s = json_string(text);
    free(text);
    return s;
}

/* Sets the percentile keys (pct_keys that o has) of o from n summaries: from their merged
 * histograms ("hist") when every one has one; else the largest of theirs, an upper bound for
 * the pooled percentile (marked). Counts add; the maximum is the largest. */
static int pool_latency(json_t *o, const json_t *const *parts, size_t n)
{
    static const struct {
        const char *key;
        double p;
    } pcts[] = {{"p50_ns", 50}, {"p90_ns", 90}, {"p99_ns", 99}};
    hist_t *h = NULL;
    bool all = true;
    int rc = 0;
    for (size_t i = 0; rc == 0 && all && i < n; i++) {
        hist_t *one;
        const char *text = json_string_value(json_object_get(parts[i], "hist"));
        all = text && hist_decode(text, &one) == 0;
        if (all && !h)
            h = one;
        else if (all) {
            rc = hist_merge(h, one);
            hist_free(one);
        }
    }
    json_int_t count = 0, max = 0;
    for (size_t i = 0; i < n; i++) {
        count += ival(parts[i], "count");
        max = ival(parts[i], "max_ns") > max ? ival(parts[i], "max_ns") : max;
    }
    if (json_object_get(o, "count"))
        json_object_set_new(o, "count", json_integer(count));
    json_object_set_new(o, "max_ns", json_integer(max));
    for (size_t k = 0; k < sizeof pcts / sizeof pcts[0]; k++) {
        if (!json_object_get(o, pcts[k].key))
            continue;
        json_int_t v = 0;
        for (size_t i = 0; !(all && h) && i < n; i++)
            v = ival(parts[i], pcts[k].key) > v ? ival(parts[i], pcts[k].key) : v;
        json_object_set_new(o, pcts[k].key,
                            json_integer(all && h ? hist_value_at(h, pcts[k].p) : v));
    }
    json_object_del(o, "hist");
    if (all && h)
        json_object_set_new(o, "hist", hist_text(h));
    else
        json_object_set_new(o, "percentiles_upper_bound", json_true());
    hist_free(h);
    return rc;
}

/* One merged tick from the input ticks g[0..n) (sorted into one k). A tick from one input keeps
 * its own exact percentiles; the times move to the merged tick's instant. */
static json_t *tick_json(const tref_t *g, size_t n, int64_t t_ns, int *rc)
{
    json_int_t requests = 0, written = 0, peak = 0, bins[BINS] = {0};
    int64_t first = INT64_MAX, last_sent = INT64_MIN, last_done = INT64_MIN;
    const json_t **parts = calloc(n, sizeof(*parts));
    if (!parts) {
        *rc = SQ_ENOMEM;
        return NULL;
    }
    for (size_t i = 0; i < n; i++) {
        const json_t *t = parts[i] = g[i].t;
        requests += ival(t, "requests");
        written += ival(t, "written");
        peak += ival(t, "peak_in_flight");
        for (size_t b = 0; b < BINS; b++)
            bins[b] += json_integer_value(json_array_get(json_object_get(t, "bins"), b));
        if (ival(t, "written") == 0)
            continue;
        int64_t f = ival(t, "first_written_ns") + g[i].shift;
        first = f < first ? f : first;
        last_sent = f + ival(t, "dispatch_spread_ns") > last_sent
                        ? f + ival(t, "dispatch_spread_ns")
                        : last_sent;
        last_done = f + ival(t, "burst_ns") > last_done ? f + ival(t, "burst_ns") : last_done;
    }
    json_t *jb = json_array();
    for (size_t b = 0; jb && b < BINS; b++)
        json_array_append_new(jb, json_integer(bins[b]));
    bool w = first != INT64_MAX;
    json_t *o = json_deep_copy(g[0].t);
    json_object_update_new(
        o, json_pack("{s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:o}", "t_ns", (json_int_t)t_ns, "requests",
                     requests, "written", written, "dispatch_spread_ns",
                     (json_int_t)(w ? last_sent - first : 0), "first_written_ns",
                     (json_int_t)(w ? first : 0), "peak_in_flight", peak, "burst_ns",
                     (json_int_t)(w ? last_done - first : 0), "bins", jb));
    if (o && n > 1)
        *rc = *rc ? *rc : pool_latency(o, parts, n);
    free(parts);
    return o;
}

/* Where the merge puts an action's ticks: the reference is the input whose phase started first
 * (its offset is the merged action's); every tick is placed by its wall-clock instant. */
typedef struct {
    const json_t *first;    /* the first input's action: class, timing, period */
    int64_t period, offset; /* ns */
    double phase_ms;        /* the merged phase's wall-clock start */
} place_t;

static bool same_action(const json_t *a, const json_t *b)
{
    return json_equal(json_object_get(a, "class"), json_object_get(b, "class")) &&
           json_equal(json_object_get(a, "timing"), json_object_get(b, "timing")) &&
           ival(a, "period_ns") == ival(b, "period_ns");
}

static const json_t *action_in(const json_t *storms, const char *phase, const json_t *like)
{
    size_t i;
    const json_t *a;
    json_array_foreach(json_object_get(json_object_get(storms, phase), "actions"), i, a)
    {
        if (same_action(a, like))
            return a;
    }
    return NULL;
}

/* The input ticks of one action, placed and sorted by merged tick; *n of them. */
static tref_t *place_ticks(const results_input_t *in, size_t n_in, const char *phase,
                           const place_t *pl, size_t *n)
{
    size_t cap = 0;
    for (size_t i = 0; i < n_in; i++)
        cap += json_array_size(json_object_get(
            action_in(json_object_get(in[i].sections, "storms"), phase, pl->first), "ticks"));
    tref_t *v = calloc(cap ? cap : 1, sizeof(*v));
    *n = 0;
    for (size_t i = 0; v && i < n_in; i++) {
        const json_t *a = action_in(json_object_get(in[i].sections, "storms"), phase, pl->first);
        double ms;
        if (!a || !results_input_phase_ms(&in[i], phase, &ms))
            ms = pl->phase_ms; /* no phases section: its ticks are taken as they are */
        size_t j;
        const json_t *t;
        json_array_foreach(json_object_get(a, "ticks"), j, t)
        {
            int64_t rel = llround((ms - pl->phase_ms) * 1e6) + ival(t, "t_ns") - pl->offset;
            int64_t k = llround((double)rel / (double)pl->period);
            v[(*n)++] = (tref_t){k, rel - k * pl->period, t};
        }
    }
    if (v)
        qsort(v, *n, sizeof(*v), cmp_tref);
    return v;
}

static json_t *action_json(const results_input_t *in, size_t n_in, const char *phase,
                           const place_t *pl, int *rc)
{
    size_t n;
    tref_t *v = place_ticks(in, n_in, phase, pl, &n);
    json_t *ticks = json_array();
    json_int_t requests = 0, spread = 0, peak = 0;
    for (size_t i = 0; v && ticks && i < n;) {
        size_t j = i;
        while (j < n && v[j].k == v[i].k)
            j++;
        json_t *t = tick_json(v + i, j - i, pl->offset + v[i].k * pl->period, rc);
        requests += ival(t, "requests");
        spread = ival(t, "dispatch_spread_ns") > spread ? ival(t, "dispatch_spread_ns") : spread;
        peak = ival(t, "peak_in_flight") > peak ? ival(t, "peak_in_flight") : peak;
        json_array_append_new(ticks, t);
        i = j;
    }
    free(v);
    if (!v || !ticks)
        *rc = SQ_ENOMEM;
    json_t *a = json_deep_copy(pl->first);
    json_object_update_new(a, json_pack("{s:I,s:I,s:I,s:I,s:o}", "offset_ns",
                                        (json_int_t)pl->offset, "requests", requests,
                                        "max_dispatch_spread_ns", spread, "max_peak_in_flight",
                                        peak, "ticks", ticks ? ticks : json_array()));
    return a;
}

/* The actions of one phase over every input, each once, in the order the inputs list them. */
static json_t *actions_json(const results_input_t *in, size_t n, const char *phase, double phase_ms,
                            int *rc)
{
    json_t *out = json_array();
    for (size_t i = 0; out && i < n; i++) {
        size_t j;
        const json_t *a;
        json_array_foreach(
            json_object_get(json_object_get(json_object_get(in[i].sections, "storms"), phase),
                            "actions"),
            j, a)
        {
            bool done = false;
            for (size_t e = 0; e < i && !done; e++)
                done = action_in(json_object_get(in[e].sections, "storms"), phase, a) != NULL;
            if (done)
                continue;
            /* The offset of the first input to start the phase, from the merged phase start. */
            place_t pl = {.first = a, .period = ival(a, "period_ns"), .phase_ms = phase_ms};
            double best = INFINITY, ms;
            for (size_t e = i; e < n; e++) {
                const json_t *b = action_in(json_object_get(in[e].sections, "storms"), phase, a);
                if (b && results_input_phase_ms(&in[e], phase, &ms) && ms < best) {
                    best = ms;
                    pl.offset = llround((ms - phase_ms) * 1e6) + ival(b, "offset_ns");
                }
            }
            if (best == INFINITY)
                pl.offset = ival(a, "offset_ns");
            if (pl.period > 0)
                json_array_append_new(out, action_json(in, n, phase, &pl, rc));
        }
    }
    return out;
}

/* A phase's burst or quiet latency summary over the inputs that have it. */
static json_t *summary_json(const results_input_t *in, size_t n, const char *phase, const char *key,
                            int *rc)
{
    const json_t **parts = calloc(n, sizeof(*parts));
    size_t k = 0;
    for (size_t i = 0; parts && i < n; i++) {
        const json_t *s =
            json_object_get(json_object_get(json_object_get(in[i].sections, "storms"), phase), key);
        if (s)
            parts[k++] = s;
    }
    json_t *o = k ? json_deep_copy(parts[0]) : NULL;
    if (o && k > 1)
        *rc = *rc ? *rc : pool_latency(o, parts, k);
    free(parts);
    return o;
}

static json_t *phase_json(const results_input_t *in, size_t n, const char *phase, int *rc)
{
    double ms = 0;
    results_first_phase_ms(in, n, phase, &ms);
    json_t *ph = json_pack("{s:o}", "actions", actions_json(in, n, phase, ms, rc));
    static const char *const kinds[] = {"burst", "quiet"};
    for (size_t k = 0; ph && k < 2; k++) {
        json_t *s = summary_json(in, n, phase, kinds[k], rc);
        if (s)
            json_object_set_new(ph, kinds[k], s);
    }
    if (ph && n > 1)
        json_object_set_new(
            ph, "merged",
            json_pack("{s:i, s:s, s:s}", "inputs", (int)n, "peak_in_flight",
                      "the sum of the inputs' peaks per tick: an upper bound (they need not "
                      "coincide)",
                      "percentiles",
                      "ticks of several inputs: from their merged histograms (within 1/1024)"));
    return ph;
}

json_t *results_merge_storms(const results_input_t *in, size_t n, int *rc)
{
    json_t *out = json_object();
    bool any = false;
    *rc = out ? 0 : SQ_ENOMEM;
    for (size_t i = 0; out && i < n; i++) {
        const char *phase;
        json_t *v, *storms = json_object_get(in[i].sections, "storms");
        any |= storms != NULL;
        json_object_foreach(storms, phase, v)
        {
            if (!json_object_get(out, phase))
                json_object_set_new(out, phase, phase_json(in, n, phase, rc));
        }
    }
    if (*rc || !any) {
        json_decref(out);
        return NULL;
    }
    return out;
}
