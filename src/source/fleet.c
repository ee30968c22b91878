/* A fleet of periodic agents: N agents each sending one or more classes every period, spread,
 * jittered or aligned on the wall clock (the storms of agents renewing on the same tick), with
 * agents joining and leaving over ramps. An after-answer action (next: after-answer) takes each
 * agent's next instant from its last answer: a period after a success, a backoff delay (the
 * watch module's policies, one state per agent) after a failure.
 * Glossary: failure = an answer other than 2xx (an error status, a transport error, a timeout). */
#include <jansson.h>
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"
#include "squall/file.h"

/* One periodic action: the agents sending one class every period. */
typedef struct {
    int cls;
    sched_fleet_t *sched;
    const plan_send_t *ps;
    watch_backoff_t *backoff; /* after-answer: one per agent, else NULL */
    rng_t rng;                /* after-answer: retry delays */
} action_t;

/* Aligned ticks are rendered this long before their instant (at most half the period), so at
 * the tick only the writes remain: the requests wait in the engine, set up, until then
 * (src_req_t.ahead). Rendering and setting up 5,000 requests takes ~45 ms on the 2-CPU VM of
 * tools/bench/RESULTS.md ("Aligned ticks"). */
#define FLEET_AHEAD_NS INT64_C(250000000)
/* ... for ticks of at least this many agents: with a few hundred, rendering is no real share of
 * the tick and holding made ticks worse (200 agents: dispatch spread median 6.8 -> 9.7 ms, first
 * write up to 8 ms late; two same-configuration compare runs differed by 5 ms at tick p50). */
#define FLEET_AHEAD_MIN_AGENTS 1000

/* Whether an aligned fleet over HTTP/1.1 gets a connection per agent unless its plan says
 * (tools/bench/RESULTS.md, "Aligned ticks": which serves the tick's fidelity best). */
#define FLEET_PER_AGENT_DEFAULT 1
#define FLEET_FD_RESERVE        64 /* results, stdio, the other engines */
/* Connections one engine may hold (engine.c's check). */
#define FLEET_MAX_CONNS 100000

typedef struct {
    src_ctx_t ctx;
    action_t *a;
    size_t n;
    src_t *me;
    int64_t ahead_ns; /* how early a start is issued: 0 unless aligned */
    bool stopped;
} fleet_t;

static int64_t files_beside(const plan_t *plan);
static int64_t files_for(int64_t conns);

static bool fleet_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->fleet.on;
}

static void fleet_free(void *self)
{
    fleet_t *s = self;
    for (size_t k = 0; k < s->n; k++) {
        sched_fleet_free(s->a[k].sched);
        free(s->a[k].backoff);
    }
    free(s->a);
    free(s);
}

static int fleet_new(const src_ctx_t *ctx, void **self)
{
    static const enum sched_timing timing[] = {
        [PLAN_TIMING_SPREAD] = SCHED_SPREAD,
        [PLAN_TIMING_JITTER] = SCHED_JITTER,
        [PLAN_TIMING_ALIGNED] = SCHED_ALIGNED,
    };
    fleet_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->ctx = *ctx;
    const plan_phase_t *pp = src_phase(ctx);
    if (!(s->a = calloc(pp->fleet.n_send, sizeof(*s->a))))
        return SQ_ENOMEM;
    if (pp->fleet.conns == PLAN_CONNS_PER_AGENT) {
        uint64_t limit = file_raise_limit();
        int agents = src_fleet_agents(pp, ctx->shard); /* this shard's: its own connections */
        int64_t need = files_for(agents) + files_beside(ctx->plan);
        if (agents > FLEET_MAX_CONNS || (limit && (uint64_t)need > limit)) {
            out_raw(ctx->o, OUT_ERROR,
                    "%s:%d:%d: error: phase '%s': fleet.connections: per-agent opens %d "
                    "connections, which need about %lld open files, but this process may open "
                    "at most %llu (RLIMIT_NOFILE hard limit) and one engine %d connections; use "
                    "fewer agents per process (shards) or connections: shared",
                    pp->pos.file, pp->pos.line, pp->pos.col, pp->name, agents, (long long)need,
                    (unsigned long long)limit, FLEET_MAX_CONNS);
            return SQ_ELIMIT;
        }
    }
    for (size_t k = 0; k < pp->fleet.n_send; k++) {
        const plan_send_t *ps = &pp->fleet.send[k];
        bool after = ps->next == PLAN_NEXT_AFTER_ANSWER;
        sched_fleet_cfg_t cfg = {
            .agents = pp->fleet.agents,
            .period_ns = ps->every_ns,
            .timing = timing[pp->fleet.timing],
            .next = after ? SCHED_NEXT_AFTER_ANSWER : SCHED_NEXT_FIXED,
            .jitter = ps->jitter,
            .drift = pp->fleet.drift,
            .join_ns = pp->fleet.join_ns,
            .leave_ns = pp->fleet.leave_ns,
            .duration_ns = pp->duration_ns,
            .realtime0_ns = ctx->realtime0_ns,
            .seed = src_seed(ctx, SRC_STREAM_FLEET + (uint32_t)k),
            .shard = ctx->shard,
        };
        s->a[k].cls = ps->cls.index;
        s->a[k].ps = ps;
        if (after) {
            if (!(s->a[k].backoff = calloc((size_t)cfg.agents, sizeof(watch_backoff_t))))
                return SQ_ENOMEM;
            for (int i = 0; i < cfg.agents; i++)
                watch_backoff_init(&s->a[k].backoff[i], src_watch_policy(ps->retry.policy),
                                   ps->retry.base_ns, ps->retry.cap_ns);
            rng_seed(&s->a[k].rng, src_shard_seed(ctx, SRC_STREAM_RETRY + (uint32_t)k));
        }
        if (pp->fleet.timing == PLAN_TIMING_ALIGNED && pp->fleet.agents >= FLEET_AHEAD_MIN_AGENTS) {
            int64_t half = cfg.period_ns / 2;
            int64_t ahead = half < FLEET_AHEAD_NS ? half : FLEET_AHEAD_NS;
            s->ahead_ns = k == 0 || ahead < s->ahead_ns ? ahead : s->ahead_ns;
        }
        int rc = sched_fleet_new(&cfg, &s->a[k].sched);
        if (rc)
            return rc;
        s->n++;
    }
    return 0;
}

static int fleet_start(void *self, src_t *me)
{
    ((fleet_t *)self)->me = me;
    return 0;
}

static bool fleet_next(const void *self, int64_t *at_ns)
{
    const fleet_t *s = self;
    bool any = s->ahead_ns && src_held_next(s->ctx.issuer, at_ns);
    for (size_t k = 0; k < s->n; k++) {
        int64_t t;
        int agent;
        if (sched_fleet_peek(s->a[k].sched, &t, &agent) &&
            (!any || s->ctx.base_ns + t - s->ahead_ns < *at_ns)) {
            *at_ns = s->ctx.base_ns + t - s->ahead_ns;
            any = true;
        }
    }
    return any;
}

static int fleet_due(void *self, int64_t now_ns)
{
    fleet_t *s = self;
    int64_t t[SRC_DUE_BATCH];
    int agent[SRC_DUE_BATCH];
    int rc = 0;
    if (s->ahead_ns)
        src_release(s->ctx.issuer, now_ns);
    for (size_t k = 0; k < s->n && rc == 0; k++) {
        size_t n;
        do {
            n = sched_fleet_due(s->a[k].sched, now_ns + s->ahead_ns - s->ctx.base_ns, t, agent,
                                SRC_DUE_BATCH);
            for (size_t i = 0; i < n && rc == 0; i++) {
                src_req_t req = {.cls = s->a[k].cls,
                                 .intended_ns = s->ctx.base_ns + t[i],
                                 .agent = agent[i],
                                 .client = s->a[k].backoff ? (int)k : -1,
                                 .ahead = s->ctx.base_ns + t[i] > now_ns};
                rc = src_issue(s->ctx.issuer, s->me, &req);
                /* Nothing was sent (an empty {{pick}} pool): no answer will come, so the agent
                 * takes its period from now, as after a success. */
                if (rc == 0 && s->a[k].backoff && sched_fleet_waiting(s->a[k].sched, agent[i]) &&
                    !ledger_ready(obs_ledger(s->ctx.obs), s->a[k].cls))
                    sched_fleet_answer(s->a[k].sched, agent[i], t[i], -1, NULL);
            }
        } while (n == SRC_DUE_BATCH && rc == 0);
    }
    return rc;
}

/* When an agent would have had its answer had squall sent on time: the answer's arrival less
 * squall's own lateness, its schedule lag (issued after the intended instant) and its write
 * lag (sent after it had a connection, a connect included). A wait for a free connection is
 * kept: a target that holds the connections holds the agents. Without this, a period's burst
 * of sends, written one after another, fed the generator's own smear back into every agent's
 * next instant (measured: R-bar after a stall decayed 0.13 faster than the model in four
 * periods on a loaded 2-core machine). */
static int64_t answer_at(const eng_result_t *r)
{
    int64_t own = 0;
    if (r->submitted_ns > r->intended_ns)
        own += r->submitted_ns - r->intended_ns;
    if (r->admitted_ns && r->sent_ns > r->admitted_ns)
        own += r->sent_ns - r->admitted_ns;
    int64_t at = r->done_ns - own;
    return at > r->intended_ns ? at : r->intended_ns;
}

/* An after-answer agent's answer: its period after a success (its backoff starts again), a
 * backoff delay after a failure, from answer_at. Response time counts from the intended
 * instant, so a stalled target shows in it. */
static void fleet_done(void *self, const src_done_t *d)
{
    fleet_t *s = self;
    if (d->client < 0 || (size_t)d->client >= s->n || s->stopped)
        return;
    action_t *a = &s->a[d->client];
    if (!a->backoff || d->agent < 0 || d->agent >= src_phase(&s->ctx)->fleet.agents)
        return;
    watch_backoff_t *b = &a->backoff[d->agent];
    int64_t retry = -1;
    if (d->res->outcome == ENG_OUT_S2XX)
        watch_backoff_reset(b);
    else
        retry = watch_backoff_next(b, &a->rng);
    sched_fleet_answer(a->sched, d->agent, answer_at(d->res) - s->ctx.base_ns, retry, NULL);
}

/* Each action's own model (sched_fleet_expected): aligned ticks count whole, jitter agents
 * start at their join time, joins and leaves are counted. */
static double fleet_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const fleet_t *s = self;
    double sum = 0;
    for (size_t k = 0; k < s->n; k++) {
        double e = sched_fleet_expected(s->a[k].sched, t0, t1);
        if (per_class && s->a[k].cls >= 0)
            per_class[s->a[k].cls] += e;
        sum += e;
    }
    return sum;
}

/* The phase's entry of the results' "fleets" section: each action as planned (class, period,
 * timing, next, jitter, retry). The plan alone, so that every shard writes the same and a merge
 * keeps it; the failures an action retried are its cells' non-2xx answers. */
static json_t *action_json(const fleet_t *s, const action_t *a)
{
    const plan_phase_t *pp = src_phase(&s->ctx);
    static const char *const timing[] = {"spread", "jitter", "aligned"};
    const plan_send_t *ps = a->ps;
    bool after = ps->next == PLAN_NEXT_AFTER_ANSWER;
    json_t *j = json_pack("{s:s, s:I, s:s, s:s, s:f}", "class", s->ctx.plan->reqs[a->cls].name,
                          "every_ns", (json_int_t)ps->every_ns, "timing", timing[pp->fleet.timing],
                          "next", plan_next_name(ps->next), "jitter",
                          after || pp->fleet.timing == PLAN_TIMING_JITTER ? ps->jitter : 0.0);
    if (j && after) {
        json_object_set_new(
            j, "retry",
            json_pack("{s:s, s:I, s:I}", "policy", plan_backoff_name(ps->retry.policy), "base_ns",
                      (json_int_t)ps->retry.base_ns, "cap_ns", (json_int_t)ps->retry.cap_ns));
    }
    return j;
}

static void fleet_stop(void *self)
{
    fleet_t *s = self;
    if (s->stopped)
        return;
    s->stopped = true;
    json_t *acts = json_array();
    for (size_t k = 0; acts && k < s->n; k++)
        json_array_append_new(acts, action_json(s, &s->a[k]));
    if (acts && s->ctx.obs)
        obs_section_put(s->ctx.obs, "fleets", s->ctx.name, json_pack("{s:o}", "actions", acts));
    else
        json_decref(acts);
}

const src_ops_t src_fleet_ops = {
    .name = "fleet",
    .used_by = fleet_used_by,
    .new = fleet_new,
    .start = fleet_start,
    .next = fleet_next,
    .due = fleet_due,
    .done = fleet_done,
    .expected = fleet_expected,
    .stop = fleet_stop,
    .free = fleet_free,
};

/* Open files a process needs beside the main engine's connections: watch streams over
 * HTTP/1.1 (one connection each; the largest phase), results, stdio, libcurl's wake-up pairs. */
static int64_t files_beside(const plan_t *plan)
{
    int64_t most = 0;
    for (size_t i = 0; plan->target.http != PLAN_HTTP_2 && i < plan->n_phases; i++) {
        int64_t n = 0;
        for (size_t k = 0; k < plan->phases[i].watches.n_sets; k++)
            n += plan->phases[i].watches.sets[k].count;
        most = n > most ? n : most;
    }
    return most + FLEET_FD_RESERVE;
}

/* Open files `conns` connections of the main engine take: one each, and the socket pairs of
 * its libcurl multi handles (eng_split_multis). */
static int64_t files_for(int64_t conns)
{
    return conns + 2 * eng_split_multis((int)conns);
}

int src_fleet_agents(const plan_phase_t *pp, sched_shard_t sh)
{
    return (int)sched_shard_share(sh, 0, (uint64_t)pp->fleet.agents);
}

bool src_fleet_per_agent(const plan_t *plan, const plan_phase_t *pp, sched_shard_t sh)
{
    if (!pp->fleet.on || pp->fleet.conns == PLAN_CONNS_SHARED)
        return false;
    if (pp->fleet.conns == PLAN_CONNS_PER_AGENT)
        return true;
    int agents = src_fleet_agents(pp, sh);
    if (!FLEET_PER_AGENT_DEFAULT || pp->fleet.timing != PLAN_TIMING_ALIGNED ||
        plan->target.http == PLAN_HTTP_2 || agents <= plan->target.connections)
        return false;
    uint64_t limit = file_raise_limit();
    return limit == 0 || (uint64_t)(files_for(agents) + files_beside(plan)) <= limit;
}

int src_phase_connections(const plan_t *plan, size_t phase, sched_shard_t sh)
{
    const plan_phase_t *pp = phase < plan->n_phases ? &plan->phases[phase] : NULL;
    int conns = plan->target.connections;
    int agents = pp ? src_fleet_agents(pp, sh) : 0;
    return pp && src_fleet_per_agent(plan, pp, sh) && agents > conns ? agents : conns;
}

int src_fleet_connections(const plan_t *plan, sched_shard_t sh)
{
    int conns = plan->target.connections;
    for (size_t i = 0; i < plan->n_phases; i++) {
        int agents = src_fleet_agents(&plan->phases[i], sh);
        if (src_fleet_per_agent(plan, &plan->phases[i], sh) && agents > conns)
            conns = agents;
    }
    return conns;
}
