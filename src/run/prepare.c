/* Before anything is sent: the target's safety, engine settings, templates, every phase's
 * sources built and validated. `check` runs exactly this, so what it accepts `run` accepts. */
#include <stdlib.h>
#include <string.h>

#include "run_int.h"
#include "squall/clock.h"
#include "squall/err.h"

uint64_t run_seed(const plan_t *plan, const run_opts_t *opts)
{
    if (opts->has_seed)
        return opts->seed;
    return plan->has_seed ? plan->seed : (uint64_t)clock_real_ns();
}

sched_shard_t run_shard(const run_opts_t *opts)
{
    if (opts->shard_count < 1)
        return (sched_shard_t){0, 0};
    return (sched_shard_t){opts->shard_index, opts->shard_count};
}

src_ctx_t run_src_ctx(const run_t *r, size_t phase)
{
    const run_phase_t *ph = &r->phases[phase];
    return (src_ctx_t){
        .plan = r->plan,
        .phase = phase,
        .name = ph->name,
        .duration_ns = ph->duration_ns,
        .base_ns = ph->base_ns,
        .realtime0_ns = ph->realtime0_ns,
        .seed = r->seed,
        .shard = r->shard,
        .shard_seed = r->shard_seed,
        .stopped = r->end != RUN_END_DONE,
        .keep = r->opts->keep,
        .loop = (uv_loop_t *)&r->loop,
        .target = &r->target,
        .issuer = r->issuer,
        .obs = r->obs,
        .o = r->o,
    };
}

/* The plan's phases, and a teardown after them when the plan creates objects and has no
 * teardown phase of its own. */
int run_phases_init(run_t *r)
{
    const plan_t *p = r->plan;
    bool own = p->n_phases && p->phases[p->n_phases - 1].teardown.on;
    bool add = !own && ledger_creates(obs_ledger(r->obs));
    r->n_phases = p->n_phases + add;
    r->phases = calloc(r->n_phases ? r->n_phases : 1, sizeof(*r->phases));
    if (!r->phases)
        return SQ_ENOMEM;
    for (size_t i = 0; i < p->n_phases; i++)
        r->phases[i] = (run_phase_t){.name = p->phases[i].name,
                                     .duration_ns = p->phases[i].duration_ns,
                                     .teardown = p->phases[i].teardown.on};
    if (add)
        r->phases[p->n_phases] = (run_phase_t){.name = "teardown", .teardown = true};
    return 0;
}

/* Every phase's sources, built as they will be at the phase's start and freed again: their
 * own validation (shapes, open files, the teardown's position). */
static int validate_sources(run_t *r)
{
    int bad = 0;
    for (size_t i = 0; i < r->n_phases; i++) {
        src_ctx_t ctx = run_src_ctx(r, i);
        ctx.loop = NULL;
        ctx.realtime0_ns = clock_real_ns();
        src_t s[RUN_MAX_SOURCES];
        size_t n;
        int64_t t0 = clock_mono_ns();
        int rc = src_phase_new(&ctx, s, &n);
        if (i == 0)
            r->build_ns = clock_mono_ns() - t0;
        if (rc == SQ_ENOMEM)
            return rc;
        bad |= rc != 0;
        for (size_t k = 0; k < n; k++)
            s[k].ops->free(s[k].self);
    }
    return bad ? SQ_EINVAL : 0;
}

/* A URL fetched beside the load that is not on loopback needs --confirm-target, as the
 * target does. */
static int url_safe(const run_t *r, const plan_url_t *u, plan_pos_t pos, const char *what)
{
    if (u->relative || u->loopback || r->opts->confirm_target)
        return 0;
    out_raw(r->o, OUT_ERROR,
            "%s:%d:%d: error: %s %s is not a loopback address: pass --confirm-target to reach it",
            pos.file, pos.line, pos.col, what, u->url);
    return SQ_EINVAL;
}

/* What the plan does beside its load (observe.metrics, observe.collect, actions): off-loopback
 * URLs need --confirm-target, programs need --allow-exec (a plan written by someone else must
 * not run programs on this machine unless its user says so). */
static int beside_safe(const run_t *r)
{
    const plan_t *p = r->plan;
    int bad = 0;
    for (size_t i = 0; i < p->n_scrapes; i++)
        bad |= url_safe(r, &p->scrapes[i].at, p->scrapes[i].pos, "observe.metrics url");
    for (size_t i = 0; i < p->n_collects; i++)
        bad |= url_safe(r, &p->collects[i].at, p->collects[i].pos, "observe.collect url");
    for (size_t i = 0; i < p->n_phases; i++)
        for (size_t k = 0; k < p->phases[i].n_actions; k++) {
            const plan_action_t *a = &p->phases[i].actions[k];
            if (!a->exec) {
                bad |= url_safe(r, &a->url, a->pos, "action url");
            } else if (!r->opts->allow_exec) {
                out_raw(r->o, OUT_ERROR,
                        "%s:%d:%d: error: action '%s' runs a program (%s): refused without "
                        "--allow-exec (read the plan first: it runs on this machine)",
                        a->pos.file, a->pos.line, a->pos.col, a->name, a->argv[0]);
                bad = 1;
            }
        }
    return bad ? SQ_EINVAL : 0;
}

int run_prepare(run_t *r)
{
    const plan_t *p = r->plan;
    if (!p->target.loopback && !r->opts->confirm_target) {
        out_error(r->o,
                  "target %s is not a loopback address: load can hurt a shared control "
                  "plane. Point squall at staging, tell its owners, start small, and pass "
                  "--confirm-target to go ahead",
                  p->target.url);
        return SQ_EINVAL;
    }
    int rc = beside_safe(r);
    if (rc != 0)
        return rc;
    r->seed = run_seed(p, r->opts);
    r->shard = run_shard(r->opts);
    r->shard_seed = sched_shard_seed(r->seed, r->shard);
    if (sched_shard_split(r->shard) && !r->opts->has_seed && !p->has_seed)
        out_warn(r->o,
                 "shard %d/%d with no seed (--seed or the plan's seed): the shards' fleet "
                 "phases and class mixes will not add up to one run's",
                 r->shard.index, r->shard.count);
    rc = src_target_init(&r->target, p, r->opts->insecure, r->o);
    if (rc == 0)
        rc = results_new(&r->res);
    obs_cfg_t oc = {.plan = p,
                    .res = r->res,
                    .o = r->o,
                    .quiet = r->opts->quiet,
                    .no_brakes = r->opts->no_brakes,
                    .metrics_host = r->opts->metrics_host,
                    .metrics_port = r->opts->metrics_port,
                    .brake = r->on_brake,
                    .user = r};
    if (rc == 0)
        rc = obs_new(&oc, &r->obs);
    if (rc == 0)
        rc = src_issuer_new(p, r->shard_seed, r->obs, r->o, &r->issuer);
    if (rc == 0)
        src_issuer_shard(r->issuer, r->shard);
    if (rc == 0)
        rc = run_phases_init(r);
    if (rc == 0)
        rc = validate_sources(r);
    return rc;
}

void run_close(run_t *r)
{
    for (size_t i = 0; r->phases && i < r->n_phases; i++)
        for (size_t k = 0; k < r->phases[i].n_src; k++)
            r->phases[i].src[k].ops->free(r->phases[i].src[k].self);
    free(r->phases);
    r->phases = NULL;
    src_issuer_free(r->issuer);
    scrape_free(r->scrape);
    r->scrape = NULL;
    act_free(r->act);
    r->act = NULL;
    obs_free(r->obs);
    results_free(r->res);
    src_target_close(&r->target);
}

int run_check(const plan_t *plan, const run_opts_t *opts, out_t *o)
{
    run_t r = {.plan = plan, .opts = opts, .o = o};
    int rc = run_prepare(&r);
    run_close(&r);
    return rc;
}
