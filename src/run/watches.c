/* A phase's watch streams in a run: opened at once or spread on their own engine, kept open for
 * the phase (reconnecting, resuming and re-listing as the class says), closed at its end, and
 * measured per class: open latency, events, bytes, drops, reconnects, propagation latency. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>

#include "run_int.h"
#include "squall/err.h"
#include "squall/watch.h"

#define RESUME_PARAM  "since" /* the embedded target's query parameter for a resume point */
#define LOG_MAX       20000   /* reconnects kept per phase in the results' reconnect log */
#define FD_RESERVE    64      /* open files kept aside for the main engine, results, stdio */
#define H2_STREAMS    100     /* libcurl's assumption until the server's SETTINGS arrive */
#define MAX_LIST_PAGE 100000

/* Per watch class of the phase. */
typedef struct {
    int cls;
    results_cell_t *events; /* (phase, class, "2xx"): count = events; open, propagation */
    int streams;
    int64_t events_n, bytes, unparsed, oversize, server_errors, no_stamp, stamp_ahead;
} wclass_t;

typedef struct watcher {
    struct run_watches *ws;
    int index;
    wclass_t *wc;
    watch_stream_t st;
    watch_framer_t fr;
    rng_t draws; /* the template draws of this watcher: its watch and relist paths agree */
    char *path;  /* the rendered watch path, without a resume point */
    int64_t due_ns;
    bool due_relist, busy, got_first, got_events, open_recorded;
    int64_t intended_ns, first_byte_ns;
    /* This attempt's share of the class figures, taken back when the answer is not a stream
     * (the engine streams every body, also a 410's: its status is known only at the end). */
    int64_t attempt_events, attempt_bytes, attempt_no_stamp;
    int log; /* reconnect log entry waiting for its send time, or -1 */
    /* A relist in flight: its pages. */
    char *list_base;
    int pages;
    int64_t list_intended_ns;
    char list_version[64];
} watcher_t;

struct run_watches {
    runner_t *r;
    const char *token;
    json_t *section; /* {phase: {class: figures}}, copied into the results at each phase end */
    bool active;
    size_t phase;
    int64_t base_ns;
    eng_t *eng;
    watcher_t *w;
    size_t n;
    wclass_t *wcs;
    size_t n_wc;
    int64_t next_due_ns;
    int64_t *log_end, *log_delay, *log_sent; /* relative to the phase start, ns */
    int *log_attempt;
    size_t n_log, cap_log; /* cap_log: entries allocated (at most LOG_MAX) */
};

static int64_t realtime_ns(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return (int64_t)ts.tv_sec * 1000000000 + ts.tv_nsec;
}

static int phase_watchers(const plan_phase_t *pp)
{
    int n = 0;
    for (size_t k = 0; k < pp->watches.n_sets; k++)
        n += pp->watches.sets[k].count;
    return n;
}

/* Open files one process needs for a phase's watches: one connection per stream over HTTP/1.1,
 * streams / (streams per connection) over HTTP/2. */
static int64_t files_needed(const plan_t *p, int watchers)
{
    int64_t conns = watchers;
    if (p->target.http == PLAN_HTTP_2) {
        int per = p->target.streams ? p->target.streams : H2_STREAMS;
        conns = (watchers + per - 1) / per;
    }
    return conns + p->target.connections + FD_RESERVE;
}

/* Raises the soft open-files limit to the hard one and refuses a plan that needs more. */
static int check_files(runner_t *r)
{
    struct rlimit rl;
    if (getrlimit(RLIMIT_NOFILE, &rl) != 0)
        return 0;
    if (rl.rlim_cur < rl.rlim_max) {
        rl.rlim_cur = rl.rlim_max;
        setrlimit(RLIMIT_NOFILE, &rl);
        getrlimit(RLIMIT_NOFILE, &rl);
    }
    int bad = 0;
    for (size_t i = 0; i < r->plan->n_phases; i++) {
        const plan_phase_t *pp = &r->plan->phases[i];
        int64_t need = files_needed(r->plan, phase_watchers(pp));
        if (rl.rlim_cur == RLIM_INFINITY || need <= (int64_t)rl.rlim_cur)
            continue;
        out_raw(r->o, OUT_ERROR,
                "%s:%d:%d: error: phase '%s' opens %d watches, which need about %lld open files "
                "over HTTP/%s, but this process may open at most %llu (RLIMIT_NOFILE hard limit); "
                "use fewer watches per process (shards), or http: \"2\" to multiplex streams",
                pp->pos.file, pp->pos.line, pp->pos.col, pp->name, phase_watchers(pp),
                (long long)need, r->plan->target.http == PLAN_HTTP_2 ? "2" : "1.1",
                (unsigned long long)rl.rlim_cur);
        bad = 1;
    }
    return bad ? SQ_ELIMIT : 0;
}

int run_watches_init(runner_t *r, const char *token)
{
    bool any = false;
    for (size_t i = 0; i < r->plan->n_phases; i++)
        any |= r->plan->phases[i].watches.n_sets > 0;
    if (!any)
        return 0;
    int rc = check_files(r);
    if (rc)
        return rc;
    r->watches = calloc(1, sizeof(*r->watches));
    if (!r->watches || !(r->watches->section = json_object()))
        return SQ_ENOMEM;
    r->watches->r = r;
    r->watches->token = token;
    return 0;
}

/* ---- recording ------------------------------------------------------------------------- */

static results_cell_t *cell(struct run_watches *ws, int cls, const char *outcome)
{
    runner_t *r = ws->r;
    return results_cell(r->res, r->plan->phases[ws->phase].name, r->classes[cls].pr->name, outcome);
}

static void hist_add(results_cell_t *c, enum results_metric m, int64_t v)
{
    hist_t *h = c ? results_cell_hist(c, m) : NULL;
    if (h)
        hist_record(h, v < 0 ? 0 : v);
}

/* One request of a watcher (a stream attempt or a relist page) ended with this outcome. */
static void record_end(struct run_watches *ws, int cls, const eng_result_t *res, bool timed)
{
    results_cell_t *c = cell(ws, cls, eng_outcome_name(res->outcome));
    if (!c)
        return;
    results_counters_t *k = results_cell_counters(c);
    k->count++;
    k->bytes_in += res->bytes_in;
    k->bytes_out += res->bytes_out;
    if (timed) {
        hist_add(c, RESULTS_M_RESPONSE, res->done_ns - res->intended_ns);
        if (res->sent_ns)
            hist_add(c, RESULTS_M_SERVICE, res->done_ns - res->sent_ns);
    }
    if (res->status > 0)
        ws->r->last_response_ns = res->done_ns;
}

static void log_reconnect(struct run_watches *ws, watcher_t *w, int64_t now, int64_t delay)
{
    if (ws->n_log >= ws->cap_log)
        return;
    size_t i = ws->n_log++;
    ws->log_end[i] = now - ws->base_ns;
    ws->log_delay[i] = delay;
    ws->log_sent[i] = -1;
    ws->log_attempt[i] = w->st.backoff.attempt - 1;
    w->log = (int)i;
}

/* ---- events ------------------------------------------------------------------------------ */

/* Open latency: the intended open to the first body byte, recorded once the answer proves to be
 * a stream (its first versioned event, or a 2xx end), so a 410's body never counts. */
static void record_open(watcher_t *w)
{
    w->open_recorded = true;
    hist_add(w->wc->events, RESULTS_M_OPEN, w->first_byte_ns - w->intended_ns);
}

/* The answer was an error (its status arrives with the end): its body was no events. */
static void take_back(watcher_t *w)
{
    wclass_t *wc = w->wc;
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
    watcher_t *w = user;
    wclass_t *wc = w->wc;
    const plan_req_t *pr = w->ws->r->classes[wc->cls].pr;
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
    if (!pr->watch.stamp_key || pr->watch.framing == PLAN_FRAME_RAW)
        return;
    if (!f.has_stamp) {
        wc->no_stamp++;
        w->attempt_no_stamp++;
        return;
    }
    int64_t d = realtime_ns() - f.stamp_ns;
    if (d < 0)
        wc->stamp_ahead++; /* the writer's clock is ahead of ours: recorded as 0 */
    hist_add(wc->events, RESULTS_M_PROPAGATION, d);
}

static int on_data(void *user, const char *data, size_t len)
{
    watcher_t *w = user;
    if (!w->got_first) {
        w->got_first = true;
        w->first_byte_ns = (int64_t)uv_hrtime();
        w->ws->r->last_response_ns = w->first_byte_ns; /* the target answers (brakes) */
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

static void set_due(struct run_watches *ws, watcher_t *w, int64_t due)
{
    w->due_ns = due;
    if (due < ws->next_due_ns)
        ws->next_due_ns = due;
}

static void on_stream_done(void *user, const eng_result_t *res);

static int open_stream(struct run_watches *ws, watcher_t *w, int64_t intended)
{
    const run_class_t *c = &ws->r->classes[w->wc->cls];
    bool sse = c->pr->watch.framing == PLAN_FRAME_SSE;
    char path[4096], leid[96];
    const char *headers[c->n_headers + 1];
    size_t nh = c->n_headers;
    memcpy(headers, c->headers, nh * sizeof(*headers));
    int n;
    if (w->st.has_version && !sse)
        n = snprintf(path, sizeof path, "%s%s%s=%s", w->path, strchr(w->path, '?') ? "&" : "?",
                     RESUME_PARAM, w->st.version);
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
        .intended_ns = intended,
        .on_data = on_data,
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

static int relist_page(struct run_watches *ws, watcher_t *w, const char *token, int64_t intended);

/* What a finished stream or relist leads to: a due time for the next request. */
static void next_step(struct run_watches *ws, watcher_t *w, const watch_end_t *end, int64_t now)
{
    int64_t delay = 0;
    bool was_relist = w->st.state == WATCH_RELISTING;
    enum watch_action a = watch_stream_ended(&w->st, end, &ws->r->rng, &delay);
    if (a == WATCH_DO_NOTHING)
        return;
    w->due_relist = a == WATCH_DO_RELIST;
    if (!was_relist && a != WATCH_DO_RELIST)
        log_reconnect(ws, w, now, delay);
    set_due(ws, w, now + delay);
}

static void on_stream_done(void *user, const eng_result_t *res)
{
    watcher_t *w = user;
    struct run_watches *ws = w->ws;
    w->busy = false;
    watch_framer_end(&w->fr);
    /* The 2xx cell counts events: a stream the server ended cleanly is counted in the section
     * (drops), other ends under their outcome (reset, 4xx, cancelled at the phase end, ...). */
    if (res->outcome != ENG_OUT_S2XX)
        record_end(ws, w->wc->cls, res, false);
    if (w->log >= 0 && res->sent_ns) {
        ws->log_sent[w->log] = res->sent_ns - ws->base_ns;
        w->log = -1;
    }
    bool stream = res->status == 0 || (res->status >= 200 && res->status < 300);
    if (!stream)
        take_back(w);
    else if (w->got_first && !w->open_recorded)
        record_open(w);
    if (!ws->active)
        return;
    watch_end_t end = {
        .status = res->status,
        .transport = res->outcome != ENG_OUT_S2XX,
        .got_events = stream && w->got_events,
    };
    next_step(ws, w, &end, res->done_ns);
}

/* ---- relists ------------------------------------------------------------------------------- */

/* The version and continuation token of a list page (the watch class's version key; the list
 * class's token key). */
static void page_fields(const run_class_t *lc, const char *vkey, const eng_result_t *res,
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
    watcher_t *w = user;
    struct run_watches *ws = w->ws;
    const run_class_t *wcl = &ws->r->classes[w->wc->cls];
    const run_class_t *lc = &ws->r->classes[wcl->pr->watch.relist.index];
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
static int relist_page(struct run_watches *ws, watcher_t *w, const char *token, int64_t intended)
{
    const run_class_t *lc = &ws->r->classes[ws->r->classes[w->wc->cls].pr->watch.relist.index];
    const plan_req_t *lp = lc->pr;
    char path[4096], esc[3072] = "";
    if (token && !run_url_escape(token, esc, sizeof esc))
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
static int relist_start(struct run_watches *ws, watcher_t *w, int64_t intended)
{
    runner_t *r = ws->r;
    const run_class_t *lc = &r->classes[r->classes[w->wc->cls].pr->watch.relist.index];
    rng_t draws = w->draws;
    tmpl_ctx_t ctx = {
        .agent = w->index, .seq = 0, .phase = r->plan->phases[ws->phase].name, .rng = &draws};
    int rc = tmpl_render(lc->path, &ctx, &r->path_buf);
    if (rc)
        return rc;
    free(w->list_base);
    if (!(w->list_base = strdup(r->path_buf.data)))
        return SQ_ENOMEM;
    w->pages = 0;
    w->list_version[0] = '\0';
    w->list_intended_ns = intended;
    watch_stream_set(&w->st, WATCH_RELISTING);
    return relist_page(ws, w, NULL, intended);
}

/* ---- the phase ----------------------------------------------------------------------------- */

static int watcher_init(struct run_watches *ws, watcher_t *w, wclass_t *wc, int index,
                        uint64_t seed)
{
    runner_t *r = ws->r;
    const run_class_t *c = &r->classes[wc->cls];
    w->ws = ws;
    w->wc = wc;
    w->index = index;
    w->log = -1;
    rng_seed(&w->draws, seed);
    rng_t draws = w->draws;
    tmpl_ctx_t ctx = {
        .agent = index, .seq = 0, .phase = r->plan->phases[ws->phase].name, .rng = &draws};
    int rc = tmpl_render(c->path, &ctx, &r->path_buf);
    if (rc)
        return rc;
    if (!(w->path = strdup(r->path_buf.data)))
        return SQ_ENOMEM;
    watch_stream_init(&w->st, c->pr, c->pr->watch.relist.index >= 0);
    watch_framer_init(&w->fr, c->pr->watch.framing, 0, on_event, w);
    return 0;
}

static int engine_new(struct run_watches *ws, int watchers)
{
    const plan_target_t *t = &ws->r->plan->target;
    int per = t->streams ? t->streams : H2_STREAMS;
    int conns = t->http == PLAN_HTTP_2 ? (watchers + per - 1) / per : watchers;
    eng_config_t cfg = {
        .base_url = t->url,
        .http = t->http == PLAN_HTTP_2 ? ENG_HTTP_2 : ENG_HTTP_1_1,
        .connections = conns > 0 ? conns : 1,
        .streams = per,
        .timeout_ms = 0, /* watches have none; relists carry their class's */
        .ca_file = t->tls.ca,
        .cert_file = t->tls.cert,
        .key_file = t->tls.key,
        .insecure = t->tls.insecure || ws->r->opts->insecure,
        .bearer_token = ws->token,
    };
    return eng_new(&ws->r->loop, &cfg, ws->r->o, &ws->eng);
}

static int phase_alloc(struct run_watches *ws, const plan_phase_t *pp, int n)
{
    ws->w = calloc((size_t)n, sizeof(*ws->w));
    ws->wcs = calloc(pp->watches.n_sets, sizeof(*ws->wcs));
    size_t logs = n * 4 < LOG_MAX ? (size_t)n * 4 : LOG_MAX;
    ws->log_end = calloc(logs, sizeof(int64_t));
    ws->log_delay = calloc(logs, sizeof(int64_t));
    ws->log_sent = calloc(logs, sizeof(int64_t));
    ws->log_attempt = calloc(logs, sizeof(int));
    ws->n_log = 0;
    ws->cap_log = logs;
    if (!ws->w || !ws->wcs || !ws->log_end || !ws->log_delay || !ws->log_sent || !ws->log_attempt)
        return SQ_ENOMEM;
    return 0;
}

int run_watches_start(runner_t *r, size_t phase)
{
    struct run_watches *ws = r->watches;
    const plan_phase_t *pp = &r->plan->phases[phase];
    int n = phase_watchers(pp);
    if (!ws || n == 0)
        return 0;
    ws->phase = phase;
    ws->base_ns = r->phases[phase].base_ns;
    int rc = phase_alloc(ws, pp, n);
    if (rc == 0)
        rc = engine_new(ws, n);
    int index = 0;
    for (size_t k = 0; rc == 0 && k < pp->watches.n_sets; k++) {
        wclass_t *wc = &ws->wcs[ws->n_wc++];
        wc->cls = pp->watches.sets[k].cls.index;
        wc->streams = pp->watches.sets[k].count;
        wc->events = cell(ws, wc->cls, "2xx"); /* a watch class's 2xx cell counts events */
        for (int j = 0; rc == 0 && j < wc->streams; j++, index++) {
            rc = watcher_init(ws, &ws->w[index], wc, index,
                              sched_seed(r->seed, (uint32_t)phase, 1000u + (uint32_t)index));
            ws->n = (size_t)index + 1;
            /* Spread: watcher i opens at i * spread / n, evenly over the window. */
            ws->w[index].due_ns =
                ws->base_ns + (int64_t)((double)pp->watches.spread_ns * index / n);
        }
    }
    ws->next_due_ns = ws->base_ns;
    ws->active = rc == 0;
    if (rc)
        out_error(r->o, "phase '%s': cannot set up its watches: %s", pp->name, sq_strerror(rc));
    return rc;
}

void run_watches_tick(runner_t *r, int64_t now_ns)
{
    struct run_watches *ws = r->watches;
    if (!ws || !ws->active || now_ns < ws->next_due_ns)
        return;
    int64_t next = INT64_MAX;
    for (size_t i = 0; i < ws->n; i++) {
        watcher_t *w = &ws->w[i];
        enum watch_state s = w->st.state;
        if (w->busy || (s != WATCH_IDLE && s != WATCH_WAITING && s != WATCH_RELISTING))
            continue;
        if (w->due_ns > now_ns) {
            next = w->due_ns < next ? w->due_ns : next;
            continue;
        }
        int rc = w->due_relist ? relist_start(ws, w, w->due_ns) : open_stream(ws, w, w->due_ns);
        if (rc == SQ_ESTOPPED)
            return;
        if (rc) {
            /* Counted as a failed attempt; the stream tries again after its backoff. */
            watch_end_t end = {.transport = true};
            next_step(ws, w, &end, now_ns);
            next = w->due_ns < next ? w->due_ns : next;
        }
    }
    ws->next_due_ns = next;
}

/* ---- the end of a phase ------------------------------------------------------------------ */

static json_t *int_array(const int64_t *v, size_t n)
{
    json_t *a = json_array();
    for (size_t i = 0; a && i < n; i++)
        json_array_append_new(a, json_integer(v[i]));
    return a;
}

/* The phase's figures per class, summed over its watchers. */
static json_t *class_json(struct run_watches *ws, const wclass_t *wc)
{
    int64_t opens = 0, drops = 0, reconnects = 0, relists = 0, too_old = 0, dup = 0, over = 0;
    for (size_t i = 0; i < ws->n; i++) {
        const watcher_t *w = &ws->w[i];
        if (w->wc != wc)
            continue;
        opens += w->st.opens;
        drops += w->st.drops;
        reconnects += w->st.reconnects;
        relists += w->st.relists;
        too_old += w->st.too_old;
        dup += w->st.duplicates;
        over += w->fr.st.oversize;
    }
    return json_pack("{s:i,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:s}", "streams",
                     wc->streams, "opens", (json_int_t)opens, "events", (json_int_t)wc->events_n,
                     "bytes", (json_int_t)wc->bytes, "drops", (json_int_t)drops, "reconnects",
                     (json_int_t)reconnects, "relists", (json_int_t)relists, "too_old",
                     (json_int_t)too_old, "duplicates", (json_int_t)dup, "oversize",
                     (json_int_t)over, "unparsed", (json_int_t)wc->unparsed, "server_errors",
                     (json_int_t)wc->server_errors, "no_stamp", (json_int_t)wc->no_stamp, "policy",
                     plan_backoff_name(ws->r->classes[wc->cls].pr->watch.policy));
}

static json_t *phase_json(struct run_watches *ws)
{
    json_t *ph = json_object();
    json_t *classes = json_object();
    for (size_t k = 0; k < ws->n_wc; k++) {
        json_t *cj = class_json(ws, &ws->wcs[k]);
        if (cj)
            json_object_set_new(classes, ws->r->classes[ws->wcs[k].cls].pr->name, cj);
    }
    json_t *attempt = json_array();
    for (size_t i = 0; attempt && i < ws->n_log; i++)
        json_array_append_new(attempt, json_integer(ws->log_attempt[i]));
    json_object_set_new(ph, "classes", classes);
    json_object_set_new(ph, "reconnect_log",
                        json_pack("{s:o,s:o,s:o,s:o,s:b}", "ended_ns",
                                  int_array(ws->log_end, ws->n_log), "delay_ns",
                                  int_array(ws->log_delay, ws->n_log), "sent_ns",
                                  int_array(ws->log_sent, ws->n_log), "attempt", attempt,
                                  "truncated", ws->n_log >= ws->cap_log));
    return ph;
}

static void phase_free(struct run_watches *ws)
{
    for (size_t i = 0; i < ws->n; i++) {
        watch_framer_close(&ws->w[i].fr);
        free(ws->w[i].path);
        free(ws->w[i].list_base);
    }
    free(ws->w);
    free(ws->wcs);
    free(ws->log_end);
    free(ws->log_delay);
    free(ws->log_sent);
    free(ws->log_attempt);
    ws->w = NULL;
    ws->wcs = NULL;
    ws->log_end = ws->log_delay = ws->log_sent = NULL;
    ws->log_attempt = NULL;
    ws->n = ws->n_wc = ws->n_log = 0;
}

void run_watches_stop(runner_t *r)
{
    struct run_watches *ws = r->watches;
    if (!ws || (!ws->active && !ws->eng))
        return;
    ws->active = false;
    for (size_t i = 0; i < ws->n; i++)
        watch_stream_set(&ws->w[i].st, WATCH_CLOSED);
    /* Every stream still open ends here as "cancelled": the phase's natural end of a watch. */
    eng_free(ws->eng);
    ws->eng = NULL;
    json_t *ph = phase_json(ws);
    if (ph)
        json_object_set_new(ws->section, r->plan->phases[ws->phase].name, ph);
    results_set_section(r->res, "watches", json_deep_copy(ws->section));
    phase_free(ws);
}

void run_watches_close(runner_t *r)
{
    struct run_watches *ws = r->watches;
    if (!ws)
        return;
    phase_free(ws);
    json_decref(ws->section);
    free(ws);
    r->watches = NULL;
}
