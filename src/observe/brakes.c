/* The brakes: once a second while the plan's phases send, has a brake's condition held long
 * enough to stop the run (error rate, a latency percentile, no answer, squall unable to offer the planned load). */
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/clock.h"
#include "squall/err.h"

/* Brakes every run gets unless --no-brakes or the plan sets its own of that kind. A loopback
 * target is the user's own (the embedded target, a local server): loose defaults. Any other
 * target is taken to be shared (staging): stricter ones, and a latency brake, so a plan that
 * overloads it stops within seconds. The figures are ours: 5 % errors over 10 s, no answer for
 * 5 s, p99 of every class together above 5 s held for 10 s (5 s is the common-practice p99
 * objective for lists scoped to a collection). */
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

typedef struct {
    const plan_t *plan;
    void (*fire)(void *user, int kind, const char *why);
    void *user;
    brake_t *brakes;
    size_t n;
    bool fired;
} brakes_t;

static int brake_add(brakes_t *h, const plan_brake_t *b, bool by_default)
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

static void brakes_free(void *self)
{
    brakes_t *h = self;
    for (size_t i = 0; i < h->n; i++) {
        free(h->brakes[i].err);
        free(h->brakes[i].cnt);
    }
    free(h->brakes);
    free(h);
}

static int brakes_new(const obs_cfg_t *cfg, void **self)
{
    brakes_t *h = calloc(1, sizeof(*h));
    if (!h)
        return SQ_ENOMEM;
    *self = h;
    h->plan = cfg->plan;
    h->fire = cfg->brake;
    h->user = cfg->user;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < cfg->plan->n_brakes; i++)
        rc = brake_add(h, &cfg->plan->brakes[i], false);
    bool shared = !cfg->plan->target.loopback;
    const plan_brake_t *defaults = shared ? shared_brakes : loopback_brakes;
    size_t n_default = shared ? sizeof shared_brakes / sizeof shared_brakes[0]
                              : sizeof loopback_brakes / sizeof loopback_brakes[0];
    for (size_t i = 0; rc == 0 && !cfg->no_brakes && i < n_default; i++)
        if (!plan_has_brake(cfg->plan, defaults[i].kind))
            rc = brake_add(h, &defaults[i], true);
    return rc;
}

static bool error_rate(brake_t *k, const obs_second_t *s, char *why, size_t cap)
{
    size_t slot = (size_t)s->index % k->window_s;
    const obs_cell_t *c = k->b.cls.index < 0 ? NULL : &s->per_class[k->b.cls.index];
    k->err[slot] = c ? c->errors : s->errors;
    k->cnt[slot] = c ? c->completed : s->completed;
    int64_t e = 0, n = 0;
    for (size_t i = 0; i < k->window_s; i++) {
        e += k->err[i];
        n += k->cnt[i];
    }
    /* Twenty answers at least, so one early failure cannot stop a run on its own. */
    if (n < 20 || s->index + 1 < (int64_t)k->window_s || (double)e / (double)n <= k->b.value)
        return false;
    snprintf(why, cap, "error rate %.1f%% over the last %zus is above %.1f%%",
             100.0 * (double)e / (double)n, k->window_s, 100 * k->b.value);
    return true;
}

static bool percentile(brake_t *k, const obs_second_t *s, char *why, size_t cap)
{
    const plan_brake_t *b = &k->b;
    const hist_t *h = b->cls.index < 0 ? s->response : s->per_class[b->cls.index].response;
    int64_t v = hist_value_at(h, b->percentile);
    k->held_s = hist_count(h) > 0 && v > b->max_ns ? k->held_s + 1 : 0;
    if (k->held_s < (int64_t)k->window_s)
        return false;
    snprintf(why, cap, "p%g latency above %.0f ms for %zus (now %.1f ms)", b->percentile,
             (double)b->max_ns / 1e6, k->window_s, (double)v / 1e6);
    return true;
}

/* Only time spent waiting or failing counts: the silence between a fleet's ticks, with nothing
 * in flight and nothing refused, is the plan's own, not the target's. A target that refuses
 * connections (restarting) fails requests at once, so in_flight may be 0 at every check: the
 * first unanswered end since the last answer starts the clock too. The engine's own "refuses
 * connections" is only a hint to the run (run.c); this brake decides, over its window. */
static bool unreachable(brake_t *k, const obs_second_t *s, char *why, size_t cap)
{
    int64_t now = clock_mono_ns();
    int64_t since = 0;
    if (s->in_flight > 0)
        since = s->last_answer_ns > s->busy_since_ns ? s->last_answer_ns : s->busy_since_ns;
    if (s->unanswered_since_ns && (!since || s->unanswered_since_ns < since))
        since = s->unanswered_since_ns;
    if (!since || now - since < k->b.max_ns)
        return false;
    snprintf(why, cap, "no answer from the target for %.0fs", (double)(now - since) / 1e9);
    return true;
}

static bool saturation(brake_t *k, const obs_second_t *s, char *why, size_t cap)
{
    /* Either kind: squall's own lag, or a queue behind connections a slow target holds (its
     * backlog would reach the target all at once when it recovers). */
    k->held_s = s->bound != OBS_BOUND_NONE ? k->held_s + 1 : 0;
    if (k->held_s < (int64_t)k->window_s)
        return false;
    snprintf(why, cap, "squall could not offer the planned load for %zus (%s): %s", k->window_s,
             s->bound == OBS_BOUND_GENERATOR ? "generator-bound" : "connection-bound",
             s->bound_why);
    return true;
}

static void brakes_second(void *self, const obs_second_t *s)
{
    static bool (*const check[])(brake_t *, const obs_second_t *, char *, size_t) = {
        [PLAN_BRAKE_ERROR_RATE] = error_rate,
        [PLAN_BRAKE_PERCENTILE] = percentile,
        [PLAN_BRAKE_UNREACHABLE] = unreachable,
        [PLAN_BRAKE_SATURATION] = saturation,
    };
    brakes_t *h = self;
    if (!s->loading || h->fired)
        return;
    for (size_t i = 0; i < h->n; i++) {
        char why[200];
        if (check[h->brakes[i].b.kind](&h->brakes[i], s, why, sizeof why)) {
            h->fired = true;
            char text[220];
            snprintf(text, sizeof text, "brake: %s", why);
            if (h->fire)
                h->fire(h->user, (int)h->brakes[i].b.kind, text);
            return;
        }
    }
}

json_t *obs_brakes_section(const void *self)
{
    static const char *const kinds[] = {"error-rate", "percentile", "unreachable", "saturation"};
    const brakes_t *h = self;
    json_t *list = json_array();
    for (size_t i = 0; list && i < h->n; i++) {
        const brake_t *k = &h->brakes[i];
        const plan_brake_t *b = &k->b;
        json_t *e = json_pack("{s:s, s:s, s:s, s:f}", "kind", kinds[b->kind], "source",
                              k->by_default ? "default" : "plan", "class",
                              b->cls.index < 0 ? "*" : h->plan->reqs[b->cls.index].name, "for_s",
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
    return json_pack("{s:b, s:o}", "shared_target", !h->plan->target.loopback, "brakes", list);
}

static const obs_ops_t ops = {
    .name = "brakes",
    .second = brakes_second,
    .free = brakes_free,
};

const obs_entry_t obs_brakes_entry = {.ops = &ops, .new = brakes_new};
