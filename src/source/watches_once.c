/* One-shot watch streams for another source (a replay's recorded watches): opened when asked,
 * closed by squall after their hold time, never reopened; see watches_once.h. */
#include <stdlib.h>
#include <string.h>

#include "watches_once.h"
#include "watches_int.h"
#include "squall/err.h"

#define ONCE_CONNS 1024 /* one-shot streams (a replay's) open at once at most; more queue */

/* A one-shot stream ended: its figures join its class's and the watcher is freed. One that
 * squall closed at its hold time ended as planned; any other end is counted by the stream (a
 * drop, a too-old answer), which is never reopened. */
static void once_end(watches_t *ws, watches_watcher_t *w, const watch_end_t *end, bool held)
{
    int64_t delay;
    if (!ws->active) { /* closed at the phase's end, as watches_stop counts its own */
        w->wc->open_at_end += w->st.state == WATCH_OPEN;
        w->wc->waiting_at_end += w->st.state == WATCH_OPENING;
    }
    if (!held)
        watch_stream_ended(&w->st, end, &ws->rng, &delay);
    watches_figs_add(&w->wc->ended, w);
    watch_framer_close(&w->fr);
    free(w->path);
    free(w);
    ws->once_open--;
}

int watches_once_new(const src_ctx_t *ctx, int streams, watches_t **out)
{
    int rc = watches_new(ctx, (void **)out);
    if (rc)
        return rc;
    watches_t *ws = *out;
    ws->once_end = once_end;
    ws->once_max = streams < ONCE_CONNS ? streams : ONCE_CONNS;
    return watches_check_files(ctx, ws->pp, ws->once_max);
}

int watches_once_start(watches_t *ws)
{
    ws->base_ns = ws->ctx.base_ns;
    ws->next_due_ns = INT64_MAX;
    ws->wcs = calloc(ws->ctx.plan->n_reqs ? ws->ctx.plan->n_reqs : 1, sizeof(*ws->wcs));
    int rc = ws->wcs ? watches_engine_new(ws, ws->once_max) : SQ_ENOMEM;
    ws->active = rc == 0;
    if (rc)
        out_error(ws->ctx.o, "phase '%s': cannot set up its watches: %s", ws->pp->name,
                  sq_strerror(rc));
    return rc;
}

/* The class's figures, added the first time one of its streams opens. */
static watches_class_t *once_class(watches_t *ws, int cls)
{
    for (size_t k = 0; k < ws->n_wc; k++)
        if (ws->wcs[k].cls == cls)
            return &ws->wcs[k];
    watches_class_t *wc = &ws->wcs[ws->n_wc++];
    wc->cls = cls;
    wc->events = watches_cell(ws, cls, "2xx");
    return wc;
}

int watches_once_open(watches_t *ws, int cls, const char *path, int64_t intended_ns,
                      int64_t hold_ns)
{
    if (!ws->active)
        return SQ_ESTOPPED;
    watches_watcher_t *w = calloc(1, sizeof(*w));
    if (!w || !(w->path = strdup(path))) {
        free(w);
        return SQ_ENOMEM;
    }
    watches_class_t *wc = once_class(ws, cls);
    const plan_req_t *pr = src_class(ws->ctx.issuer, cls)->pr;
    w->ws = ws;
    w->wc = wc;
    w->log = -1;
    w->hold_ms = hold_ns / 1000000 > 0 ? hold_ns / 1000000 : 1;
    watches_stream_init(w, pr);
    int rc = watches_stream_open(ws, w, intended_ns);
    if (rc) {
        watch_framer_close(&w->fr);
        free(w->path);
        free(w);
        return rc;
    }
    wc->streams++;
    ws->once_open++;
    eng_flush(ws->eng); /* the stream opens now, not on the loop's next pass */
    return 0;
}

int watches_once_open_now(const watches_t *ws)
{
    return ws ? ws->once_open : 0;
}

void watches_once_stop(watches_t *ws)
{
    if (ws)
        watches_stop(ws);
}

void watches_once_free(watches_t *ws)
{
    if (ws)
        watches_free(ws);
}
