/* What a plan would do, computed from the plan alone: expected requests per class and phase,
 * peak rate, watches, agents, and objects created and deleted. `check` prints these; `run`
 * can print the same numbers before it starts. Expected values, not promises: Poisson
 * arrivals and closed loops vary around them. */
#include <string.h>

#include "plan_int.h"

/* Requests started by the open-loop shape over the phase, and the highest rate reached. */
static double open_loop_total(const plan_phase_t *ph, double dur, double *peak)
{
    switch (ph->shape) {
    case PLAN_LOAD_CONSTANT:
        *peak = ph->rate;
        return ph->rate * dur;
    case PLAN_LOAD_RAMP:
        /* A linear ramp's integral is its mean rate times its length. */
        *peak = ph->ramp_from > ph->ramp_to ? ph->ramp_from : ph->ramp_to;
        return (ph->ramp_from + ph->ramp_to) / 2 * dur;
    case PLAN_LOAD_STEPS: {
        double t = 0, total = 0;
        *peak = 0;
        for (size_t i = 0; i < ph->n_steps && t < dur; i++) {
            bool last = i + 1 == ph->n_steps;
            double len = last ? dur - t : ph->steps[i].for_ns / 1e9;
            if (t + len > dur)
                len = dur - t; /* the phase ends inside this step */
            total += ph->steps[i].rate * len;
            *peak = ph->steps[i].rate > *peak ? ph->steps[i].rate : *peak;
            t += len;
        }
        return total;
    }
    default:
        *peak = 0;
        return 0;
    }
}

static void spread_over_mix(const plan_phase_t *ph, double total, plan_estimate_t *e)
{
    double sum = 0;
    for (size_t i = 0; i < ph->n_mix; i++)
        sum += ph->mix[i].weight;
    for (size_t i = 0; i < ph->n_mix && sum > 0; i++)
        if (ph->mix[i].cls.index >= 0)
            e->per_class[ph->mix[i].cls.index] += total * ph->mix[i].weight / sum;
}

static void estimate_fleet(const plan_phase_t *ph, double dur, plan_estimate_t *e)
{
    /* Agents join evenly over `join` and leave evenly over `leave`, so on average each is
     * present for dur - join/2 - leave/2. */
    double agent_s =
        ph->fleet.agents * (dur - ph->fleet.join_ns / 1e9 / 2 - ph->fleet.leave_ns / 1e9 / 2);
    e->agents = ph->fleet.agents;
    for (size_t i = 0; i < ph->fleet.n_send; i++) {
        double every = ph->fleet.send[i].every_ns / 1e9;
        if (every <= 0 || ph->fleet.send[i].cls.index < 0)
            continue;
        e->per_class[ph->fleet.send[i].cls.index] += agent_s / every;
        e->peak_rate += ph->fleet.agents / every;
        if (ph->fleet.timing == PLAN_TIMING_ALIGNED)
            e->burst += ph->fleet.agents;
    }
}

/* Churn keeps the population near its target: creates only until it is reached (deletes only
 * above it), then creates and deletes in equal numbers. */
static void estimate_churn(const plan_phase_t *ph, double dur, double alive, plan_estimate_t *e)
{
    double ops = ph->churn.rate * dur, pop = ph->churn.population;
    double creates, deletes;
    if (alive <= pop) {
        double need = pop - alive < ops ? pop - alive : ops;
        creates = need + (ops - need) / 2;
        deletes = (ops - need) / 2;
    } else {
        double need = alive - pop < ops ? alive - pop : ops;
        deletes = need + (ops - need) / 2;
        creates = (ops - need) / 2;
    }
    if (ph->churn.create.index >= 0)
        e->per_class[ph->churn.create.index] += creates;
    if (ph->churn.del.index >= 0)
        e->per_class[ph->churn.del.index] += deletes;
    e->peak_rate += ph->churn.rate;
}

/* Requests, objects created and deleted (deletes of objects already gone just fail, so they
 * remove nothing), and teardown: one delete per object still alive. */
static void count_objects(const plan_t *p, const plan_phase_t *ph, double alive, plan_estimate_t *e)
{
    for (size_t i = 0; i < p->n_reqs; i++) {
        const plan_req_t *r = &p->reqs[i];
        if (r->kind == PLAN_WATCH)
            continue;
        e->requests += e->per_class[i];
        if (r->kind == PLAN_WRITE && r->write.creates)
            e->created += e->per_class[i];
    }
    double avail = alive + e->created;
    for (size_t i = 0; i < p->n_reqs; i++)
        if (p->reqs[i].kind == PLAN_WRITE && p->reqs[i].write.deletes)
            e->deleted += e->per_class[i];
    e->deleted = e->deleted < avail ? e->deleted : avail;
    if (ph->teardown.on) {
        double rest = avail - e->deleted;
        e->deleted += rest;
        e->requests += rest;
        if (ph->teardown.rate > 0 && !ph->has_duration) {
            e->duration_ns = (int64_t)(rest / ph->teardown.rate * 1e9);
            e->open_ended = false;
        }
        e->peak_rate += ph->teardown.rate;
    }
    e->alive_after = avail - e->deleted;
}

static void estimate_one(const plan_t *p, const plan_phase_t *ph, double alive, plan_estimate_t *e)
{
    memset(e, 0, sizeof(*e));
    double dur = ph->duration_ns / 1e9;
    e->duration_ns = ph->duration_ns;
    e->open_ended = !ph->has_duration;
    double peak = 0, total = open_loop_total(ph, dur, &peak);
    e->peak_rate = peak;
    if (ph->clients.on) {
        e->closed_loop = true;
        e->clients = ph->clients.count;
        /* Each client waits at least `think` between requests: an upper bound. */
        e->bounded = ph->clients.think_ns > 0;
        if (e->bounded) {
            total = ph->clients.count * dur / (ph->clients.think_ns / 1e9);
            e->peak_rate = ph->clients.count / (ph->clients.think_ns / 1e9);
        }
    }
    spread_over_mix(ph, total, e);
    if (ph->fleet.on)
        estimate_fleet(ph, dur, e);
    if (ph->churn.on)
        estimate_churn(ph, dur, alive, e);
    for (size_t i = 0; i < ph->watches.n_sets; i++) {
        if (ph->watches.sets[i].cls.index >= 0)
            e->per_class[ph->watches.sets[i].cls.index] += ph->watches.sets[i].count;
        e->watches += ph->watches.sets[i].count;
    }
    count_objects(p, ph, alive, e);
    e->replay = ph->replay.on;
}

void plan_estimate(const plan_t *p, size_t i, plan_estimate_t *e)
{
    double alive = 0;
    for (size_t j = 0; j <= i && j < p->n_phases; j++) {
        estimate_one(p, &p->phases[j], alive, e);
        alive = e->alive_after;
    }
}
