/* The runner's judgement of itself and of the target, once a second: is the generator keeping
 * its schedule (generator_limited), and has a brake's condition held long enough to stop. */
#include <stdlib.h>
#include <string.h>

#include "run_int.h"
#include "squall/err.h"

/* A second is generator-limited when any of these holds; the figures are ours, chosen so that a
 * healthy run on a 2-core machine (NOTES-libraries.md: lag p99 ~1.7 ms at 10k/s) stays clear. */
#define LIMIT_LAG_P99_NS    (10 * INT64_C(1000000)) /* schedule lag p99 in the second */
#define LIMIT_QUEUE_WAIT_NS (10 * INT64_C(1000000)) /* a request waited for a free connection */
#define LIMIT_BUSY_FRACTION 0.90                    /* the loop spent this much in callbacks */

/* Brakes every run gets unless --no-brakes or the plan sets its own of that kind. A loopback
 * target is the user's own (the embedded target, a local server): loose defaults. Any other
 * target is taken to be shared (staging): stricter ones, and a latency brake, so a plan that
 * overloads it stops within seconds. The figures are ours: 5 % errors over 10 s, no answer for
 * 5 s, p99 of every class together above 5 s (the scoped-list objective of NOTES-methods.md,
 * "Objectives") held for 10 s. */
static const plan_brake_t loopback_brakes[] = {
    {.kind = PLAN_BRAKE_ERROR_RATE, .cls = {.index = -1}, .value = 0.10, .for_ns = 10000000000},
    {.kind = PLAN_BRAKE_UNREACHABLE, .cls = {.index = -1}, .max_ns = 10000000000},
};
static const plan_brake_t shared_brakes[] = {
    {.kind = PLAN_BRAKE_ERROR_RATE, .cls = {.index = -1}, .value = 0.05, .for_ns = 10000000000},
    {.kind = PLAN_BRAKE_UNREACHABLE, .cls = {.index = -1}, .max_ns = 5000000000},
    {.kind = PLAN_BRAKE_PERCENTILE,
     .cls = {.index = -1},
     .percentile = 99,
     .max_ns = 5000000000,
     .for_ns = 10000000000},
};

typedef struct {
    plan_brake_t b;
    bool by_default; /* not from the plan */
    size_t window_s; /* seconds in the ring */
    int64_t *err, *cnt;
    int64_t held_s; /* consecutive seconds the per-second condition held */
} brake_t;

struct run_health {
    brake_t *brakes;
    size_t n;
};

static int brake_add(struct run_health *h, const plan_brake_t *b, bool by_default)
{
    brake_t *nb = realloc(h->brakes, (h->n + 1) * sizeof(*nb));
    if (!nb)
        return SQ_ENOMEM;
    h->brakes = nb;
    brake_t *k = &h->brakes[h->n];
    memset(k, 0, sizeof(*k));
    k->b = *b;
    k->by_default = by_default;
    int64_t w = (b->for_ns + 999999999) / 1000000000;
    k->window_s = (size_t)(w < 1 ? 1 : w);
    k->err = calloc(k->window_s, sizeof(int64_t));
    k->cnt = calloc(k->window_s, sizeof(int64_t));
    if (!k->err || !k->cnt) {
        free(k->err);
        free(k->cnt);
        return SQ_ENOMEM;
    }
    h->n++;
    return 0;
}

static bool plan_has_brake(const plan_t *p, enum plan_brake_kind kind)
{
    for (size_t i = 0; i < p->n_brakes; i++)
        if (p->brakes[i].kind == kind)
            return true;
    return false;
}

int run_health_init(runner_t *r)
{
    struct run_health *h = calloc(1, sizeof(*h));
    if (!h)
        return SQ_ENOMEM;
    r->health = h;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < r->plan->n_brakes; i++)
        rc = brake_add(h, &r->plan->brakes[i], false);
    bool shared = !r->plan->target.loopback;
    const plan_brake_t *defaults = shared ? shared_brakes : loopback_brakes;
    size_t n_default = shared ? sizeof shared_brakes / sizeof shared_brakes[0]
                              : sizeof loopback_brakes / sizeof loopback_brakes[0];
    for (size_t i = 0; rc == 0 && !r->opts->no_brakes && i < n_default; i++)
        if (!plan_has_brake(r->plan, defaults[i].kind))
            rc = brake_add(h, &defaults[i], true);
    return rc;
}

void run_health_close(runner_t *r)
{
    struct run_health *h = r->health;
    for (size_t i = 0; h && i < h->n; i++) {
        free(h->brakes[i].err);
        free(h->brakes[i].cnt);
    }
    if (h)
        free(h->brakes);
    free(h);
    r->health = NULL;
}

static void limited_second(runner_t *r, const eng_stats_t *st, int64_t lag_p99)
{
    double busy = st->window_ns > 0 ? (double)st->loop_busy_ns / (double)st->window_ns : 0;
    if (st->max_queue_wait_ns > r->max_queue_wait_ns)
        r->max_queue_wait_ns = st->max_queue_wait_ns;
    if (st->max_loop_busy_ns > r->max_loop_busy_ns)
        r->max_loop_busy_ns = st->max_loop_busy_ns;
    if (st->queued > r->max_queued)
        r->max_queued = st->queued;
    if (busy > r->max_busy_fraction)
        r->max_busy_fraction = busy;
    r->limited_now = true;
    if (st->max_queue_wait_ns > LIMIT_QUEUE_WAIT_NS)
        snprintf(r->limited_why, sizeof r->limited_why,
                 "requests waited up to %.1f ms for a free connection",
                 (double)st->max_queue_wait_ns / 1e6);
    else if (lag_p99 > LIMIT_LAG_P99_NS)
        snprintf(r->limited_why, sizeof r->limited_why, "schedule lag p99 %.1f ms",
                 (double)lag_p99 / 1e6);
    else if (busy > LIMIT_BUSY_FRACTION)
        snprintf(r->limited_why, sizeof r->limited_why, "event loop %.0f%% busy", busy * 100);
    else
        r->limited_now = false;
    if (r->limited_now)
        r->limited_seconds++;
}

/* Errors and completions of this second for a brake's class (or all). */
static void second_counts(const runner_t *r, int cls, int64_t *err, int64_t *cnt)
{
    if (cls < 0) {
        *err = r->sec_errors;
        *cnt = r->sec_completed;
    } else {
        *err = r->sec[cls].errors;
        *cnt = r->sec[cls].completed;
    }
}

/* True when the brake's condition holds now; explains it in why. */
static bool brake_check(runner_t *r, brake_t *k, char *why, size_t cap)
{
    const plan_brake_t *b = &k->b;
    size_t slot = (size_t)r->sec_index % k->window_s;
    switch (b->kind) {
    case PLAN_BRAKE_ERROR_RATE: {
        second_counts(r, b->cls.index, &k->err[slot], &k->cnt[slot]);
        int64_t e = 0, c = 0;
        for (size_t i = 0; i < k->window_s; i++) {
            e += k->err[i];
            c += k->cnt[i];
        }
        /* Twenty answers at least, so one early failure cannot stop a run on its own. */
        if (c < 20 || (int64_t)r->sec_index + 1 < (int64_t)k->window_s ||
            (double)e / (double)c <= b->value)
            return false;
        snprintf(why, cap, "error rate %.1f%% over the last %zus is above %.1f%%",
                 100.0 * (double)e / (double)c, k->window_s, 100 * b->value);
        return true;
    }
    case PLAN_BRAKE_PERCENTILE: {
        const hist_t *h = b->cls.index < 0 ? r->sec_all : r->sec[b->cls.index].response;
        int64_t v = hist_value_at(h, b->percentile);
        k->held_s = hist_count(h) > 0 && v > b->max_ns ? k->held_s + 1 : 0;
        if (k->held_s < (int64_t)k->window_s)
            return false;
        snprintf(why, cap, "p%g latency above %.0f ms for %zus (now %.1f ms)", b->percentile,
                 (double)b->max_ns / 1e6, k->window_s, (double)v / 1e6);
        return true;
    }
    case PLAN_BRAKE_UNREACHABLE: {
        /* Only time spent waiting counts: the silence between a fleet's ticks, with nothing
         * in flight, is the plan's own, not the target's. */
        int64_t now = (int64_t)uv_hrtime();
        int64_t since = r->last_response_ns > r->busy_since_ns ? r->last_response_ns
                                                                : r->busy_since_ns;
        if (r->in_flight == 0 || now - since < b->max_ns)
            return false;
        snprintf(why, cap, "no answer from the target for %.0fs", (double)(now - since) / 1e9);
        return true;
    }
    case PLAN_BRAKE_SATURATION:
        k->held_s = r->limited_now ? k->held_s + 1 : 0;
        if (k->held_s < (int64_t)k->window_s)
            return false;
        snprintf(why, cap, "generator limited for %zus: %s", k->window_s, r->limited_why);
        return true;
    }
    return false;
}

void run_health_second(runner_t *r, const eng_stats_t *st, int64_t lag_p99)
{
    limited_second(r, st, lag_p99);
    if (r->state != RUN_ACTIVE)
        return;
    for (size_t i = 0; i < r->health->n; i++) {
        char why[200];
        if (brake_check(r, &r->health->brakes[i], why, sizeof why)) {
            run_request_stop(r, RUN_STOP_BRAKE, "brake: %s", why);
            return;
        }
    }
}

/* judge: the brakes in force, for the "brakes" section of results.json. */
json_t *run_health_brakes_json(const runner_t *r)
{
    static const char *const kinds[] = {"error-rate", "percentile", "unreachable", "saturation"};
    json_t *list = json_array();
    for (size_t i = 0; list && r->health && i < r->health->n; i++) {
        const brake_t *k = &r->health->brakes[i];
        const plan_brake_t *b = &k->b;
        json_t *e = json_pack("{s:s, s:s, s:s, s:f}", "kind", kinds[b->kind], "source",
                              k->by_default ? "default" : "plan", "class",
                              b->cls.index < 0 ? "*" : r->plan->reqs[b->cls.index].name, "for_s",
                              (double)b->for_ns / 1e9);
        if (b->kind == PLAN_BRAKE_ERROR_RATE)
            json_object_set_new(e, "error_rate", json_real(b->value));
        if (b->kind == PLAN_BRAKE_PERCENTILE) {
            json_object_set_new(e, "percentile", json_real(b->percentile));
            json_object_set_new(e, "max_ms", json_real((double)b->max_ns / 1e6));
        }
        if (b->kind == PLAN_BRAKE_UNREACHABLE)
            json_object_set_new(e, "after_s", json_real((double)b->max_ns / 1e9));
        json_array_append_new(list, e);
    }
    return json_pack("{s:b, s:o}", "shared_target", !r->plan->target.loopback, "brakes", list);
}

double run_phase_expected(const run_phase_t *ph, int64_t t0, int64_t t1)
{
    double e = 0;
    if (ph->open)
        e += sched_open_lambda(&ph->open_cfg, t1) - sched_open_lambda(&ph->open_cfg, t0);
    for (size_t i = 0; i < ph->n_fleet; i++)
        e += (double)ph->pp->fleet.agents * (double)(t1 - t0) /
             (double)ph->pp->fleet.send[i].every_ns;
    if (ph->pp->churn.on) /* life: churn issues its ops evenly at its rate */
        e += ph->pp->churn.rate * (double)(t1 - t0) / 1e9;
    return e;
}

json_t *run_health_json(const runner_t *r)
{
    json_t *g = json_object();
    json_t *lim = json_object();
    json_object_set_new(lim, "lag_p99_ms", json_real((double)LIMIT_LAG_P99_NS / 1e6));
    json_object_set_new(lim, "queue_wait_ms", json_real((double)LIMIT_QUEUE_WAIT_NS / 1e6));
    json_object_set_new(lim, "loop_busy_fraction", json_real(LIMIT_BUSY_FRACTION));
    json_object_set_new(g, "generator_limited", json_boolean(r->limited_seconds > 0));
    json_object_set_new(g, "limited_seconds", json_integer(r->limited_seconds));
    json_object_set_new(g, "last_reason",
                        r->limited_seconds ? json_string(r->limited_why) : json_null());
    json_object_set_new(g, "schedule_lag_p50_ms",
                        json_real((double)hist_value_at(r->sched_lag, 50) / 1e6));
    json_object_set_new(g, "schedule_lag_p99_ms",
                        json_real((double)hist_value_at(r->sched_lag, 99) / 1e6));
    json_object_set_new(g, "schedule_lag_max_ms", json_real((double)hist_max(r->sched_lag) / 1e6));
    json_object_set_new(g, "max_queue_wait_ms", json_real((double)r->max_queue_wait_ns / 1e6));
    json_object_set_new(g, "max_queued", json_integer(r->max_queued));
    json_object_set_new(g, "max_loop_pass_ms", json_real((double)r->max_loop_busy_ns / 1e6));
    json_object_set_new(g, "max_loop_busy_fraction", json_real(r->max_busy_fraction));
    json_object_set_new(g, "thresholds", lim);
    json_object_set_new(g, "started", json_integer(r->total_started));
    json_object_set_new(g, "completed", json_integer(r->total_completed));
    json_object_set_new(g, "errors", json_integer(r->total_errors));
    return g;
}
