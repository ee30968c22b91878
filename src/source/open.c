/* Open-loop arrivals: starts at a planned rate (constant, ramp or steps; even or Poisson),
 * independent of how fast the target answers, each picking its class from the phase's mix. */
#include <math.h>
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"

typedef struct {
    src_ctx_t ctx;
    sched_open_cfg_t cfg;
    sched_step_t *steps;
    sched_open_t *sched;
    src_mix_t mix;
    src_t *me; /* set at start: what requests name as their source */
} open_t;

static bool open_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->shape != PLAN_LOAD_NONE;
}

static void open_free(void *self)
{
    open_t *s = self;
    sched_open_free(s->sched);
    src_mix_close(&s->mix);
    free(s->steps);
    free(s);
}

/* The plan's load shape as the scheduler's config. */
static int shape_cfg(open_t *s, const plan_phase_t *pp)
{
    sched_open_cfg_t *cfg = &s->cfg;
    cfg->duration_ns = pp->duration_ns;
    cfg->arrivals = pp->arrivals == PLAN_ARRIVALS_POISSON ? SCHED_POISSON : SCHED_EVEN;
    cfg->seed = src_shard_seed(&s->ctx, SRC_STREAM_ARRIVALS);
    cfg->shard = s->ctx.shard;
    if (pp->shape == PLAN_LOAD_CONSTANT) {
        cfg->shape = SCHED_CONSTANT;
        cfg->rate = pp->rate;
    } else if (pp->shape == PLAN_LOAD_RAMP) {
        cfg->shape = SCHED_RAMP;
        cfg->from = pp->ramp_from;
        cfg->to = pp->ramp_to;
    } else {
        cfg->shape = SCHED_STEPS;
        if (!(s->steps = calloc(pp->n_steps, sizeof(*s->steps))))
            return SQ_ENOMEM;
        for (size_t k = 0; k < pp->n_steps; k++)
            s->steps[k] = (sched_step_t){.rate = pp->steps[k].rate, .for_ns = pp->steps[k].for_ns};
        cfg->steps = s->steps;
        cfg->n_steps = pp->n_steps;
    }
    return 0;
}

static int open_new(const src_ctx_t *ctx, void **self)
{
    open_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->ctx = *ctx;
    const plan_phase_t *pp = src_phase(ctx);
    int rc = shape_cfg(s, pp);
    /* A shard of an even schedule has the single run's k-th starts: it takes the single run's
     * k-th class picks too (its own stream for Poisson, whose starts are its own). */
    bool even = s->cfg.arrivals == SCHED_EVEN, split = sched_shard_split(ctx->shard);
    if (rc == 0)
        rc = src_mix_init(&s->mix, pp,
                          even ? src_seed(ctx, SRC_STREAM_MIX)
                               : src_shard_seed(ctx, SRC_STREAM_MIX));
    if (rc == 0 && even && split)
        src_mix_deal(&s->mix, (uint64_t)ctx->shard.index - 1, (uint64_t)ctx->shard.count - 1);
    if (rc == 0)
        rc = sched_open_new(&s->cfg, &s->sched);
    if (rc == SQ_EINVAL)
        out_raw(ctx->o, OUT_ERROR, "%s:%d:%d: error: phase '%s': its load shape is out of range",
                pp->pos.file, pp->pos.line, pp->pos.col, pp->name);
    return rc;
}

static bool open_next(const void *self, int64_t *at_ns)
{
    const open_t *s = self;
    int64_t t;
    if (!sched_open_peek(s->sched, &t))
        return false;
    *at_ns = s->ctx.base_ns + t;
    return true;
}

static int open_due(void *self, int64_t now_ns)
{
    open_t *s = self;
    int64_t t[SRC_DUE_BATCH];
    size_t n;
    int rc = 0;
    do {
        n = sched_open_due(s->sched, now_ns - s->ctx.base_ns, t, SRC_DUE_BATCH);
        for (size_t k = 0; k < n && rc == 0; k++) {
            src_req_t req = {
                .cls = src_mix_pick(&s->mix), .intended_ns = s->ctx.base_ns + t[k], .client = -1};
            rc = src_issue(s->ctx.issuer, s->me, &req);
        }
    } while (n == SRC_DUE_BATCH && rc == 0);
    return rc;
}

/* The scheduler's own count: even arrivals exactly (the shard's share of the Λ⁻¹(k) in
 * [t0, t1)), Poisson arrivals their mean. */
static double open_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const open_t *s = self;
    double n = sched_open_expected(&s->cfg, t0, t1);
    src_mix_spread(&s->mix, n, per_class);
    return n;
}

static int open_start(void *self, src_t *me)
{
    ((open_t *)self)->me = me;
    return 0;
}

const src_ops_t src_open_ops = {
    .name = "open",
    .used_by = open_used_by,
    .new = open_new,
    .start = open_start,
    .next = open_next,
    .due = open_due,
    .expected = open_expected,
    .free = open_free,
};
