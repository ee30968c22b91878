/* A fleet of periodic agents: N agents each sending one or more classes every period, spread,
 * jittered or aligned on the wall clock (the storms of agents renewing on the same tick), with
 * agents joining and leaving over ramps. */
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"

/* One periodic action: the agents sending one class every period. */
typedef struct {
    int cls;
    sched_fleet_t *sched;
} action_t;

/* Aligned ticks are rendered this long before their instant (at most half the period), so at
 * the tick only the writes remain: the requests wait in the engine, set up, until then
 * (src_req_t.ahead). Rendering and setting up 5,000 requests takes ~45 ms on the 2-CPU VM of
 * tools/bench/RESULTS.md ("Aligned ticks"). */
#define FLEET_AHEAD_NS INT64_C(250000000)

typedef struct {
    src_ctx_t ctx;
    action_t *a;
    size_t n;
    src_t *me;
    int64_t ahead_ns; /* how early a start is issued: 0 unless aligned */
} fleet_t;

static bool fleet_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->fleet.on;
}

static void fleet_free(void *self)
{
    fleet_t *s = self;
    for (size_t k = 0; k < s->n; k++)
        sched_fleet_free(s->a[k].sched);
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
    for (size_t k = 0; k < pp->fleet.n_send; k++) {
        sched_fleet_cfg_t cfg = {
            .agents = pp->fleet.agents,
            .period_ns = pp->fleet.send[k].every_ns,
            .timing = timing[pp->fleet.timing],
            .jitter = pp->fleet.jitter,
            .drift = pp->fleet.drift,
            .join_ns = pp->fleet.join_ns,
            .leave_ns = pp->fleet.leave_ns,
            .duration_ns = pp->duration_ns,
            .realtime0_ns = ctx->realtime0_ns,
            .seed = src_seed(ctx, SRC_STREAM_FLEET + (uint32_t)k),
        };
        s->a[k].cls = pp->fleet.send[k].cls.index;
        if (pp->fleet.timing == PLAN_TIMING_ALIGNED) {
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
                                 .client = -1,
                                 .ahead = s->ctx.base_ns + t[i] > now_ns};
                rc = src_issue(s->ctx.issuer, s->me, &req);
            }
        } while (n == SRC_DUE_BATCH && rc == 0);
    }
    return rc;
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

const src_ops_t src_fleet_ops = {
    .name = "fleet",
    .used_by = fleet_used_by,
    .new = fleet_new,
    .start = fleet_start,
    .next = fleet_next,
    .due = fleet_due,
    .expected = fleet_expected,
    .free = fleet_free,
};
