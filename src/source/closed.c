/* Closed-loop clients: each sends, waits for the answer, thinks, and sends again; the next
 * intended start is the answer plus the think time, so the load follows the target's speed. */
#include <math.h>
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"

typedef struct {
    src_ctx_t ctx;
    sched_closed_cfg_t cfg;
    sched_closed_t *sched;
    src_mix_t mix;
    src_t *me;
    bool stopped;
    int failed; /* an error issuing from done(), returned by the next due() */
} closed_t;

static bool closed_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->clients.on;
}

static void closed_free(void *self)
{
    closed_t *s = self;
    sched_closed_free(s->sched);
    src_mix_close(&s->mix);
    free(s);
}

static int closed_new(const src_ctx_t *ctx, void **self)
{
    closed_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->ctx = *ctx;
    const plan_phase_t *pp = src_phase(ctx);
    s->cfg = (sched_closed_cfg_t){
        .clients = pp->clients.count,
        .think_ns = pp->clients.think_ns,
        .think = SCHED_THINK_FIXED,
        .duration_ns = pp->duration_ns,
        .seed = src_shard_seed(ctx, SRC_STREAM_CLOSED),
        .shard = ctx->shard,
    };
    int rc = src_mix_init(&s->mix, pp, src_shard_seed(ctx, SRC_STREAM_MIX));
    return rc ? rc : sched_closed_new(&s->cfg, &s->sched);
}

static int closed_start(void *self, src_t *me)
{
    ((closed_t *)self)->me = me;
    return 0;
}

static bool closed_next(const void *self, int64_t *at_ns)
{
    const closed_t *s = self;
    int64_t t;
    if (s->stopped || !sched_closed_peek(s->sched, &t))
        return false;
    *at_ns = s->ctx.base_ns + t;
    return true;
}

static int closed_due(void *self, int64_t now_ns)
{
    closed_t *s = self;
    int client, rc = s->failed;
    int64_t t;
    s->failed = 0;
    while (rc == 0 && !s->stopped &&
           sched_closed_due(s->sched, now_ns - s->ctx.base_ns, &client, &t)) {
        src_req_t req = {.cls = src_mix_pick(&s->mix),
                         .intended_ns = s->ctx.base_ns + t,
                         .agent = client,
                         .client = client};
        rc = src_issue(s->ctx.issuer, s->me, &req);
    }
    return rc;
}

/* A client's answer: it thinks, then starts again; with no think time it starts at once
 * instead of waiting for the next wake-up. */
static void closed_done(void *self, const src_done_t *d)
{
    closed_t *s = self;
    int64_t next;
    const eng_result_t *res = d->res;
    bool again = sched_closed_complete(s->sched, d->client, res->done_ns - s->ctx.base_ns, &next);
    if (again && !s->stopped && s->ctx.base_ns + next <= res->done_ns && !s->failed)
        s->failed = closed_due(s, res->done_ns);
}

/* An upper bound: each of the shard's clients starts at most once per think time, at 0, think,
 * 2·think, ...; without think time the count depends on the target alone. */
static double closed_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const closed_t *s = self;
    if (s->cfg.think_ns <= 0)
        return NAN;
    int64_t end = s->cfg.duration_ns;
    t0 = t0 < end ? t0 : end;
    t1 = t1 < end ? t1 : end;
    double k =
        ceil((double)t1 / (double)s->cfg.think_ns) - ceil((double)t0 / (double)s->cfg.think_ns);
    double n =
        (double)sched_shard_share(s->cfg.shard, 0, (uint64_t)s->cfg.clients) * (k > 0 ? k : 0);
    src_mix_spread(&s->mix, n, per_class);
    return n;
}

static void closed_stop(void *self)
{
    ((closed_t *)self)->stopped = true;
}

const src_ops_t src_closed_ops = {
    .name = "closed",
    .used_by = closed_used_by,
    .new = closed_new,
    .start = closed_start,
    .next = closed_next,
    .due = closed_due,
    .done = closed_done,
    .expected = closed_expected,
    .stop = closed_stop,
    .free = closed_free,
};
