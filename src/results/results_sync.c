/* A merge's synchronisation gauge: the inputs' "sync" sections (src/observe/gauge.c) combined
 * window by window. Each shard gauges its own agents' sends of a fleet action in windows of one
 * period counted from the phase's start; the merged window w holds the sends of every input's
 * window w, so its running sums are the sums of theirs (n, Σcos θ, Σsin θ, the ten bins: all
 * additive) and its R̄, Z, p and peak-to-mean are computed again from those sums
 * (sync_acc_merge, sync_acc_gauge): exactly the figures one process sending every agent would
 * have written, up to rounding, since the inputs' phases are measured on the same grid (their
 * phases start together: `--start-at`, or one `run --procs`). A window is partial when it is in
 * any input. Its start is the earliest input's, in seconds from the merge's start. */
#include <stdlib.h>
#include <string.h>

#include "results_int.h"
#include "squall/err.h"
#include "squall/sync.h"

/* The action of class cls in phase's actions of one input, or NULL. */
static const json_t *action_in(const json_t *sync, const char *phase, const char *cls)
{
    size_t i;
    json_t *a;
    json_array_foreach(json_object_get(json_object_get(sync, phase), "actions"), i, a)
    {
        const char *c = json_string_value(json_object_get(a, "class"));
        if (c && strcmp(c, cls) == 0)
            return a;
    }
    return NULL;
}

/* One merged window under construction. */
typedef struct {
    int64_t index;
    sync_acc_t acc;
    bool partial;
    double start_s; /* on the merge's clock; NAN until an input gives one */
    bool seen;
} mwin_t;

static int cmp_index(const void *x, const void *y)
{
    const mwin_t *a = x, *b = y;
    return (a->index > b->index) - (a->index < b->index);
}

/* Adds window w of an input whose second 0 is shift_s after the merge's start. */
static void add_window(mwin_t *m, const json_t *w, double shift_s)
{
    sync_acc_t one = {.period_ns = m->acc.period_ns,
                      .n = (uint64_t)json_integer_value(json_object_get(w, "n")),
                      .cos_sum = json_number_value(json_object_get(w, "cos_sum")),
                      .sin_sum = json_number_value(json_object_get(w, "sin_sum"))};
    json_t *bins = json_object_get(w, "bins");
    for (size_t b = 0; b < SYNC_BINS; b++)
        one.bins[b] = (uint64_t)json_integer_value(json_array_get(bins, b));
    sync_acc_merge(&m->acc, &one);
    m->partial |= json_is_true(json_object_get(w, "partial"));
    double s = json_number_value(json_object_get(w, "start_s")) + shift_s;
    m->start_s = !m->seen || s < m->start_s ? s : m->start_s;
    m->seen = true;
}

/* A gauge figure, or null for a window without sends: no gauge, never an R-bar of 0 that would
 * read "spread". */
static json_t *figure(const sync_gauge_t *g, double v)
{
    return g->n ? json_real(v) : json_null();
}

json_t *results_sync_window_json(int64_t index, double start_s, const sync_acc_t *acc, bool partial)
{
    sync_gauge_t g;
    sync_acc_gauge(acc, &g);
    json_t *bins = json_array();
    for (int b = 0; bins && b < SYNC_BINS; b++)
        json_array_append_new(bins, json_integer((json_int_t)acc->bins[b]));
    return json_pack("{s:I,s:f,s:I,s:o,s:o,s:o,s:o,s:b,s:f,s:f,s:o*}", "index", (json_int_t)index,
                     "start_s", start_s, "n", (json_int_t)g.n, "r_bar", figure(&g, g.r_bar), "z",
                     figure(&g, g.z), "p", figure(&g, g.p), "peak_to_mean",
                     figure(&g, g.peak_to_mean), "partial", partial, "cos_sum",
                     acc->cos_sum + acc->cos_err, "sin_sum", acc->sin_sum + acc->sin_err, "bins",
                     bins);
}

static json_t *window_json(const mwin_t *m)
{
    return results_sync_window_json(m->index, m->start_s, &m->acc, m->partial);
}

/* Finds or appends the merged window of index k among v[0..*n). */
static mwin_t *slot(mwin_t *v, size_t *n, int64_t k, int64_t period)
{
    for (size_t i = 0; i < *n; i++)
        if (v[i].index == k)
            return &v[i];
    mwin_t *m = &v[(*n)++];
    *m = (mwin_t){.index = k};
    sync_acc_init(&m->acc, 0, period);
    return m;
}

/* The merged action of class cls in phase over n inputs (the first having it is `like`). */
static json_t *action_json(const results_input_t *in, size_t n, const char *phase,
                           const json_t *like, int64_t merge_start_ms, int *rc)
{
    const char *cls = json_string_value(json_object_get(like, "class"));
    json_int_t period = json_integer_value(json_object_get(like, "period_ns"));
    size_t cap = 0;
    for (size_t i = 0; i < n; i++) {
        const json_t *a = action_in(json_object_get(in[i].sections, "sync"), phase, cls);
        cap += json_array_size(json_object_get(a, "windows"));
    }
    mwin_t *v = calloc(cap ? cap : 1, sizeof(*v));
    if (!v || period < 1) {
        free(v);
        *rc = period < 1 ? SQ_EINVAL : SQ_ENOMEM;
        return NULL;
    }
    size_t nv = 0;
    json_int_t outside = 0;
    for (size_t i = 0; i < n; i++) {
        const json_t *a = action_in(json_object_get(in[i].sections, "sync"), phase, cls), *w;
        if (!a)
            continue;
        if (json_integer_value(json_object_get(a, "period_ns")) != period) {
            *rc = SQ_EMISMATCH;
            free(v);
            return NULL;
        }
        outside += json_integer_value(json_object_get(a, "outside"));
        double shift = in[i].start_ms && merge_start_ms
                           ? (double)(in[i].start_ms - merge_start_ms) / 1e3
                           : 0.0;
        size_t k;
        json_array_foreach(json_object_get(a, "windows"), k, w)
            add_window(slot(v, &nv, json_integer_value(json_object_get(w, "index")), period), w,
                       shift);
    }
    qsort(v, nv, sizeof(*v), cmp_index);
    json_t *wins = json_array();
    for (size_t i = 0; wins && i < nv; i++)
        json_array_append_new(wins, window_json(&v[i]));
    free(v);
    return json_pack("{s:s,s:I,s:f,s:I,s:o*}", "class", cls, "period_ns", period, "period_s",
                     (double)period / 1e9, "outside", outside, "windows", wins);
}

json_t *results_merge_sync(const results_input_t *in, size_t n, int64_t merge_start_ms, int *rc)
{
    json_t *out = json_object();
    bool any = false;
    *rc = out ? 0 : SQ_ENOMEM;
    for (size_t i = 0; out && *rc == 0 && i < n; i++) {
        const char *phase;
        json_t *ph, *sync = json_object_get(in[i].sections, "sync");
        any |= sync != NULL;
        json_object_foreach(sync, phase, ph)
        {
            size_t k;
            json_t *a;
            json_array_foreach(json_object_get(ph, "actions"), k, a)
            {
                const char *cls = json_string_value(json_object_get(a, "class"));
                json_t *mp = json_object_get(out, phase);
                if (!cls || action_in(out, phase, cls) || *rc)
                    continue;
                if (!mp) {
                    mp = json_pack("{s:[]}", "actions");
                    json_object_set_new(out, phase, mp);
                }
                json_t *m = action_json(in, n, phase, a, merge_start_ms, rc);
                if (m)
                    json_array_append_new(json_object_get(mp, "actions"), m);
            }
        }
    }
    if (*rc || !any) {
        json_decref(out);
        return NULL;
    }
    return out;
}
