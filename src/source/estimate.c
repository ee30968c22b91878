/* What a plan would do, phase by phase: the sources' own models (the same `expected` the live
 * line asks each second) give the starts per class; the objects created, deleted and left
 * alive follow from them. `check` prints these. Expected values, not promises: Poisson
 * arrivals and closed loops vary around them. */
#include <math.h>
#include <string.h>

#include "src_int.h"
#include "squall/err.h"

/* The highest planned rate of the open-loop shape. */
static double open_peak(const plan_phase_t *ph)
{
    switch (ph->shape) {
    case PLAN_LOAD_CONSTANT:
        return ph->rate;
    case PLAN_LOAD_RAMP:
        return ph->ramp_from > ph->ramp_to ? ph->ramp_from : ph->ramp_to;
    case PLAN_LOAD_STEPS: {
        double peak = 0, t = 0;
        for (size_t i = 0; i < ph->n_steps && t < ph->duration_ns; i++) {
            peak = ph->steps[i].rate > peak ? ph->steps[i].rate : peak;
            t += (double)ph->steps[i].for_ns;
        }
        return peak;
    }
    default:
        return 0;
    }
}

/* The shard's share of n numbered things (clients, agents, watches). */
static int share(sched_shard_t sh, int n)
{
    return (int)sched_shard_share(sh, 0, n > 0 ? (uint64_t)n : 0);
}

/* Rates, bursts and counts of the phase as the plan writes them (a shard's share of them: the
 * rates of open loops, churn and teardown divided by N, clients, agents and watches dealt). */
static void describe(const plan_phase_t *ph, sched_shard_t sh, src_estimate_t *e)
{
    double n = sched_shard_split(sh) ? sh.count : 1, open = open_peak(ph) / n;
    e->peak_rate += open; /* after model(): a replay added its own */
    if (ph->clients.on) {
        e->closed_loop = true;
        e->clients = share(sh, ph->clients.count);
        e->bounded = ph->clients.think_ns > 0;
        if (e->bounded)
            e->peak_rate = e->clients / (ph->clients.think_ns / 1e9);
    }
    if (ph->fleet.on) {
        e->agents = share(sh, ph->fleet.agents);
        for (size_t i = 0; i < ph->fleet.n_send; i++) {
            e->peak_rate += e->agents / (ph->fleet.send[i].every_ns / 1e9);
            if (ph->fleet.timing == PLAN_TIMING_ALIGNED)
                e->burst += e->agents;
        }
    }
    if (ph->churn.on)
        e->peak_rate += ph->churn.rate / n;
    if (ph->teardown.on)
        e->peak_rate += ph->teardown.rate / n;
    for (size_t i = 0; i < ph->watches.n_sets; i++)
        e->watches += share(sh, ph->watches.sets[i].count);
    e->replay = ph->replay.on;
}

/* Requests, objects created and deleted (deletes of objects already gone just fail, so they
 * remove nothing), and teardown: one delete per object still alive. */
static void count_objects(const plan_t *p, const plan_phase_t *ph, double alive, double torn,
                          double *maybe, src_estimate_t *e)
{
    for (size_t i = 0; i < p->n_reqs; i++) {
        const plan_req_t *r = &p->reqs[i];
        if (r->kind == PLAN_WATCH)
            continue;
        e->requests += e->per_class[i];
        if (r->kind == PLAN_WRITE && r->write.creates)
            e->created += e->per_class[i];
        if (r->kind == PLAN_WRITE && r->write.deletes)
            e->deleted += e->per_class[i];
        if (plan_req_may_create(r) && !r->write.creates && !r->write.keep)
            e->may_create += e->per_class[i];
    }
    *maybe += e->may_create;
    double avail = alive + e->created;
    e->deleted = e->deleted < avail ? e->deleted : avail;
    if (ph->teardown.on) {
        e->may_create = *maybe;
        *maybe = 0;
        e->deleted += torn;
        e->requests += torn;
        if (ph->teardown.rate > 0 && !ph->has_duration) {
            e->duration_ns = (int64_t)(torn / ph->teardown.rate * 1e9);
            e->open_ended = false;
        }
    }
    e->alive_after = avail - e->deleted > 0 ? avail - e->deleted : 0;
}

/* A replay's peak: its starts second by second until all of them are counted (at most a
 * year of seconds). */
static double replay_peak(const src_t *s, double total)
{
    double peak = 0, sum = 0;
    for (int64_t k = 0; sum < total - 0.5 && k < INT64_C(366) * 86400; k++) {
        double n = s->ops->expected(s->self, k * 1000000000, (k + 1) * 1000000000, NULL);
        peak = n > peak ? n : peak;
        sum += n;
    }
    return peak;
}

/* The phase's sources, built as a run would build them, asked for [0, duration). */
static int model(const src_ctx_t *ctx, const plan_phase_t *ph, double *torn, src_estimate_t *e)
{
    src_t s[8];
    size_t n;
    int rc = src_phase_new(ctx, s, &n);
    if (rc)
        return rc;
    /* An open-ended phase (teardown) runs until its work is done. */
    int64_t end = ph->has_duration ? ph->duration_ns : INT64_MAX / 2;
    *torn = 0;
    for (size_t k = 0; k < n; k++) {
        double got = s[k].ops->expected ? s[k].ops->expected(s[k].self, 0, end, e->per_class) : 0;
        if (s[k].ops == &src_teardown_ops)
            *torn = got;
        if (s[k].ops == &src_replay_ops)
            e->peak_rate += replay_peak(&s[k], got);
        s[k].ops->free(s[k].self);
    }
    return 0;
}

int src_estimate(const plan_t *plan, uint64_t seed, int64_t realtime0_ns, out_t *o,
                 src_estimate_t *e)
{
    return src_estimate_shard(plan, seed, (sched_shard_t){0, 0}, realtime0_ns, o, e);
}

int src_estimate_shard(const plan_t *plan, uint64_t seed, sched_shard_t sh, int64_t realtime0_ns,
                       out_t *o, src_estimate_t *e)
{
    double alive = 0, maybe = 0;
    int rc = 0;
    for (size_t i = 0; i < plan->n_phases; i++) {
        const plan_phase_t *ph = &plan->phases[i];
        memset(&e[i], 0, sizeof(e[i]));
        e[i].duration_ns = ph->duration_ns;
        e[i].open_ended = !ph->has_duration;
        src_ctx_t ctx = {.plan = plan,
                         .phase = i,
                         .name = ph->name,
                         .duration_ns = ph->duration_ns,
                         .realtime0_ns = realtime0_ns,
                         .seed = seed,
                         .shard = sh,
                         .shard_seed = sched_shard_seed(seed, sh),
                         .alive = alive,
                         .o = o};
        double torn = 0;
        int r = model(&ctx, ph, &torn, &e[i]);
        rc = rc ? rc : r;
        describe(ph, sh, &e[i]);
        count_objects(plan, ph, alive, torn, &maybe, &e[i]);
        alive = e[i].alive_after;
    }
    return rc;
}
