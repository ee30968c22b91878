/* A fleet of periodic agents: per-agent phase, period error and jitter, merged into one time
 * order by a min-heap so N agents cost O(log N) per action and nothing per action in memory.
 * After-answer agents leave the heap when they act and come back when their answer does
 * (sched_fleet_answer): the heap holds only agents with a known next instant. */
#include "squall/sched.h"

#include <math.h>
#include <stdlib.h>

#include "sched_int.h"
#include "squall/err.h"
#include "squall/rng.h"

typedef struct {
    double period; /* ns, with this agent's drift */
    int64_t first; /* its first action */
    int64_t prev;  /* its last action (jitter mode accumulates from it) */
    uint64_t k;    /* actions so far */
    int64_t end;   /* no action at or after it: the phase's end, or when the agent leaves */
    int64_t join;  /* when it joins (its first action is at or after it) */
    bool waiting;  /* after-answer: acted, its answer not yet in (it is out of the heap) */
} agent_t;

struct sched_fleet {
    sched_fleet_cfg_t cfg;
    agent_t *agents;
    sched_heap_t heap;
    rng_t rng;
};

int64_t sched_align_offset(int64_t realtime0_ns, int64_t period_ns)
{
    if (period_ns <= 0)
        return 0;
    int64_t r = realtime0_ns % period_ns;
    if (r < 0)
        r += period_ns;
    return r == 0 ? 0 : period_ns - r;
}

static int validate(const sched_fleet_cfg_t *c)
{
    if (!c || c->agents < 1 || !sched_shard_valid(c->shard) || c->period_ns <= 0 ||
        c->duration_ns <= 0 || c->join_ns < 0 || c->leave_ns < 0 || c->leave_ns > c->duration_ns)
        return SQ_EINVAL;
    if (!(c->jitter >= 0 && c->jitter < 1) || !(c->drift >= 0 && c->drift < 0.5))
        return SQ_EINVAL;
    if (c->timing != SCHED_SPREAD && c->timing != SCHED_JITTER && c->timing != SCHED_ALIGNED)
        return SQ_EINVAL;
    if (c->next != SCHED_NEXT_FIXED && c->next != SCHED_NEXT_AFTER_ANSWER)
        return SQ_EINVAL;
    return 0;
}

/* U(−1, +1) from a (0, 1] variate. */
static double sym_unit(rng_t *r)
{
    return 2 * rng_unit(r) - 1;
}

/* The first action of agent i, who joins at `join`. */
static int64_t first_action(sched_fleet_t *f, int i, int64_t join)
{
    const sched_fleet_cfg_t *c = &f->cfg;
    double p = f->agents[i].period;
    if (c->timing == SCHED_SPREAD)
        return join + (int64_t)((1 - rng_unit(&f->rng)) * p); /* phase in [0, P) */
    if (c->timing == SCHED_JITTER)
        return join;
    /* Aligned: the first wall-clock multiple of P at or after the join time. */
    int64_t off = sched_align_offset(c->realtime0_ns, c->period_ns);
    if (join <= off)
        return off;
    return off + (join - off + c->period_ns - 1) / c->period_ns * c->period_ns;
}

/* One period of agent a stretched by 1 + U(−x, +x), x = the fleet's jitter. */
static int64_t jittered(sched_fleet_t *f, const agent_t *a)
{
    return (int64_t)llround(a->period * (1 + f->cfg.jitter * sym_unit(&f->rng)));
}

/* The action after agent i's k-th. Spread and aligned count from the first action so rounding
 * never accumulates; jitter draws each period afresh. */
static int64_t next_action(sched_fleet_t *f, int i)
{
    agent_t *a = &f->agents[i];
    if (f->cfg.timing == SCHED_JITTER)
        return a->prev + jittered(f, a);
    return a->first + (int64_t)llround(a->period * (double)a->k);
}

static void setup_agents(sched_fleet_t *f)
{
    const sched_fleet_cfg_t *c = &f->cfg;
    for (int i = 0; i < c->agents; i++) {
        agent_t *a = &f->agents[i];
        a->period = (double)c->period_ns * (1 + c->drift * sym_unit(&f->rng));
        int64_t join = (int64_t)((double)c->join_ns * i / c->agents);
        a->join = join;
        /* Agents leave in the order they joined, evenly over the last `leave` of the phase. */
        a->end = c->duration_ns - c->leave_ns + (int64_t)((double)c->leave_ns * i / c->agents);
        a->first = a->prev = first_action(f, i, join);
        if (a->first < a->end && sched_shard_owns(c->shard, (uint64_t)i))
            sched_heap_push(&f->heap, a->first, i);
    }
    /* A shard's jitter draws are its own stream (the whole fleet's would be the same in every
     * shard, drawn for different agents). */
    if (sched_shard_split(c->shard))
        rng_seed(&f->rng, sched_seed(c->seed, (uint32_t)c->shard.index, (uint32_t)c->shard.count));
}

int sched_fleet_new(const sched_fleet_cfg_t *cfg, sched_fleet_t **out)
{
    int rc = validate(cfg);
    if (rc < 0)
        return rc;
    sched_fleet_t *f = calloc(1, sizeof(*f));
    if (!f || !(f->agents = calloc((size_t)cfg->agents, sizeof(agent_t))) ||
        sched_heap_init(&f->heap, (size_t)cfg->agents) < 0) {
        sched_fleet_free(f);
        return SQ_ENOMEM;
    }
    f->cfg = *cfg;
    rng_seed(&f->rng, cfg->seed);
    setup_agents(f);
    *out = f;
    return 0;
}

void sched_fleet_free(sched_fleet_t *f)
{
    if (!f)
        return;
    sched_heap_close(&f->heap);
    free(f->agents);
    free(f);
}

bool sched_fleet_peek(const sched_fleet_t *f, int64_t *t_ns, int *agent)
{
    sched_ev_t ev;
    if (!sched_heap_top(&f->heap, &ev))
        return false;
    *t_ns = ev.t;
    *agent = ev.id;
    return true;
}

bool sched_fleet_next(sched_fleet_t *f, int64_t *t_ns, int *agent)
{
    if (!sched_fleet_peek(f, t_ns, agent))
        return false;
    agent_t *a = &f->agents[*agent];
    a->prev = *t_ns;
    a->k++;
    if (f->cfg.next == SCHED_NEXT_AFTER_ANSWER) {
        a->waiting = true; /* back in the heap with its answer */
        sched_heap_pop(&f->heap);
        return true;
    }
    int64_t t = next_action(f, *agent);
    if (t < a->end)
        sched_heap_retime_top(&f->heap, t);
    else
        sched_heap_pop(&f->heap);
    return true;
}

bool sched_fleet_answer(sched_fleet_t *f, int agent, int64_t at_ns, int64_t retry_ns,
                        int64_t *next_ns)
{
    if (!f || f->cfg.next != SCHED_NEXT_AFTER_ANSWER || agent < 0 || agent >= f->cfg.agents ||
        !f->agents[agent].waiting)
        return false;
    agent_t *a = &f->agents[agent];
    a->waiting = false;
    int64_t t = at_ns + (retry_ns >= 0 ? retry_ns : jittered(f, a));
    if (next_ns)
        *next_ns = t;
    if (t >= a->end)
        return false;
    sched_heap_push(&f->heap, t, agent);
    return true;
}

bool sched_fleet_waiting(const sched_fleet_t *f, int agent)
{
    return f && agent >= 0 && agent < f->cfg.agents && f->agents[agent].waiting;
}

size_t sched_fleet_due(sched_fleet_t *f, int64_t now_ns, int64_t *t_out, int *agent_out, size_t max)
{
    size_t n = 0;
    int64_t t;
    int agent;
    while (n < max && sched_fleet_peek(f, &t, &agent) && t <= now_ns) {
        sched_fleet_next(f, &t_out[n], &agent_out[n]);
        n++;
    }
    return n;
}

/* Actions of one spread or aligned agent: the k >= 0 with first + round(period · k) < end. */
static int64_t agent_count(const agent_t *a, int64_t end)
{
    if (a->first >= end)
        return 0;
    int64_t k = (int64_t)((double)(end - a->first) / a->period);
    while (k > 0 && a->first + (int64_t)llround(a->period * (double)k) >= end)
        k--;
    while (a->first + (int64_t)llround(a->period * (double)(k + 1)) < end)
        k++;
    return k + 1;
}

int64_t sched_fleet_count(const sched_fleet_cfg_t *cfg)
{
    sched_fleet_t *f;
    int rc = sched_fleet_new(cfg, &f);
    if (rc < 0)
        return rc;
    int64_t n = 0, t;
    int agent;
    if (cfg->next == SCHED_NEXT_AFTER_ANSWER) {
        /* Every answer taken as instant (the most a fleet can do): a dry run. */
        while (sched_fleet_next(f, &t, &agent)) {
            sched_fleet_answer(f, agent, t, -1, NULL);
            n++;
        }
    } else if (cfg->timing == SCHED_JITTER) {
        /* Each period is drawn afresh: only a dry run knows the count. */
        while (sched_fleet_next(f, &t, &agent))
            n++;
    } else {
        for (int i = 0; i < cfg->agents; i++)
            if (sched_shard_owns(cfg->shard, (uint64_t)i))
                n += agent_count(&f->agents[i], f->agents[i].end);
    }
    sched_fleet_free(f);
    return n;
}

/* Standard normal distribution function. */
static double phi(double z)
{
    return 0.5 * erfc(-z / M_SQRT2);
}

/* Expected actions of one jitter agent before x: its k-th action (k >= 1) is at its first plus
 * k periods each stretched by 1 + U(-j, +j), so it has mean first + k·P and variance
 * k·(P·j)²/3; by the central limit theorem P(S_k < x) is taken as Φ((x - first - k·P) / σ_k).
 * The first action is at the join time itself (jitter timing) or as the timing says
 * (after-answer agents, whose answers are taken as instant). Terms beyond 8 σ of x are 0 or 1
 * to within 1e-15. */
static double jitter_before(const agent_t *a, double jitter, int64_t x)
{
    if (x > a->end)
        x = a->end;
    if (a->first >= x)
        return 0;
    double p = a->period, sd1 = p * jitter / sqrt(3.0), rel = (double)(x - a->first);
    double n = 1; /* the first action */
    for (int64_t k = 1;; k++) {
        double mean = (double)k * p, sd = sd1 * sqrt((double)k);
        if (sd == 0) {
            if (mean >= rel)
                break;
            n += 1;
        } else if (mean - 8 * sd >= rel) {
            break;
        } else {
            n += mean + 8 * sd < rel ? 1 : phi((rel - mean) / sd);
        }
    }
    return n;
}

/* Actions of one agent before x: exact for spread and aligned (their instants are fixed once
 * the fleet is built), expected for jitter; after-answer agents as if every answer were
 * instant (an upper bound: a slow answer delays every later action). */
static double agent_before(const sched_fleet_t *f, const agent_t *a, int64_t x)
{
    if (f->cfg.timing == SCHED_JITTER ||
        (f->cfg.next == SCHED_NEXT_AFTER_ANSWER && f->cfg.jitter > 0))
        return jitter_before(a, f->cfg.jitter, x);
    return (double)agent_count(a, x < a->end ? x : a->end);
}

double sched_fleet_expected(const sched_fleet_t *f, int64_t t0_ns, int64_t t1_ns)
{
    double n = 0;
    if (t1_ns <= t0_ns)
        return 0;
    for (int i = 0; i < f->cfg.agents; i++)
        if (sched_shard_owns(f->cfg.shard, (uint64_t)i))
            n += agent_before(f, &f->agents[i], t1_ns) - agent_before(f, &f->agents[i], t0_ns);
    return n;
}
