/* Storm reporting for fleet phases: per tick of each periodic action, how tightly the burst went
 * out (dispatch spread, first to last request written), how many of it were on the wire at once,
 * and the latency of requests inside bursts against those in the quiet time between them. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>

#include "run_int.h"
#include "squall/err.h"

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

struct run_storm {
    saction_t *a;
    size_t n, cap;
    hist_t **burst, **quiet; /* per phase, created with its first storm action */
};

static saction_t *action_add(runner_t *r)
{
    struct run_storm *s = r->storm;
    if (!s) {
        s = r->storm = calloc(1, sizeof(*s));
        if (!s || !(s->burst = calloc(r->n_phases, sizeof(hist_t *))) ||
            !(s->quiet = calloc(r->n_phases, sizeof(hist_t *))))
            return NULL;
    }
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

int run_storm_start(runner_t *r, size_t phase)
{
    run_phase_t *ph = &r->phases[phase];
    const plan_phase_t *pp = ph->pp;
    for (size_t k = 0; k < ph->n_fleet; k++) {
        saction_t *a = action_add(r);
        if (!a)
            return SQ_ENOMEM;
        a->phase = phase;
        a->cls = ph->fleet[k].cls;
        a->timing = pp->fleet.timing;
        a->period = pp->fleet.send[k].every_ns;
        a->base = ph->base_ns;
        a->n_ticks = (size_t)(ph->duration_ns / a->period) + 2;
        a->ticks = calloc(a->n_ticks, sizeof(*a->ticks));
        if (!a->ticks)
            return SQ_ENOMEM;
        int64_t t0;
        int agent;
        /* Aligned ticks sit on wall-clock multiples of the period: the first action's offset. */
        if (a->timing == PLAN_TIMING_ALIGNED && sched_fleet_peek(ph->fleet[k].sched, &t0, &agent))
            a->offset = t0 % a->period;
        if (a->timing != PLAN_TIMING_SPREAD && !r->storm->burst[phase] &&
            (hist_new_ns(&r->storm->burst[phase]) || hist_new_ns(&r->storm->quiet[phase])))
            return SQ_ENOMEM;
    }
    return 0;
}

/* The tick a start belongs to: aligned and jittered ticks are windows centred on base + offset
 * + k * period (a jittered agent fires on either side of it); spread ticks are the periods. */
static int64_t tick_of(const saction_t *a, int64_t intended)
{
    int64_t rel = intended - a->base - a->offset;
    if (a->timing != PLAN_TIMING_SPREAD)
        rel += a->period / 2;
    return rel < 0 ? -1 : rel / a->period;
}

static int64_t window_start(const saction_t *a, int64_t k)
{
    int64_t c = a->base + a->offset + k * a->period;
    return a->timing == PLAN_TIMING_SPREAD ? c : c - a->period / 2;
}

/* A request is in a burst when its intended start falls between the first intended start and
 * the latest completion so far of the tick it falls in. */
static bool in_burst(const struct run_storm *s, size_t phase, int64_t intended)
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

void run_storm_done(runner_t *r, int phase, int cls, int64_t intended, const eng_result_t *res)
{
    struct run_storm *s = r->storm;
    if (!s || res->outcome == ENG_OUT_CANCELLED)
        return;
    bool mine = false;
    for (size_t i = 0; i < s->n; i++) {
        saction_t *a = &s->a[i];
        if (a->phase == (size_t)phase && a->cls == cls && !mine) {
            action_record(a, intended, res);
            mine = a->timing != PLAN_TIMING_SPREAD;
        }
    }
    hist_t *h = mine || in_burst(s, (size_t)phase, intended) ? s->burst[phase] : s->quiet[phase];
    if (h)
        hist_record(h, res->done_ns - intended);
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
    int64_t tick_t = a->base + a->offset + k * a->period;
    json_t *jb = json_array();
    for (int b = 0; b < BINS; b++)
        json_array_append_new(jb, json_integer(bins[b]));
    int peak = ns ? peak_in_flight(sent, done, ns) : 0; /* sorts sent and done */
    int64_t last_done = ns ? done[ns - 1] : 0;
    return json_pack(
        "{s:I,s:I,s:I,s:I,s:I,s:i,s:I,s:I,s:I,s:I,s:o}", "t_ns", (json_int_t)(tick_t - a->base),
        "requests", (json_int_t)n, "written", (json_int_t)ns, "dispatch_spread_ns",
        (json_int_t)(ns ? sent[ns - 1] - sent[0] : 0), "first_written_ns",
        (json_int_t)(ns ? sent[0] - tick_t : 0), "peak_in_flight", peak, "burst_ns",
        (json_int_t)(ns ? last_done - sent[0] : 0), "p50_ns", (json_int_t)rank(resp, n, 50),
        "p99_ns", (json_int_t)rank(resp, n, 99), "max_ns", (json_int_t)resp[n - 1], "bins", jb);
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

static json_t *action_json(const runner_t *r, const saction_t *a)
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
    return json_pack("{s:s,s:s,s:I,s:I,s:I,s:I,s:i,s:o}", "class", r->classes[a->cls].pr->name,
                     "timing", timing_name(a->timing), "period_ns", (json_int_t)a->period,
                     "offset_ns", (json_int_t)a->offset, "max_dispatch_spread_ns",
                     (json_int_t)max_spread, "requests", (json_int_t)a->n, "max_peak_in_flight",
                     max_peak, "ticks", ticks ? ticks : json_array());
}

static json_t *hist_json(const hist_t *h)
{
    return json_pack("{s:I,s:I,s:I,s:I,s:I}", "count", (json_int_t)hist_count(h), "p50_ns",
                     (json_int_t)hist_value_at(h, 50), "p90_ns", (json_int_t)hist_value_at(h, 90),
                     "p99_ns", (json_int_t)hist_value_at(h, 99), "max_ns", (json_int_t)hist_max(h));
}

void run_storm_finish(runner_t *r)
{
    struct run_storm *s = r->storm;
    if (!s || !s->n || !r->res)
        return;
    json_t *sec = json_object();
    for (size_t p = 0; sec && p < r->n_phases; p++) {
        json_t *actions = json_array();
        for (size_t i = 0; i < s->n; i++)
            if (s->a[i].phase == p)
                json_array_append_new(actions, action_json(r, &s->a[i]));
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
        json_object_set_new(sec, r->plan->phases[p].name, ph);
    }
    results_set_section(r->res, "storms", sec);
}

void run_storm_close(runner_t *r)
{
    struct run_storm *s = r->storm;
    if (!s)
        return;
    for (size_t i = 0; i < s->n; i++) {
        free(s->a[i].v);
        free(s->a[i].ticks);
    }
    for (size_t p = 0; p < r->n_phases && s->burst; p++) {
        hist_free(s->burst[p]);
        if (s->quiet)
            hist_free(s->quiet[p]);
    }
    free(s->burst);
    free(s->quiet);
    free(s->a);
    free(s);
    r->storm = NULL;
}
