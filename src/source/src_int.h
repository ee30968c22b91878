/* Internals the sources share: seed streams, the phase's mix, and small helpers. */
#ifndef SQUALL_SRC_INT_H
#define SQUALL_SRC_INT_H

#include "squall/sched.h"
#include "squall/source.h"
#include "squall/watch.h"

/* Random streams of one phase, each its own sched_seed(run seed, phase, stream): changing one
 * never shifts another's draws. */
enum {
    SRC_STREAM_ARRIVALS = 1,
    SRC_STREAM_MIX = 2,
    SRC_STREAM_CLOSED = 3,
    SRC_STREAM_BACKOFF = 4,  /* watch reconnect delays */
    SRC_STREAM_FLEET = 100,  /* + the fleet's send index */
    SRC_STREAM_RETRY = 500,  /* + the send index: after-answer retry delays (a shard's own) */
    SRC_STREAM_WATCH = 1000, /* + the watcher's index */
};

/* The plan phase of a context (NULL for the teardown the run adds). */
static inline const plan_phase_t *src_phase(const src_ctx_t *ctx)
{
    return ctx->phase < ctx->plan->n_phases ? &ctx->plan->phases[ctx->phase] : NULL;
}

static inline uint64_t src_seed(const src_ctx_t *ctx, uint32_t stream)
{
    return sched_seed(ctx->seed, (uint32_t)ctx->phase, stream);
}

/* A stream of the shard's own (Poisson arrivals, think times): the run's seed for the whole
 * run, so that a 1/1 shard is the unsharded run. */
static inline uint64_t src_shard_seed(const src_ctx_t *ctx, uint32_t stream)
{
    return sched_seed(sched_shard_split(ctx->shard) ? ctx->shard_seed : ctx->seed,
                      (uint32_t)ctx->phase, stream);
}

/* A plan's backoff policy (a watch's reconnect, a fleet's retry) as the watch module's own. */
static inline enum watch_policy src_watch_policy(enum plan_backoff b)
{
    static const enum watch_policy policy[] = {
        [PLAN_BACKOFF_IMMEDIATE] = WATCH_POLICY_IMMEDIATE,
        [PLAN_BACKOFF_FIXED] = WATCH_POLICY_FIXED,
        [PLAN_BACKOFF_EXPONENTIAL] = WATCH_POLICY_EXPONENTIAL,
        [PLAN_BACKOFF_FULL_JITTER] = WATCH_POLICY_FULL_JITTER,
        [PLAN_BACKOFF_EQUAL_JITTER] = WATCH_POLICY_EQUAL_JITTER,
        [PLAN_BACKOFF_DECORRELATED] = WATCH_POLICY_DECORRELATED,
    };
    return policy[b];
}

/* A phase's mix: pick a class by weight; spread an expected total over the classes. */
typedef struct {
    sched_mix_t *mix;
    int *cls;       /* mix index -> class index */
    double *weight; /* normalised */
    size_t n;
    uint64_t skip_next, skip; /* picks to skip before the next one, and after each */
} src_mix_t;

int src_mix_init(src_mix_t *m, const plan_phase_t *pp, uint64_t seed);
/* Every pick after this skips `skip` picks of the stream first (after `first` before the first
 * pick): a shard of an even schedule picks exactly the classes the single run picks for its
 * starts. */
void src_mix_deal(src_mix_t *m, uint64_t first, uint64_t skip);
void src_mix_close(src_mix_t *m);
int src_mix_pick(src_mix_t *m);
void src_mix_spread(const src_mix_t *m, double total, double *per_class);

#define SRC_DUE_BATCH 512 /* starts taken from a schedule at a time */

#endif
