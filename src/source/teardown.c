/* Teardown: after the plan's last phase, delete every object the run created (the ledger's),
 * at a bounded rate with retries, on an engine of its own made from the plan's target. The
 * plan's own teardown phase gives its rate and records its deletes as cells; without one the
 * run adds it, unless --keep. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "src_int.h"
#include "squall/err.h"
#include "squall/journal.h"

#define DEFAULT_RATE 100 /* deletes per second when the plan names no teardown rate */
#define ATTEMPTS     4
#define SLACK_NS     (10 * INT64_C(1000000000))
#define INTERRUPTED_MAX_NS                                                                         \
    (30 * INT64_C(1000000000)) /* after a signal, a brake or a dead target                         \
                                */

typedef struct {
    src_ctx_t ctx;
    double rate;
    src_t *me;
    const char **paths;
    const int *cls;
    size_t n;
    enum journal_fate *fates;
    journal_reap_cfg_t cfg;
    journal_reaper_t *reaper;
    hist_t *response; /* every answer's response time, for the lifecycle section */
    bool started, reported;
} teardown_t;

static bool teardown_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->teardown.on;
}

static void teardown_free(void *self)
{
    teardown_t *s = self;
    journal_reaper_free(s->reaper);
    free(s->fates);
    hist_free(s->response);
    free(s);
}

static int teardown_new(const src_ctx_t *ctx, void **self)
{
    teardown_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->ctx = *ctx;
    const plan_phase_t *pp = src_phase(ctx);
    s->rate = pp ? pp->teardown.rate : DEFAULT_RATE;
    /* Each shard deletes only what it created (its own ledger and journal), at its share of
     * the rate, so the shards together delete at the planned rate. */
    if (sched_shard_split(ctx->shard))
        s->rate /= ctx->shard.count;
    if (pp && ctx->phase + 1 != ctx->plan->n_phases) {
        out_raw(ctx->o, OUT_ERROR,
                "%s:%d:%d: error: phase '%s': teardown must be the last phase (it deletes what "
                "every phase before it created)",
                pp->pos.file, pp->pos.line, pp->pos.col, pp->name);
        return SQ_EINVAL;
    }
    return 0;
}

/* Each delete goes through the observers like any request: cells (for the plan's own teardown
 * phase), series rows, the journal. */
static void on_submit(void *user, size_t i)
{
    teardown_t *s = user;
    obs_sent(s->ctx.obs,
             &(obs_sent_t){.phase = s->ctx.phase, .cls = OBS_TEARDOWN, .path = s->paths[i]});
}

static void on_result(void *user, size_t i, const eng_result_t *res, enum journal_fate f)
{
    teardown_t *s = user;
    if (res->outcome != ENG_OUT_CANCELLED)
        hist_record(s->response, res->done_ns - res->intended_ns);
    obs_done(s->ctx.obs, &(obs_done_t){.phase = s->ctx.phase,
                                       .cls = OBS_TEARDOWN,
                                       .first = true,
                                       .agent = -1,
                                       .path = s->paths[i],
                                       .intended_ns = res->intended_ns,
                                       .bytes_in = res->bytes_in,
                                       .bytes_out = res->bytes_out,
                                       .res = res});
    if (f == JOURNAL_DONE || f == JOURNAL_GONE)
        ledger_torn(obs_ledger(s->ctx.obs), s->paths[i], s->cls[i], f == JOURNAL_GONE);
}

static void limits(teardown_t *s)
{
    journal_reap_cfg_t *cfg = &s->cfg;
    *cfg = (journal_reap_cfg_t){
        .rate = s->rate,
        .parallel = s->ctx.plan->target.connections,
        .attempts = ATTEMPTS,
        .on_submit = on_submit,
        .on_result = on_result,
        .user = s,
    };
    double secs = cfg->rate > 0 ? (double)s->n / cfg->rate : (double)s->n / 1000;
    cfg->limit_ns = (int64_t)(secs * 2e9) + SLACK_NS;
    if (s->ctx.stopped && cfg->limit_ns > INTERRUPTED_MAX_NS)
        cfg->limit_ns = INTERRUPTED_MAX_NS;
}

static json_t *figures(const journal_reap_counts_t *c, size_t n, bool kept, const hist_t *h)
{
    json_t *t =
        json_pack("{s:I, s:b, s:I, s:I, s:I, s:I, s:I, s:f, s:s?}", "objects", (json_int_t)n,
                  "kept", kept, "deleted", (json_int_t)c->done, "already_gone",
                  (json_int_t)c->gone, "failed", (json_int_t)c->refused, "left",
                  (json_int_t)(kept ? n : c->left), "not_tried", (json_int_t)c->not_tried,
                  "seconds", (double)c->elapsed_ns / 1e9, "stopped", c->why[0] ? c->why : NULL);
    if (t && h && hist_count(h)) {
        json_object_set_new(t, "response_p50_ms", json_real((double)hist_value_at(h, 50) / 1e6));
        json_object_set_new(t, "response_p99_ms", json_real((double)hist_value_at(h, 99) / 1e6));
    }
    return t;
}

static int teardown_start(void *self, src_t *me)
{
    teardown_t *s = self;
    ledger_t *g = obs_ledger(s->ctx.obs);
    s->me = me;
    s->started = true;
    if (!ledger_creates(g))
        return 0; /* no creating class: nothing to tear down, no section */
    s->n = ledger_gather(g, &s->paths, &s->cls);
    if (s->ctx.keep) {
        out_info(s->ctx.o,
                 "--keep: %zu objects left on the target; `squall cleanup %s` deletes "
                 "them",
                 s->n, ledger_journal(g));
        return 0;
    }
    if (!(s->fates = calloc(s->n ? s->n : 1, sizeof(*s->fates))) || hist_new_ns(&s->response))
        return SQ_ENOMEM;
    limits(s);
    obs_teardown_total(s->ctx.obs, (int64_t)s->n);
    int rc = journal_reaper_start(s->ctx.loop, &s->ctx.target->eng, s->ctx.o, &s->cfg, s->paths,
                                  s->n, s->fates, &s->reaper);
    if (rc)
        out_error(s->ctx.o, "teardown could not start: %s", sq_strerror(rc));
    return 0; /* a teardown that cannot start leaves its objects, reported; the run goes on */
}

/* Deletes in [t0, t1): one every 1/rate from t = 0 (all at once without a rate). */
static double teardown_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const teardown_t *s = self;
    double n = s->started ? (double)s->n : s->ctx.alive, got;
    if (s->rate <= 0) {
        got = t0 <= 0 && t1 > 0 ? n : 0;
    } else {
        double a = ceil((double)t0 * s->rate / 1e9 - 1e-9),
               b = ceil((double)t1 * s->rate / 1e9 - 1e-9);
        got = fmin(fmax(b, 0), n) - fmin(fmax(a, 0), n);
    }
    if (per_class)
        per_class[s->ctx.plan->n_reqs] += got;
    return got;
}

static void report(teardown_t *s)
{
    ledger_t *g = obs_ledger(s->ctx.obs);
    journal_reap_counts_t c;
    journal_reaper_counts(s->reaper, &c);
    s->reported = true;
    if (!ledger_creates(g))
        return;
    ledger_teardown_json(g, figures(&c, s->n, s->ctx.keep, s->ctx.keep ? NULL : s->response));
    if (s->ctx.keep || s->n == 0)
        return;
    char text[200];
    size_t still = journal_counts_text(&c, text, sizeof text);
    out_info(s->ctx.o, "teardown: %s", text);
    if (still)
        out_warn(s->ctx.o,
                 "%zu objects are still on the target (%zu failed, %zu left, %zu not tried)%s%s; "
                 "`squall cleanup %s` deletes what the journal shows alive",
                 still, c.refused, c.left, c.not_tried, c.why[0] ? ": " : "", c.why,
                 ledger_journal(g));
}

static bool teardown_idle(const void *self)
{
    const teardown_t *s = self;
    return s->started && journal_reaper_finished(s->reaper);
}

/* The run is stopping (a signal during the teardown): what is not deleted yet is left. */
static void teardown_stop(void *self)
{
    teardown_t *s = self;
    if (!journal_reaper_finished(s->reaper))
        journal_reaper_stop(s->reaper, "stopped by a signal");
}

static int teardown_finish(void *self, results_t *res)
{
    (void)res;
    teardown_t *s = self;
    if (s->started && !s->reported)
        report(s);
    return 0;
}

const src_ops_t src_teardown_ops = {
    .name = "teardown",
    .used_by = teardown_used_by,
    .new = teardown_new,
    .start = teardown_start,
    .expected = teardown_expected,
    .stop = teardown_stop,
    .idle = teardown_idle,
    .finish = teardown_finish,
    .free = teardown_free,
};
