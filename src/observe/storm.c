/* Storm reporting for fleet phases: per tick of each periodic action, how tightly the burst went
 * out (dispatch spread, first to last request written), how many of it were on the wire at once,
 * and the latency of requests inside bursts against those in the quiet time between them. */
#include <errno.h>
#include <jansson.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"
#include "squall/sched.h"

#define BINS 10 /* sub-intervals of a tick's window for its dispatch shape */

/* One finished request of a fleet action (uv_hrtime() ns). */
typedef struct {
    int64_t intended, sent, done;
} sreq_t;

/* Online state of one tick, for telling burst from quiet while the run goes. */
typedef struct {
    int64_t first_intended, last_done;
} stick_t;

typedef struct {
    size_t phase;
    int cls;
    enum plan_timing timing;
    int64_t period, offset, base; /* tick k is at base + offset + k * period */
    sreq_t *v;
    size_t n, cap;
    stick_t *ticks;
    size_t n_ticks;
} saction_t;

typedef struct {
    const plan_t *plan;
    out_t *o;
    saction_t *a;
    size_t n, cap;
    hist_t **burst, **quiet; /* per phase, created with its first storm action */
    int failed;              /* SQ_ENOMEM when an action could not be set up */
} storm_t;

static int storm_new(const obs_cfg_t *cfg, void **self)
{
    storm_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->plan = cfg->plan;
    s->o = cfg->o;
    size_t n = cfg->plan->n_phases ? cfg->plan->n_phases : 1;
    s->burst = calloc(n, sizeof(hist_t *));
    s->quiet = calloc(n, sizeof(hist_t *));
    return s->burst && s->quiet ? 0 : SQ_ENOMEM;
}

static saction_t *action_add(storm_t *s)
{
    if (s->n == s->cap) {
        size_t cap = s->cap ? s->cap * 2 : 4;
        saction_t *a = realloc(s->a, cap * sizeof(*a));
        if (!a)
            return NULL;
        s->a = a;
        s->cap = cap;
    }
    saction_t *a = &s->a[s->n++];
    memset(a, 0, sizeof(*a));
    return a;
}

/* A fleet phase starts: one action per class its agents send. Aligned ticks sit on wall-clock
 * multiples of the period, so their offset from t = 0 follows from the wall clock then. */
static void storm_phase(void *self, size_t phase, int64_t base_ns, int64_t realtime0_ns)
{
    storm_t *s = self;
    if (phase >= s->plan->n_phases || !s->plan->phases[phase].fleet.on)
        return;
    const plan_phase_t *pp = &s->plan->phases[phase];
    static const enum plan_timing none = PLAN_TIMING_SPREAD;
    for (size_t k = 0; k < pp->fleet.n_send; k++) {
        saction_t *a = action_add(s);
        if (!a) {
            s->failed = SQ_ENOMEM;
            return;
        }
        a->phase = phase;
        a->cls = pp->fleet.send[k].cls.index;
        a->timing = pp->fleet.timing;
        a->period = pp->fleet.send[k].every_ns;
        a->base = base_ns;
        a->n_ticks = (size_t)(pp->duration_ns / a->period) + 2;
        a->ticks = calloc(a->n_ticks, sizeof(*a->ticks));
        if (a->timing == PLAN_TIMING_ALIGNED)
            a->offset = sched_align_offset(realtime0_ns, a->period);
        if (!a->ticks || (a->timing != none && !s->burst[phase] &&
                          (hist_new_ns(&s->burst[phase]) || hist_new_ns(&s->quiet[phase])))) {
            s->failed = SQ_ENOMEM;
            return;
        }
    }
}

int64_t obs_tick_of(enum plan_timing timing, int64_t base, int64_t offset, int64_t period,
                    int64_t intended)
{
    int64_t rel = intended - base - offset;
    if (timing != PLAN_TIMING_SPREAD)
        rel += period / 2;
    return rel < 0 ? -1 : rel / period;
}

static int64_t tick_of(const saction_t *a, int64_t intended)
{
    return obs_tick_of(a->timing, a->base, a->offset, a->period, intended);
}

static int64_t window_start(const saction_t *a, int64_t k)
{
    int64_t c = a->base + a->offset + k * a->period;
    return a->timing == PLAN_TIMING_SPREAD ? c : c - a->period / 2;
}

/* A request is in a burst when its intended start falls between the first intended start and
 * the latest completion so far of the tick it falls in. */
static bool in_burst(const storm_t *s, size_t phase, int64_t intended)
{
    for (size_t i = 0; i < s->n; i++) {
        const saction_t *a = &s->a[i];
        if (a->phase != phase || a->timing == PLAN_TIMING_SPREAD)
            continue;
        int64_t k = tick_of(a, intended);
        if (k < 0 || (size_t)k >= a->n_ticks || !a->ticks[k].last_done)
            continue;
        if (intended >= a->ticks[k].first_intended && intended <= a->ticks[k].last_done)
            return true;
    }
    return false;
}

static void action_record(saction_t *a, int64_t intended, const eng_result_t *res)
{
    if (a->n == a->cap) {
        size_t cap = a->cap ? a->cap * 2 : 1024;
        sreq_t *v = realloc(a->v, cap * sizeof(*v));
        if (!v)
            return; /* out of memory: the storm report misses this request, the run goes on */
        a->v = v;
        a->cap = cap;
    }
    a->v[a->n++] = (sreq_t){intended, res->sent_ns, res->done_ns};
    int64_t k = tick_of(a, intended);
    if (k < 0 || (size_t)k >= a->n_ticks)
        return;
    stick_t *t = &a->ticks[k];
    if (!t->first_intended || intended < t->first_intended)
        t->first_intended = intended;
    if (res->done_ns > t->last_done)
        t->last_done = res->done_ns;
}

/* Every completion of a fleet phase: its action's record, and burst or quiet latency. */
static void storm_done(void *self, const obs_done_t *d)
{
    storm_t *s = self;
    const eng_result_t *res = d->res;
    if (d->whole || d->phase >= s->plan->n_phases || res->outcome == ENG_OUT_CANCELLED)
        return;
    size_t phase = d->phase;
    bool mine = false, any = false;
    for (size_t i = 0; i < s->n; i++) {
        saction_t *a = &s->a[i];
        if (a->phase != phase)
            continue;
        any = true;
        if (a->cls == d->cls && !mine) {
            action_record(a, d->intended_ns, res);
            mine = a->timing != PLAN_TIMING_SPREAD;
        }
    }
    if (!any)
        return;
    hist_t *h = mine || in_burst(s, phase, d->intended_ns) ? s->burst[phase] : s->quiet[phase];
    if (h)
        hist_record(h, res->done_ns - d->intended_ns);
}

/* ---- the report, once every request has finished ------------------------------------------- */

static int cmp_i64(const void *x, const void *y)
{
    int64_t a = *(const int64_t *)x, b = *(const int64_t *)y;
    return (a > b) - (a < b);
}

/* The most requests of one tick written and not yet finished at any instant: a sweep over the
 * sorted send and finish times (a finish at the same instant as a send comes first). */
static int peak_in_flight(int64_t *sent, int64_t *done, size_t n)
{
    qsort(sent, n, sizeof(*sent), cmp_i64);
    qsort(done, n, sizeof(*done), cmp_i64);
    int cur = 0, peak = 0;
    for (size_t i = 0, j = 0; i < n;) {
        if (j < n && done[j] <= sent[i]) {
            cur--;
            j++;
        } else {
            cur++;
            i++;
            peak = cur > peak ? cur : peak;
        }
    }
    return peak;
}

/* Exact percentile of sorted values, nearest rank. */
static int64_t rank(const int64_t *v, size_t n, double p)
{
    size_t k = (size_t)(p / 100.0 * (double)n + 0.5);
    k = k < 1 ? 1 : k > n ? n : k;
    return v[k - 1];
}

/* A histogram's encoding as a JSON string (NULL when out of memory: the key is left out). */
static json_t *hist_text(const hist_t *h)
{
    char *text;
    if (hist_encode(h, &text) != 0)
        return NULL;
    json_t *s = json_string(text);
    free(text);
    return s;
}

/* The response times of a tick as an encoded histogram, so that a merge of shards can give a
 * merged tick the percentiles of all its requests. */
static json_t *encoded(const int64_t *resp, size_t n)
{
    hist_t *h;
    if (hist_new_ns(&h) != 0)
        return NULL;
    for (size_t i = 0; i < n; i++)
        hist_record(h, resp[i]);
    json_t *s = hist_text(h);
    hist_free(h);
    return s;
}

/* One tick's figures from its requests (indices into a->v). */
static json_t *tick_json(const saction_t *a, int64_t k, const size_t *idx, size_t n, int64_t *buf)
{
    int64_t *sent = buf, *done = buf + n, *resp = buf + 2 * n;
    size_t ns = 0;
    int bins[BINS] = {0};
    int64_t w0 = window_start(a, k);
    for (size_t i = 0; i < n; i++) {
        const sreq_t *q = &a->v[idx[i]];
        resp[i] = q->done - q->intended;
        if (!q->sent)
            continue;
        sent[ns] = q->sent;
        done[ns++] = q->done;
        int64_t b = (q->sent - w0) * BINS / a->period;
        bins[b < 0 ? 0 : b >= BINS ? BINS - 1 : b]++;
    }
    qsort(resp, n, sizeof(*resp), cmp_i64);
    json_t *enc = encoded(resp, n);
    int64_t tick_t = a->base + a->offset + k * a->period;
    json_t *jb = json_array();
    for (int b = 0; b < BINS; b++)
        json_array_append_new(jb, json_integer(bins[b]));
    int peak = ns ? peak_in_flight(sent, done, ns) : 0; /* sorts sent and done */
    int64_t last_done = ns ? done[ns - 1] : 0;
    return json_pack("{s:I,s:I,s:I,s:I,s:I,s:i,s:I,s:I,s:I,s:I,s:o,s:o*}", "t_ns",
                     (json_int_t)(tick_t - a->base), "requests", (json_int_t)n, "written",
                     (json_int_t)ns, "dispatch_spread_ns",
                     (json_int_t)(ns ? sent[ns - 1] - sent[0] : 0), "first_written_ns",
                     (json_int_t)(ns ? sent[0] - tick_t : 0), "peak_in_flight", peak, "burst_ns",
                     (json_int_t)(ns ? last_done - sent[0] : 0), "p50_ns",
                     (json_int_t)rank(resp, n, 50), "p99_ns", (json_int_t)rank(resp, n, 99),
                     "max_ns", (json_int_t)resp[n - 1], "bins", jb, "hist", enc);
}

/* Requests grouped by tick: order[] holds indices of a->v, start[k]..start[k+1] tick k's. */
static int group_by_tick(const saction_t *a, size_t **order, size_t **start)
{
    *order = malloc((a->n ? a->n : 1) * sizeof(**order));
    *start = calloc(a->n_ticks + 1, sizeof(**start));
    if (!*order || !*start)
        return SQ_ENOMEM;
    for (size_t i = 0; i < a->n; i++) {
        int64_t k = tick_of(a, a->v[i].intended);
        if (k >= 0 && (size_t)k < a->n_ticks)
            (*start)[k + 1]++;
    }
    for (size_t k = 0; k < a->n_ticks; k++)
        (*start)[k + 1] += (*start)[k];
    size_t *fill = calloc(a->n_ticks, sizeof(*fill));
    if (!fill)
        return SQ_ENOMEM;
    for (size_t i = 0; i < a->n; i++) {
        int64_t k = tick_of(a, a->v[i].intended);
        if (k >= 0 && (size_t)k < a->n_ticks)
            (*order)[(*start)[k] + fill[k]++] = i;
    }
    free(fill);
    return 0;
}

static const char *timing_name(enum plan_timing t)
{
    return t == PLAN_TIMING_ALIGNED ? "aligned" : t == PLAN_TIMING_JITTER ? "jitter" : "spread";
}

static json_t *action_json(const storm_t *s, const saction_t *a)
{
    size_t *order = NULL, *start = NULL;
    int64_t *buf = malloc(3 * (a->n ? a->n : 1) * sizeof(*buf));
    json_t *ticks = json_array();
    int64_t max_spread = 0;
    int max_peak = 0;
    if (buf && ticks && group_by_tick(a, &order, &start) == 0) {
        for (size_t k = 0; k < a->n_ticks; k++) {
            size_t n = start[k + 1] - start[k];
            json_t *t = n ? tick_json(a, (int64_t)k, order + start[k], n, buf) : NULL;
            if (!t)
                continue;
            json_int_t sp = json_integer_value(json_object_get(t, "dispatch_spread_ns"));
            json_int_t pk = json_integer_value(json_object_get(t, "peak_in_flight"));
            max_spread = sp > max_spread ? sp : max_spread;
            max_peak = pk > max_peak ? (int)pk : max_peak;
            json_array_append_new(ticks, t);
        }
    }
    free(order);
    free(start);
    free(buf);
    return json_pack("{s:s,s:s,s:I,s:I,s:I,s:I,s:i,s:o}", "class", s->plan->reqs[a->cls].name,
                     "timing", timing_name(a->timing), "period_ns", (json_int_t)a->period,
                     "offset_ns", (json_int_t)a->offset, "max_dispatch_spread_ns",
                     (json_int_t)max_spread, "requests", (json_int_t)a->n, "max_peak_in_flight",
                     max_peak, "ticks", ticks ? ticks : json_array());
}

static json_t *hist_json(const hist_t *h)
{
    return json_pack("{s:I,s:I,s:I,s:I,s:I,s:o*}", "count", (json_int_t)hist_count(h), "p50_ns",
                     (json_int_t)hist_value_at(h, 50), "p90_ns", (json_int_t)hist_value_at(h, 90),
                     "p99_ns", (json_int_t)hist_value_at(h, 99), "max_ns", (json_int_t)hist_max(h),
                     "hist", hist_text(h));
}

static json_t *storms_json(const storm_t *s)
{
    json_t *sec = json_object();
    for (size_t p = 0; sec && p < s->plan->n_phases; p++) {
        json_t *actions = json_array();
        for (size_t i = 0; i < s->n; i++)
            if (s->a[i].phase == p)
                json_array_append_new(actions, action_json(s, &s->a[i]));
        if (!json_array_size(actions)) {
            json_decref(actions);
            continue;
        }
        json_t *ph = json_pack("{s:o}", "actions", actions);
        if (ph && s->burst[p]) {
            /* Latency (from the intended start) of every request of the phase, any class. */
            json_object_set_new(ph, "burst", hist_json(s->burst[p]));
            json_object_set_new(ph, "quiet", hist_json(s->quiet[p]));
        }
        json_object_set_new(sec, s->plan->phases[p].name, ph);
    }
    return sec;
}

/* ns in a JSON object as milliseconds for a CSV cell. */
static double json_ms(const json_t *o, const char *key)
{
    return (double)json_integer_value(json_object_get(o, key)) / 1e6;
}

static void csv_action(FILE *f, const char *phase, json_t *a)
{
    size_t k;
    json_t *t;
    json_array_foreach(json_object_get(a, "ticks"), k, t)
    {
        fprintf(f, "%s,%s,%s,%.3f,%lld,%lld,%.3f,%.3f,%lld,%.3f,%.3f,%.3f,%.3f\n", phase,
                json_string_value(json_object_get(a, "class")),
                json_string_value(json_object_get(a, "timing")), json_ms(t, "t_ns") / 1e3,
                (long long)json_integer_value(json_object_get(t, "requests")),
                (long long)json_integer_value(json_object_get(t, "written")),
                json_ms(t, "dispatch_spread_ns"), json_ms(t, "first_written_ns"),
                (long long)json_integer_value(json_object_get(t, "peak_in_flight")),
                json_ms(t, "burst_ns"), json_ms(t, "p50_ns"), json_ms(t, "p99_ns"),
                json_ms(t, "max_ns"));
    }
}

int obs_storms_csv(json_t *storms, const char *dir, out_t *o)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/storms.csv", dir);
    FILE *f = fopen(path, "w");
    if (!f) {
        out_error(o, "cannot write %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    fputs("phase,class,timing,tick_s,requests,written,dispatch_spread_ms,first_written_ms,"
          "peak_in_flight,burst_ms,p50_ms,p99_ms,max_ms\n",
          f);
    const char *phase;
    json_t *ph;
    json_object_foreach(storms, phase, ph)
    {
        size_t i;
        json_t *a;
        json_array_foreach(json_object_get(ph, "actions"), i, a) csv_action(f, phase, a);
    }
    return fclose(f) == 0 ? 0 : SQ_EIO;
}

static int storm_finish(void *self, results_t *res, const char *dir)
{
    storm_t *s = self;
    if (s->failed)
        return s->failed;
    if (!s->n)
        return 0;
    json_t *sec = storms_json(s);
    if (!sec || results_set_section(res, "storms", sec))
        return SQ_ENOMEM;
    return dir ? obs_storms_csv(results_section(res, "storms"), dir, s->o) : 0;
}

static void storm_free(void *self)
{
    storm_t *s = self;
    for (size_t i = 0; i < s->n; i++) {
        free(s->a[i].v);
        free(s->a[i].ticks);
    }
    for (size_t p = 0; p < s->plan->n_phases; p++) {
        if (s->burst)
            hist_free(s->burst[p]);
        if (s->quiet)
            hist_free(s->quiet[p]);
    }
    free(s->burst);
    free(s->quiet);
    free(s->a);
    free(s);
}

static const obs_ops_t ops = {
    .name = "storm",
    .phase = storm_phase,
    .done = storm_done,
    .finish = storm_finish,
    .free = storm_free,
};

const obs_entry_t obs_storm_entry = {.ops = &ops, .new = storm_new};
