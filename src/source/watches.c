/* Watch streams: a phase's long-lived streams, opened at once or spread on an engine of their
 * own, kept open for the phase (reconnecting, resuming and re-listing as the class says),
 * closed at its end, and measured per class: open latency, events, bytes, drops, reconnects,
 * propagation latency. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>

#include "watches_int.h"
#include "src_int.h"
#include "squall/clock.h"
#include "squall/file.h"
#include "squall/err.h"
#include "squall/watch.h"

#define RESUME_PARAM  "since" /* the embedded target's query parameter for a resume point */
#define FD_RESERVE    64      /* open files kept aside for the main engine (its multi handles' socket
                                 pairs: at most 30), results, stdio */
#define H2_STREAMS    100     /* libcurl's assumption until the server's SETTINGS arrive */
#define MAX_LIST_PAGE 100000

/* The phase's watchers this shard opens: in each watch set, watcher j (0-based) belongs to shard
 * j mod N + 1 (as fleet agent j does: an agent's own watch goes with it). sh {0, 0}: all. */
static int phase_watchers(const plan_phase_t *pp, sched_shard_t sh)
{
    int n = 0;
    for (size_t k = 0; k < pp->watches.n_sets; k++)
        n += (int)sched_shard_share(sh, 0, (uint64_t)pp->watches.sets[k].count);
    return n;
}

/* Open files one process needs for a phase's watches: one connection per stream over HTTP/1.1,
 * streams / (streams per connection) over HTTP/2. */
static int64_t files_needed(const plan_t *p, int watchers, sched_shard_t sh)
{
    int64_t conns = watchers;
    if (p->target.http == PLAN_HTTP_2) {
        int per = p->target.streams ? p->target.streams : H2_STREAMS;
        conns = (watchers + per - 1) / per;
    }
    return conns + src_fleet_connections(p, sh) + FD_RESERVE;
}

int64_t src_files_needed(const plan_t *p, int shards)
{
    /* Shard 1 has the most: the ceiling of each set's count (and fleet's agents) / N. */
    sched_shard_t first =
        shards > 1 ? (sched_shard_t){.index = 1, .count = shards} : (sched_shard_t){0, 0};
    int64_t most = files_needed(p, 0, first);
    for (size_t i = 0; i < p->n_phases; i++) {
        int64_t need = files_needed(p, phase_watchers(&p->phases[i], first), first);
        most = need > most ? need : most;
    }
    return most;
}

int watches_check_files(const src_ctx_t *ctx, const plan_phase_t *pp, int watchers)
{
    uint64_t limit = file_raise_limit();
    int64_t need = files_needed(ctx->plan, watchers, ctx->shard);
    if (limit == 0 || (uint64_t)need <= limit)
        return 0;
    out_raw(ctx->o, OUT_ERROR,
            "%s:%d:%d: error: phase '%s' opens %d watches, which need about %lld open files "
            "over HTTP/%s, but this process may open at most %llu (RLIMIT_NOFILE hard limit); "
            "use fewer watches per process (shards), or http: \"2\" to multiplex streams",
            pp->pos.file, pp->pos.line, pp->pos.col, pp->name, watchers, (long long)need,
            ctx->plan->target.http == PLAN_HTTP_2 ? "2" : "1.1", (unsigned long long)limit);
    return SQ_ELIMIT;
}

/* ---- recording ------------------------------------------------------------------------- */

results_cell_t *watches_cell(watches_t *ws, int cls, const char *outcome)
{
    return obs_cell(ws->ctx.obs, ws->ctx.phase, cls, outcome);
}

static void hist_add(results_cell_t *c, enum results_metric m, int64_t v)
{
    hist_t *h = c ? results_cell_hist(c, m) : NULL;
    if (h)
        hist_record(h, v < 0 ? 0 : v);
}

/* One request of a watcher (a stream attempt or a relist page) ended with this outcome. */
static void record_end(watches_t *ws, int cls, const eng_result_t *res, bool timed)
{
    results_sample_t smp = {
        .intended_ns = res->intended_ns,
        .sent_ns = res->sent_ns,
        .done_ns = timed ? res->done_ns : 0,
        .bytes_in = res->bytes_in,
        .bytes_out = res->bytes_out,
    };
    results_record(watches_cell(ws, cls, eng_outcome_name(res->outcome)), &smp);
    if (res->status > 0)
        obs_answered(ws->ctx.obs, res->done_ns);
}

/* Keeps a reconnect in the log, which grows as needed up to WATCHES_LOG_MAX entries; past that (or
 * out of memory) it is counted as dropped, and the section says so. */
static void log_reconnect(watches_t *ws, watches_watcher_t *w, int64_t now, int64_t delay)
{
    if (ws->n_log == ws->cap_log) {
        size_t cap = ws->cap_log ? ws->cap_log * 2 : 256;
        cap = cap < WATCHES_LOG_MAX ? cap : WATCHES_LOG_MAX;
        watches_recon_t *l = cap > ws->cap_log ? realloc(ws->log, cap * sizeof(*l)) : NULL;
        if (!l) {
            ws->log_dropped++;
            return;
        }
        ws->log = l;
        ws->cap_log = cap;
    }
    size_t i = ws->n_log++;
    ws->log[i] = (watches_recon_t){
        .end = now - ws->base_ns, .delay = delay, .sent = -1, .attempt = w->st.backoff.attempt - 1};
    w->log = (int)i;
}

/* ---- events ------------------------------------------------------------------------------ */

/* Open latency: the intended open to the first body byte, recorded once the answer proves to be
 * a stream (its first versioned event, or a 2xx end), so a 410's body never counts. */
static void record_open(watches_watcher_t *w)
{
    w->open_recorded = true;
    hist_add(w->wc->events, RESULTS_M_OPEN, w->first_byte_ns - w->intended_ns);
    obs_watch(w->ws->ctx.obs, w->ws->ctx.phase, w->wc->cls, OBS_WATCH_OPENED);
}

/* The answer was an error (its status arrives with the end): its body was no events. */
static void take_back(watches_watcher_t *w)
{
    watches_class_t *wc = w->wc;
    results_counters_t *k = wc->events ? results_cell_counters(wc->events) : NULL;
    wc->events_n -= w->attempt_events;
    wc->bytes -= w->attempt_bytes;
    wc->no_stamp -= w->attempt_no_stamp;
    if (k) {
        k->count -= w->attempt_events;
        k->bytes_in -= w->attempt_bytes;
    }
    w->attempt_events = w->attempt_bytes = w->attempt_no_stamp = 0;
}

static void on_event(void *user, const watch_event_t *ev)
{
    watches_watcher_t *w = user;
    watches_class_t *wc = w->wc;
    const plan_req_t *pr = src_class(w->ws->ctx.issuer, wc->cls)->pr;
    watch_fields_t f = {0};
    if (pr->watch.framing != PLAN_FRAME_RAW &&
        watch_event_fields(ev->data, ev->len, pr->watch.version_key, pr->watch.stamp_key, &f))
        wc->unparsed++;
    if (ev->id_len > 0 && ev->id_len < sizeof(f.version)) {
        /* SSE: the id field is the resume point (sent back as Last-Event-ID). */
        memcpy(f.version, ev->id, ev->id_len);
        f.version[ev->id_len] = '\0';
        f.has_version = true;
        char *end = NULL;
        f.version_num = strtoull(f.version, &end, 10);
        f.version_numeric = *end == '\0';
    }
    if (f.is_error) {
        wc->server_errors++;
        return;
    }
    if (watch_stream_event(&w->st, &f))
        return; /* a duplicate or out of order: counted by the stream, not an event */
    w->got_events = true;
    w->attempt_events++;
    wc->events_n++;
    if (!w->open_recorded && f.has_version)
        record_open(w);
    results_counters_t *k = wc->events ? results_cell_counters(wc->events) : NULL;
    if (k)
        k->count++;
    if (!pr->watch.stamp_key || pr->watch.framing == PLAN_FRAME_RAW) {
        obs_watch_event(w->ws->ctx.obs, -1);
        return;
    }
    if (!f.has_stamp) {
        wc->no_stamp++;
        w->attempt_no_stamp++;
        obs_watch_event(w->ws->ctx.obs, -1);
        return;
    }
    int64_t d = clock_real_ns() - f.stamp_ns;
    if (d < 0)
        wc->stamp_ahead++; /* the writer's clock is ahead of ours: recorded as 0 */
    hist_add(wc->events, RESULTS_M_PROPAGATION, d);
    obs_watch_event(w->ws->ctx.obs, d < 0 ? 0 : d);
}

/* The target answered: the stream is open (its open latency still waits for the first byte). */
static void on_head(void *user, long status)
{
    watches_watcher_t *w = user;
    obs_answered(w->ws->ctx.obs, (int64_t)uv_hrtime()); /* the target answers (brakes) */
    if (status >= 200 && status < 300)
        watch_stream_set(&w->st, WATCH_OPEN);
}

static int on_data(void *user, const char *data, size_t len)
{
    watches_watcher_t *w = user;
    if (!w->got_first) {
        w->got_first = true;
        w->first_byte_ns = (int64_t)uv_hrtime();
        obs_answered(w->ws->ctx.obs, w->first_byte_ns); /* the target answers (brakes) */
        watch_stream_set(&w->st, WATCH_OPEN);
    }
    w->wc->bytes += (int64_t)len;
    w->attempt_bytes += (int64_t)len;
    results_counters_t *k = w->wc->events ? results_cell_counters(w->wc->events) : NULL;
    if (k)
        k->bytes_in += (int64_t)len;
    return watch_framer_feed(&w->fr, data, len) ? 1 : 0;
}

/* ---- opening and ending streams -------------------------------------------------------------- */

static void set_due(watches_t *ws, watches_watcher_t *w, int64_t due)
{
    w->due_ns = due;
    if (due < ws->next_due_ns)
        ws->next_due_ns = due;
}

static void on_stream_done(void *user, const eng_result_t *res);

int watches_stream_open(watches_t *ws, watches_watcher_t *w, int64_t intended)
{
    const src_class_t *c = src_class(ws->ctx.issuer, w->wc->cls);
    bool sse = c->pr->watch.framing == PLAN_FRAME_SSE;
    char path[4096], leid[96];
    const char *headers[c->n_headers + 1];
    size_t nh = c->n_headers;
    memcpy(headers, c->headers, nh * sizeof(*headers));
    char esc[3 * sizeof w->st.version + 1];
    int n;
    if (w->st.has_version && !sse && src_url_escape(w->st.version, esc, sizeof esc))
        n = snprintf(path, sizeof path, "%s%s%s=%s", w->path, strchr(w->path, '?') ? "&" : "?",
                     RESUME_PARAM, esc);
    else
        n = snprintf(path, sizeof path, "%s", w->path);
    if (n < 0 || (size_t)n >= sizeof path)
        return SQ_ELIMIT;
    if (w->st.has_version && sse) {
        snprintf(leid, sizeof leid, "Last-Event-ID: %s", w->st.version);
        headers[nh++] = leid;
    }
    eng_req_t er = {
        .method = "GET",
        .path = path,
        .headers = headers,
        .n_headers = nh,
        .timeout_ms = w->hold_ms,
        .intended_ns = intended,
        .on_data = on_data,
        .on_head = on_head,
        .on_done = on_stream_done,
        .user = w,
    };
    int rc = eng_submit(ws->eng, &er);
    if (rc)
        return rc;
    w->busy = true;
    w->got_first = w->got_events = w->open_recorded = false;
    w->attempt_events = w->attempt_bytes = w->attempt_no_stamp = 0;
    w->intended_ns = intended;
    watch_framer_end(&w->fr);
    watch_stream_set(&w->st, WATCH_OPENING);
    return 0;
}

static int relist_page(watches_t *ws, watches_watcher_t *w, const char *token, int64_t intended);

/* What a finished stream or relist leads to: a due time for the next request. */
static void next_step(watches_t *ws, watches_watcher_t *w, const watch_end_t *end, int64_t now)
{
    int64_t delay = 0;
    bool was_relist = w->st.state == WATCH_RELISTING;
    enum watch_action a = watch_stream_ended(&w->st, end, &ws->rng, &delay);
    if (a == WATCH_DO_NOTHING)
        return;
    w->due_relist = a == WATCH_DO_RELIST;
    if (!was_relist && a != WATCH_DO_RELIST) {
        log_reconnect(ws, w, now, delay);
        obs_watch(ws->ctx.obs, ws->ctx.phase, w->wc->cls, OBS_WATCH_RECONNECT);
    }
    set_due(ws, w, now + delay);
}

static void on_stream_done(void *user, const eng_result_t *res)
{
    watches_watcher_t *w = user;
    watches_t *ws = w->ws;
    w->busy = false;
    watch_framer_end(&w->fr);
    /* The 2xx cell counts events. Two ends are part of how watches work, not errors, and are
     * counted in the section instead: a stream that opened and was then ended by the server,
     * cleanly or not (a drop, answered by a resume), and the plan's too-old answer to a resume
     * (410 by default, answered by a relist). An attempt the target refused otherwise (a status
     * other than 2xx) or never answered (no connection, a timeout before the headers) is
     * recorded under its outcome, and so is a stream squall cancelled at the phase end. */
    bool opened = res->status >= 200 && res->status < 300;
    /* A one-shot stream that squall closed at its hold time ended as planned. */
    bool held = w->hold_ms > 0 && res->outcome == ENG_OUT_TIMEOUT && (opened || w->got_first);
    bool dropped = !held && opened &&
                   (res->outcome == ENG_OUT_RESET || res->outcome == ENG_OUT_TIMEOUT ||
                    res->outcome == ENG_OUT_OTHER);
    int too_old = src_class(ws->ctx.issuer, w->wc->cls)->pr->watch.too_old_status;
    if (res->outcome != ENG_OUT_S2XX && !held && !dropped &&
        !(too_old > 0 && res->status == too_old))
        record_end(ws, w->wc->cls, res, false);
    if (w->log >= 0 && res->sent_ns) {
        ws->log[w->log].sent = res->sent_ns - ws->base_ns;
        w->log = -1;
    }
    bool stream = res->status == 0 || opened;
    if (!stream)
        take_back(w);
    else if (w->got_first && !w->open_recorded)
        record_open(w);
    if (w->open_recorded)
        obs_watch(ws->ctx.obs, ws->ctx.phase, w->wc->cls, OBS_WATCH_ENDED);
    if (dropped)
        obs_watch(ws->ctx.obs, ws->ctx.phase, w->wc->cls, OBS_WATCH_DROPPED);
    watch_end_t end = {
        .status = res->status,
        .transport = res->outcome != ENG_OUT_S2XX && !held,
        .got_events = stream && w->got_events,
    };
    if (ws->once_end) {
        ws->once_end(ws, w, &end, held);
        return;
    }
    if (!ws->active)
        return;
    next_step(ws, w, &end, res->done_ns);
}

/* ---- relists ------------------------------------------------------------------------------- */

/* The version and continuation token of a list page (the watch class's version key; the list
 * class's token key). */
static void page_fields(const src_class_t *lc, const char *vkey, const eng_result_t *res,
                        char *version, size_t vcap, char *token, size_t tcap)
{
    json_t *doc = json_loadb(res->body ? res->body : "", res->body_len, 0, NULL);
    json_t *v = json_object_get(doc, vkey);
    json_t *t = lc->paginate ? json_object_get(doc, lc->pr->list.token_key) : NULL;
    if (json_is_integer(v))
        snprintf(version, vcap, "%lld", (long long)json_integer_value(v));
    else if (json_is_string(v))
        snprintf(version, vcap, "%s", json_string_value(v));
    if (json_is_string(t) && json_string_length(t) < tcap)
        snprintf(token, tcap, "%s", json_string_value(t));
    json_decref(doc);
}

static void on_relist_done(void *user, const eng_result_t *res)
{
    watches_watcher_t *w = user;
    watches_t *ws = w->ws;
    const src_class_t *wcl = src_class(ws->ctx.issuer, w->wc->cls);
    const src_class_t *lc = src_class(ws->ctx.issuer, wcl->pr->watch.relist.index);
    w->busy = false;
    record_end(ws, wcl->pr->watch.relist.index, res, true);
    char version[64] = "", token[1024] = "";
    bool ok = res->outcome == ENG_OUT_S2XX;
    if (ok)
        page_fields(lc, wcl->pr->watch.version_key, res, version, sizeof version, token,
                    sizeof token);
    /* The first page's version is the snapshot to watch from; later pages only complete it. */
    if (w->pages++ == 0)
        snprintf(w->list_version, sizeof w->list_version, "%s", version);
    if (!ws->active)
        return;
    if (ok && token[0] && w->pages < MAX_LIST_PAGE &&
        relist_page(ws, w, token, (int64_t)uv_hrtime()) == 0)
        return;
    if (ok)
        watch_stream_relisted(&w->st, w->list_version);
    watch_end_t end = {.status = ok ? res->status : 0, .transport = !ok};
    next_step(ws, w, &end, res->done_ns);
}

/* Sends one page of the relist (token NULL for the first). */
static int relist_page(watches_t *ws, watches_watcher_t *w, const char *token, int64_t intended)
{
    const src_class_t *lc =
        src_class(ws->ctx.issuer, src_class(ws->ctx.issuer, w->wc->cls)->pr->watch.relist.index);
    const plan_req_t *lp = lc->pr;
    char path[4096], esc[3072] = "";
    if (token && !src_url_escape(token, esc, sizeof esc))
        return SQ_ELIMIT;
    const char *sep = strchr(w->list_base, '?') ? "&" : "?";
    int n = snprintf(path, sizeof path, "%s", w->list_base);
    if (lp->list.page > 0)
        n += snprintf(path + n, sizeof path - (size_t)n, "%s%s=%d", sep, lp->list.limit_param,
                      lp->list.page);
    if (token && n > 0 && (size_t)n < sizeof path)
        n += snprintf(path + n, sizeof path - (size_t)n, "%s%s=%s", lp->list.page > 0 ? "&" : sep,
                      lp->list.token_param, esc);
    if (n < 0 || (size_t)n >= sizeof path)
        return SQ_ELIMIT;
    eng_req_t er = {
        .method = "GET",
        .path = path,
        .headers = lc->headers,
        .n_headers = lc->n_headers,
        .timeout_ms = lc->timeout_ms,
        .intended_ns = intended,
        .keep_body = true,
        .on_done = on_relist_done,
        .user = w,
    };
    int rc = eng_submit(ws->eng, &er);
    if (rc == 0)
        w->busy = true;
    return rc;
}

/* Starts a relist: the list class's path rendered with the watcher's own draws. */
static int relist_start(watches_t *ws, watches_watcher_t *w, int64_t intended)
{
    int list = src_class(ws->ctx.issuer, w->wc->cls)->pr->watch.relist.index;
    rng_t draws = w->draws;
    tmpl_ctx_t ctx = {.agent = w->index, .seq = 0, .phase = ws->ctx.name, .rng = &draws};
    int rc = src_render_path(ws->ctx.issuer, list, &ctx, &ws->buf);
    if (rc)
        return rc;
    free(w->list_base);
    if (!(w->list_base = strdup(ws->buf.data)))
        return SQ_ENOMEM;
    w->pages = 0;
    w->list_version[0] = '\0';
    w->list_intended_ns = intended;
    watch_stream_set(&w->st, WATCH_RELISTING);
    return relist_page(ws, w, NULL, intended);
}

/* ---- the phase ----------------------------------------------------------------------------- */

/* The plan's words for a watch class, as the watch module's own. */
static const enum watch_framing framing[] = {
    [PLAN_FRAME_NDJSON] = WATCH_FRAME_NDJSON,
    [PLAN_FRAME_SSE] = WATCH_FRAME_SSE,
    [PLAN_FRAME_RAW] = WATCH_FRAME_RAW,
};

static watch_stream_cfg_t stream_cfg(const plan_req_t *pr)
{
    return (watch_stream_cfg_t){
        .policy = src_watch_policy(pr->watch.policy),
        .base_ns = pr->watch.base_ns,
        .cap_ns = pr->watch.cap_ns,
        .too_old_status = pr->watch.too_old_status,
        .can_relist = pr->watch.relist.index >= 0,
    };
}

void watches_stream_init(watches_watcher_t *w, const plan_req_t *pr)
{
    watch_stream_cfg_t cfg = stream_cfg(pr);
    watch_stream_init(&w->st, &cfg);
    watch_framer_init(&w->fr, framing[pr->watch.framing], 0, on_event, w);
}

static int watcher_init(watches_t *ws, watches_watcher_t *w, watches_class_t *wc, int index,
                        uint64_t seed)
{
    const src_class_t *c = src_class(ws->ctx.issuer, wc->cls);
    w->ws = ws;
    w->wc = wc;
    w->index = index;
    w->log = -1;
    rng_seed(&w->draws, seed);
    rng_t draws = w->draws;
    tmpl_ctx_t ctx = {.agent = index, .seq = 0, .phase = ws->ctx.name, .rng = &draws};
    int rc = src_render_path(ws->ctx.issuer, wc->cls, &ctx, &ws->buf);
    if (rc)
        return rc;
    if (!(w->path = strdup(ws->buf.data)))
        return SQ_ENOMEM;
    watches_stream_init(w, c->pr);
    return 0;
}

/* libcurl's receive buffer per stream (its default is 16 KiB, held by every open stream): events
 * are a few hundred bytes, and a larger answer (a relist page) is only read in more pieces.
 * 1 KiB is libcurl's least (CURLOPT_BUFFERSIZE). Measured per stream by tools/bench/watch.sh
 * and, by allocation site, watchheap.sh (RESULTS.md, issue 12). */
#define WATCH_RECV_BUFFER 1024L

/* The plan's target, with one connection per stream over HTTP/1.1 and ceil(n / streams)
 * connections over HTTP/2, no timeout (relists carry their class's). */
int watches_engine_new(watches_t *ws, int watchers)
{
    const plan_target_t *t = &ws->ctx.plan->target;
    int per = t->streams ? t->streams : H2_STREAMS;
    int conns = t->http == PLAN_HTTP_2 ? (watchers + per - 1) / per : watchers;
    eng_config_t cfg = ws->ctx.target->eng;
    cfg.connections = conns > 0 ? conns : 1;
    cfg.streams = per;
    cfg.timeout_ms = 0;
    cfg.recv_buffer = WATCH_RECV_BUFFER;
    return eng_new(ws->ctx.loop, &cfg, ws->ctx.o, &ws->eng);
}

static int phase_alloc(watches_t *ws, const plan_phase_t *pp, int n)
{
    ws->w = calloc((size_t)n, sizeof(*ws->w));
    ws->wcs = calloc(pp->watches.n_sets, sizeof(*ws->wcs));
    ws->n_log = ws->cap_log = 0;
    ws->log_dropped = 0;
    if (!ws->w || !ws->wcs)
        return SQ_ENOMEM;
    return 0;
}

static bool watches_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->watches.n_sets > 0;
}

int watches_new(const src_ctx_t *ctx, void **self)
{
    watches_t *ws = calloc(1, sizeof(*ws));
    if (!ws)
        return SQ_ENOMEM;
    *self = ws;
    ws->ctx = *ctx;
    ws->pp = src_phase(ctx);
    tmpl_buf_init(&ws->buf);
    rng_seed(&ws->rng, src_seed(ctx, SRC_STREAM_BACKOFF));
    return watches_check_files(ctx, ws->pp, phase_watchers(ws->pp, ctx->shard));
}

static int watchers_init(watches_t *ws)
{
    const plan_phase_t *pp = ws->pp;
    /* Watchers keep their index in the whole phase ({{agent}}, seed, opening time); a shard
     * builds only its own (phase_watchers). */
    int n = phase_watchers(pp, (sched_shard_t){0, 0}), index = 0, rc = 0;
    sched_shard_t sh = ws->ctx.shard;
    for (size_t k = 0; rc == 0 && k < pp->watches.n_sets; k++) {
        watches_class_t *wc = &ws->wcs[ws->n_wc++];
        int count = pp->watches.sets[k].count;
        wc->cls = pp->watches.sets[k].cls.index;
        wc->streams = (int)sched_shard_share(sh, 0, (uint64_t)count);
        wc->events = watches_cell(ws, wc->cls, "2xx"); /* a watch class's 2xx cell counts events */
        for (int j = 0; rc == 0 && j < count; j++, index++) {
            if (!sched_shard_owns(sh, (uint64_t)j))
                continue;
            watches_watcher_t *w = &ws->w[ws->n++];
            rc = watcher_init(ws, w, wc, index,
                              src_seed(&ws->ctx, SRC_STREAM_WATCH + (uint32_t)index));
            /* Spread: watcher i opens at i * spread / n, evenly over the window. */
            w->due_ns = ws->base_ns + (int64_t)((double)pp->watches.spread_ns * index / n);
        }
    }
    return rc;
}

static int watches_start(void *self, src_t *me)
{
    (void)me;
    watches_t *ws = self;
    int n = phase_watchers(ws->pp, ws->ctx.shard);
    ws->base_ns = ws->ctx.base_ns;
    int rc = phase_alloc(ws, ws->pp, n);
    if (rc == 0)
        rc = watches_engine_new(ws, n);
    if (rc == 0)
        rc = watchers_init(ws);
    ws->next_due_ns = ws->base_ns;
    ws->active = rc == 0;
    if (rc)
        out_error(ws->ctx.o, "phase '%s': cannot set up its watches: %s", ws->pp->name,
                  sq_strerror(rc));
    return rc;
}

static bool watches_next(const void *self, int64_t *at_ns)
{
    const watches_t *ws = self;
    if (!ws->active || ws->next_due_ns == INT64_MAX)
        return false;
    *at_ns = ws->next_due_ns;
    return true;
}

/* Opens, reconnects and relists that are due. */
static int watches_due(void *self, int64_t now_ns)
{
    watches_t *ws = self;
    if (!ws->active || now_ns < ws->next_due_ns)
        return 0;
    int64_t next = INT64_MAX;
    for (size_t i = 0; i < ws->n; i++) {
        watches_watcher_t *w = &ws->w[i];
        enum watch_state s = w->st.state;
        if (w->busy || (s != WATCH_IDLE && s != WATCH_WAITING && s != WATCH_RELISTING))
            continue;
        if (w->due_ns > now_ns) {
            next = w->due_ns < next ? w->due_ns : next;
            continue;
        }
        int rc =
            w->due_relist ? relist_start(ws, w, w->due_ns) : watches_stream_open(ws, w, w->due_ns);
        if (rc == SQ_ESTOPPED)
            return 0;
        if (rc) {
            /* Counted as a failed attempt; the stream tries again after its backoff. */
            watch_end_t end = {.transport = true};
            next_step(ws, w, &end, now_ns);
            next = w->due_ns < next ? w->due_ns : next;
        }
    }
    ws->next_due_ns = next;
    eng_flush(ws->eng); /* the streams open now, not on the loop's next pass */
    return 0;
}

/* Streams opened: each watch set's count, this shard's share of it (streams, not requests; the
 * estimate says so). */
static double watches_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const watches_t *ws = self;
    if (!per_class || t0 > 0 || t1 <= 0)
        return 0;
    for (size_t k = 0; k < ws->pp->watches.n_sets; k++)
        if (ws->pp->watches.sets[k].cls.index >= 0)
            per_class[ws->pp->watches.sets[k].cls.index] += (double)sched_shard_share(
                ws->ctx.shard, 0, (uint64_t)ws->pp->watches.sets[k].count);
    return 0;
}

/* ---- the end of a phase ------------------------------------------------------------------ */

static void phase_free(watches_t *ws)
{
    for (size_t i = 0; i < ws->n; i++) {
        watch_framer_close(&ws->w[i].fr);
        free(ws->w[i].path);
        free(ws->w[i].list_base);
    }
    free(ws->w);
    free(ws->wcs);
    free(ws->log);
    ws->w = NULL;
    ws->wcs = NULL;
    ws->log = NULL;
    ws->n = ws->n_wc = ws->n_log = 0;
}

/* The phase's end: every stream closes (as "cancelled", a watch's natural end), and the
 * phase's figures join the "watches" section. */
void watches_stop(void *self)
{
    watches_t *ws = self;
    if (!ws->active && !ws->eng)
        return;
    ws->active = false;
    for (size_t i = 0; i < ws->n; i++) {
        /* A stream is open once the target answered it; one still waiting (in the server's
         * accept backlog, say) is told apart, never counted as open. */
        ws->w[i].wc->open_at_end += ws->w[i].st.state == WATCH_OPEN;
        ws->w[i].wc->waiting_at_end += ws->w[i].st.state == WATCH_OPENING;
        watch_stream_set(&ws->w[i].st, WATCH_CLOSED);
    }
    eng_free(ws->eng);
    ws->eng = NULL;
    watches_section_put(ws);
}

void watches_free(void *self)
{
    watches_t *ws = self;
    eng_free(ws->eng);
    phase_free(ws);
    tmpl_buf_close(&ws->buf);
    free(ws);
}

const src_ops_t src_watches_ops = {
    .name = "watches",
    .used_by = watches_used_by,
    .new = watches_new,
    .start = watches_start,
    .next = watches_next,
    .due = watches_due,
    .expected = watches_expected,
    .stop = watches_stop,
    .free = watches_free,
};
