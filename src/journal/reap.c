/* The reaper: DELETE every listed path at a bounded rate over its own engine, retrying what the
 * target could not answer yet, until each object has a fate or a time limit, a signal or an
 * unreachable target stops it. A run's teardown drives it on the run's loop; `squall cleanup`
 * runs it to the end with journal_reap. */
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/journal.h"
#include "squall/value.h"

#define BACKOFF_BASE_NS (200 * INT64_C(1000000))
#define BACKOFF_CAP_NS  (2000 * INT64_C(1000000))
#define RETRY_AFTER_CAP (30 * INT64_C(1000000000)) /* a longer Retry-After waits only this long */

typedef struct journal_reaper reaper_t;

typedef struct {
    reaper_t *rp;
    size_t i;
} slot_t;

struct journal_reaper {
    uv_loop_t *loop;
    eng_t *eng;
    uv_timer_t tick;
    uv_signal_t sigint, sigterm;
    out_t *o;
    const journal_reap_cfg_t *cfg;
    const char *const *paths;
    size_t n, next, pending; /* pending: objects without a final fate */
    enum journal_fate *fates;
    bool *final;
    int *attempts;
    slot_t *slots;
    size_t *retry;      /* objects waiting to be tried again */
    int64_t *retry_due; /* uv_hrtime() when they may be */
    size_t n_retry;
    int in_flight;
    int64_t t0, deadline;
    bool stopping, finished;
    int open;     /* our handles not yet closed */
    bool release; /* journal_reaper_free was called: free once every handle closed */
    char why[160];
};

static void reaper_release(reaper_t *rp)
{
    free(rp->final);
    free(rp->attempts);
    free(rp->slots);
    free(rp->retry);
    free(rp->retry_due);
    free(rp);
}

static void on_closed(uv_handle_t *h)
{
    reaper_t *rp = h->data;
    if (--rp->open == 0 && rp->release)
        reaper_release(rp);
}

static void set_final(reaper_t *rp, size_t i, enum journal_fate f)
{
    if (rp->final[i])
        return;
    rp->final[i] = true;
    rp->fates[i] = f;
    rp->pending--;
}

static void close_handle(reaper_t *rp, uv_handle_t *h)
{
    if (h->loop && !uv_is_closing(h)) {
        uv_close(h, on_closed);
        rp->open++;
    }
}

static void close_all(reaper_t *rp)
{
    if (rp->finished)
        return;
    rp->finished = true;
    uv_timer_stop(&rp->tick);
    close_handle(rp, (uv_handle_t *)&rp->tick);
    close_handle(rp, (uv_handle_t *)&rp->sigint);
    close_handle(rp, (uv_handle_t *)&rp->sigterm);
    eng_free(rp->eng);
    rp->eng = NULL;
}

/* Stops at once: in-flight deletes are cancelled, everything without a fate is LEFT. */
static void reap_stop(reaper_t *rp, const char *why)
{
    if (rp->stopping || rp->finished)
        return;
    rp->stopping = true;
    snprintf(rp->why, sizeof rp->why, "%s", why);
    eng_stop(rp->eng, 0);
}

static void on_done(void *user, const eng_result_t *res);

static int submit(reaper_t *rp, size_t i, int64_t intended)
{
    eng_req_t req = {
        .method = "DELETE",
        .path = rp->paths[i],
        .intended_ns = intended,
        .on_done = on_done,
        .user = &rp->slots[i],
    };
    int rc = eng_submit(rp->eng, &req);
    if (rc == SQ_EINVAL) { /* not a request path: this object fails, the others go on */
        out_warn(rp->o, "not deleted: its path is not a request path (%s)",
                 value_path_problem(rp->paths[i]) ? value_path_problem(rp->paths[i]) : "?");
        set_final(rp, i, JOURNAL_REFUSED);
        return 0;
    }
    if (rc == 0) {
        rp->in_flight++;
        rp->attempts[i]++;
        if (rp->cfg->on_submit) /* on_done has not run yet: it never runs inside eng_submit */
            rp->cfg->on_submit(rp->cfg->user, i);
    }
    return rc;
}

/* What one answer means for object i: its final fate, or LEFT with a retry scheduled. */
static enum journal_fate judge(reaper_t *rp, size_t i, const eng_result_t *res, bool *final)
{
    *final = true;
    if (res->outcome == ENG_OUT_S2XX)
        return JOURNAL_DONE;
    if (res->status == 404 || res->status == 410)
        return JOURNAL_GONE;
    bool again = res->outcome != ENG_OUT_S3XX && res->outcome != ENG_OUT_CANCELLED &&
                 (res->outcome != ENG_OUT_S4XX || res->status == 429 || res->status == 408);
    if (res->outcome == ENG_OUT_CANCELLED)
        return JOURNAL_LEFT;
    if (!again || rp->attempts[i] >= rp->cfg->attempts || rp->stopping)
        return JOURNAL_REFUSED;
    int64_t wait = BACKOFF_BASE_NS << (rp->attempts[i] - 1 < 4 ? rp->attempts[i] - 1 : 4);
    wait = wait < BACKOFF_CAP_NS ? wait : BACKOFF_CAP_NS;
    if (res->retry_after_s > 0) /* the server's word (RFC 9110, 10.2.3) over our backoff */
        wait = res->retry_after_s < RETRY_AFTER_CAP / 1000000000 ? res->retry_after_s * 1000000000
                                                                 : RETRY_AFTER_CAP;
    rp->retry[rp->n_retry] = i;
    rp->retry_due[rp->n_retry++] = res->done_ns + wait;
    *final = false;
    return JOURNAL_LEFT;
}

static void on_done(void *user, const eng_result_t *res)
{
    slot_t *s = user;
    reaper_t *rp = s->rp;
    rp->in_flight--;
    bool final;
    enum journal_fate f = judge(rp, s->i, res, &final);
    if (final)
        set_final(rp, s->i, f);
    if (rp->cfg->on_result)
        rp->cfg->on_result(rp->cfg->user, s->i, res, f);
}

static void issue_retries(reaper_t *rp, int64_t now)
{
    for (size_t k = 0; k < rp->n_retry && rp->in_flight < rp->cfg->parallel;) {
        if (rp->retry_due[k] > now) {
            k++;
            continue;
        }
        size_t i = rp->retry[k];
        rp->retry[k] = rp->retry[--rp->n_retry];
        rp->retry_due[k] = rp->retry_due[rp->n_retry];
        if (submit(rp, i, now)) {
            reap_stop(rp, "the engine refused a request");
            return;
        }
    }
}

static void issue_first(reaper_t *rp, int64_t now)
{
    while (rp->next < rp->n && rp->in_flight < rp->cfg->parallel) {
        int64_t intended = now;
        if (rp->cfg->rate > 0) {
            intended = rp->t0 + (int64_t)((double)rp->next / rp->cfg->rate * 1e9);
            if (intended > now)
                return;
        }
        if (submit(rp, rp->next, intended)) {
            reap_stop(rp, "the engine refused a request");
            return;
        }
        rp->next++;
    }
}

static void on_tick(uv_timer_t *t)
{
    reaper_t *rp = t->data;
    int64_t now = (int64_t)uv_hrtime();
    if (!rp->stopping && now >= rp->deadline)
        reap_stop(rp, "the teardown time limit was reached");
    if (!rp->stopping) {
        issue_retries(rp, now);
        issue_first(rp, now);
    }
    if (rp->stopping && rp->in_flight == 0)
        for (size_t i = 0; i < rp->n; i++)
            set_final(rp, i, rp->attempts[i] ? JOURNAL_LEFT : JOURNAL_NOT_TRIED);
    if (rp->pending == 0)
        close_all(rp);
}

static void on_signal(uv_signal_t *s, int signum)
{
    reap_stop(s->data, signum == SIGINT ? "SIGINT" : "SIGTERM");
}

static void on_unreachable(void *user)
{
    reap_stop(user, "the target is unreachable");
}

static int reaper_init(reaper_t *rp, const eng_config_t *ecfg)
{
    size_t n = rp->n;
    rp->final = calloc(n, sizeof(*rp->final));
    rp->attempts = calloc(n, sizeof(*rp->attempts));
    rp->slots = calloc(n, sizeof(*rp->slots));
    rp->retry = calloc(n, sizeof(*rp->retry));
    rp->retry_due = calloc(n, sizeof(*rp->retry_due));
    if (!rp->final || !rp->attempts || !rp->slots || !rp->retry || !rp->retry_due)
        return SQ_ENOMEM;
    for (size_t i = 0; i < n; i++)
        rp->slots[i] = (slot_t){rp, i};
    eng_config_t cfg = *ecfg;
    cfg.on_unreachable = on_unreachable;
    cfg.user = rp;
    int rc = eng_new(rp->loop, &cfg, rp->o, &rp->eng);
    if (rc)
        return rc;
    uv_timer_init(rp->loop, &rp->tick);
    rp->tick.data = rp->sigint.data = rp->sigterm.data = rp;
    rc = uv_timer_start(&rp->tick, on_tick, 1, 1);
    if (rc == 0 && rp->cfg->signals) {
        uv_signal_init(rp->loop, &rp->sigint);
        uv_signal_init(rp->loop, &rp->sigterm);
        rc = uv_signal_start(&rp->sigint, on_signal, SIGINT) ||
             uv_signal_start(&rp->sigterm, on_signal, SIGTERM);
    }
    if (rc) {
        close_all(rp);
        return SQ_ELIBUV;
    }
    return 0;
}

int journal_reaper_start(uv_loop_t *loop, const eng_config_t *ecfg, out_t *o,
                         const journal_reap_cfg_t *cfg, const char *const *paths, size_t n,
                         enum journal_fate *fates, journal_reaper_t **out)
{
    *out = NULL;
    for (size_t i = 0; i < n; i++)
        fates[i] = JOURNAL_NOT_TRIED;
    reaper_t *rp = calloc(1, sizeof(*rp));
    if (!rp)
        return SQ_ENOMEM;
    *rp = (reaper_t){
        .loop = loop, .o = o, .cfg = cfg, .paths = paths, .n = n, .pending = n, .fates = fates};
    rp->t0 = (int64_t)uv_hrtime();
    rp->deadline = rp->t0 + cfg->limit_ns;
    int rc = n ? reaper_init(rp, ecfg) : 0;
    if (n == 0)
        rp->finished = true;
    *out = rp;
    return rc;
}

void journal_reaper_stop(journal_reaper_t *rp, const char *why)
{
    if (rp)
        reap_stop(rp, why);
}

bool journal_reaper_finished(const journal_reaper_t *rp)
{
    return !rp || rp->finished;
}

void journal_reaper_counts(const journal_reaper_t *rp, journal_reap_counts_t *counts)
{
    memset(counts, 0, sizeof(*counts));
    if (!rp)
        return;
    for (size_t i = 0; i < rp->n; i++) {
        counts->done += rp->fates[i] == JOURNAL_DONE;
        counts->gone += rp->fates[i] == JOURNAL_GONE;
        counts->refused += rp->fates[i] == JOURNAL_REFUSED;
        counts->left += rp->fates[i] == JOURNAL_LEFT;
        counts->not_tried += rp->fates[i] == JOURNAL_NOT_TRIED;
    }
    counts->elapsed_ns = (int64_t)uv_hrtime() - rp->t0;
    snprintf(counts->why, sizeof counts->why, "%s", rp->why);
}

void journal_reaper_free(journal_reaper_t *rp)
{
    if (!rp)
        return;
    reap_stop(rp, "stopped");
    close_all(rp);
    rp->release = true;
    if (rp->open == 0)
        reaper_release(rp);
}

/* The progress line of a reaper run to its end, once a second. */
typedef struct {
    journal_reaper_t *rp;
    out_t *o;
    size_t n, last;
} progress_t;

static void on_progress(uv_timer_t *t)
{
    progress_t *p = t->data;
    journal_reap_counts_t c;
    journal_reaper_counts(p->rp, &c);
    size_t deleted = c.done + c.gone;
    double secs = (double)c.elapsed_ns / 1e9, pace = secs > 0 ? (double)deleted / secs : 0;
    char left[32] = "\xe2\x80\x93"; /* "–" until something was deleted */
    if (pace > 0)
        snprintf(left, sizeof left, "%.1fs", (double)(p->n - deleted) / pace);
    out_live(p->o, "cleanup: deleted %zu of %zu, %zu/s, %s left", deleted, p->n, deleted - p->last,
             left);
    p->last = deleted;
}

int journal_reap(uv_loop_t *loop, const eng_config_t *ecfg, out_t *o, const journal_reap_cfg_t *cfg,
                 const char *const *paths, size_t n, enum journal_fate *fates,
                 journal_reap_counts_t *counts)
{
    journal_reaper_t *rp;
    int rc = journal_reaper_start(loop, ecfg, o, cfg, paths, n, fates, &rp);
    if (rp && (rc == 0 || rp->finished)) {
        /* The progress timer does not keep the loop alive: uv_run returns with the reaper. */
        progress_t p = {.rp = rp, .o = o, .n = n};
        uv_timer_t tick;
        bool ticking = uv_timer_init(loop, &tick) == 0;
        if (ticking) {
            tick.data = &p;
            uv_unref((uv_handle_t *)&tick);
            uv_timer_start(&tick, on_progress, 1000, 1000);
        }
        uv_run(loop, UV_RUN_DEFAULT);
        if (ticking) {
            uv_close((uv_handle_t *)&tick, NULL);
            uv_run(loop, UV_RUN_DEFAULT);
        }
        out_live_end(o);
    }
    journal_reaper_counts(rp, counts);
    journal_reaper_free(rp);
    if (rp)
        uv_run(loop, UV_RUN_DEFAULT); /* the close callbacks */
    return rc;
}

size_t journal_counts_text(const journal_reap_counts_t *c, char *buf, size_t cap)
{
    size_t n = c->done + c->gone + c->refused + c->left + c->not_tried;
    snprintf(buf, cap,
             "%zu objects: %zu deleted, %zu already gone, %zu failed, %zu left, %zu not tried "
             "(%.1f s)",
             n, c->done, c->gone, c->refused, c->left, c->not_tried, (double)c->elapsed_ns / 1e9);
    return c->refused + c->left + c->not_tried;
}
