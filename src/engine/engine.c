/* The engine's lifecycle and its admission queue: requests wait here, never inside libcurl, and
 * are handed to it only while it has a free connection (or HTTP/2 stream) for them. */
#include <signal.h>
#include <stdlib.h>
#include <string.h>

#include "eng_int.h"
#include "squall/clock.h"
#include "squall/err.h"

static char *dup_or_null(const char *s)
{
    return s ? strdup(s) : NULL;
}

static int check_config(const eng_config_t *c, out_t *o)
{
    if (!c->base_url ||
        (strncmp(c->base_url, "http://", 7) != 0 && strncmp(c->base_url, "https://", 8) != 0)) {
        out_error(o, "engine: base URL must start with http:// or https://");
        return SQ_EINVAL;
    }
    if (c->connections < 1 || c->connections > 100000 || c->streams < 0 || c->streams > 10000 ||
        c->timeout_ms < 0 || c->unreachable_after < 0) {
        out_error(o, "engine: connections must be 1..100000 and streams 0..10000");
        return SQ_EINVAL;
    }
    if ((c->cert_file == NULL) != (c->key_file == NULL)) {
        out_error(o, "engine: a client certificate needs its key, and a key its certificate");
        return SQ_EINVAL;
    }
    return 0;
}

static int headers_init(eng_t *e)
{
    struct curl_slist *t;
    for (size_t i = 0; i < e->cfg.n_headers; i++) {
        if (!(t = curl_slist_append(e->headers, e->cfg.headers[i])))
            return SQ_ENOMEM;
        e->headers = t;
    }
    if (e->cfg.bearer_token) {
        size_t n = strlen(e->cfg.bearer_token) + sizeof("Authorization: Bearer ");
        char *h = malloc(n);
        if (!h)
            return SQ_ENOMEM;
        snprintf(h, n, "Authorization: Bearer %s", e->cfg.bearer_token);
        t = curl_slist_append(e->headers, h);
        /* The token leaves our memory only in the request itself. */
        memset(h, 0, n);
        free(h);
        if (!t)
            return SQ_ENOMEM;
        e->headers = t;
    }
    e->cfg.headers = NULL;
    e->cfg.n_headers = 0;
    e->cfg.bearer_token = NULL;
    return 0;
}

static void eng_release_memory(eng_t *e)
{
    for (int i = 0; i < e->n_easy_pool; i++)
        curl_easy_cleanup(e->easy_pool[i]);
    free(e->easy_pool);
    while (e->free_xfers) {
        struct eng_xfer *x = e->free_xfers;
        e->free_xfers = x->next;
        free(x->url.data);
        free(x->method.data);
        free(x->body.data);
        free(x->resp.data);
        curl_url_cleanup(x->uh);
        free(x);
    }
    curl_slist_free_all(e->headers);
    free(e->multis);
    free(e->dirty);
    free(e->socks);
    free(e->base_url);
    free(e->ca_file);
    free(e->cert_file);
    free(e->key_file);
    free(e);
    curl_global_cleanup();
}

static void handle_closed(uv_handle_t *h)
{
    eng_t *e = h->data;
    if (--e->open_handles == 0)
        eng_release_memory(e);
}

static void admit(eng_t *e);
static void finish(eng_t *e, struct eng_xfer *x, CURLcode rc);
static CURL *easy_get(eng_t *e);
static void easy_put(eng_t *e, CURL *c);

/* How the glue (curl_uv.c, below this file) reports back without calling into it. */
static const eng_glue_ops_t glue_ops = {
    .done = finish,
    .after_action = admit,
    .closed = handle_closed,
};

int eng_new(uv_loop_t *loop, const eng_config_t *cfg, out_t *o, eng_t **out)
{
    int rc = check_config(cfg, o);
    if (rc)
        return rc;
    if (curl_global_init(CURL_GLOBAL_DEFAULT) != CURLE_OK)
        return SQ_ELIBCURL;
    /* libcurl runs with NOSIGNAL=1, so a peer closing mid-write must not kill the process. */
    signal(SIGPIPE, SIG_IGN);
    eng_t *e = calloc(1, sizeof(*e));
    if (!e) {
        curl_global_cleanup();
        return SQ_ENOMEM;
    }
    e->loop = loop;
    e->out = o;
    e->cfg = *cfg;
    e->streams = cfg->streams ? cfg->streams : 100;
    e->conns = cfg->connections;
    e->h2c = cfg->http == ENG_HTTP_2 && strncmp(cfg->base_url, "http://", 7) == 0;
    if (!e->cfg.unreachable_after)
        e->cfg.unreachable_after = 3;
    if (!e->cfg.max_body)
        e->cfg.max_body = INT64_C(16) << 20;
    e->base_url = strdup(cfg->base_url);
    e->ca_file = dup_or_null(cfg->ca_file);
    e->cert_file = dup_or_null(cfg->cert_file);
    e->key_file = dup_or_null(cfg->key_file);
    rc = SQ_ENOMEM;
    if (!e->base_url || (cfg->ca_file && !e->ca_file) || (cfg->cert_file && !e->cert_file) ||
        (cfg->key_file && !e->key_file))
        goto fail;
    const char *authority = strstr(e->base_url, "://") + 3;
    e->origin_len = (size_t)(authority - e->base_url) + strcspn(authority, "/?#");
    /* The copy must not point at the caller's strings. */
    e->cfg.base_url = e->base_url;
    e->cfg.ca_file = e->ca_file;
    e->cfg.cert_file = e->cert_file;
    e->cfg.key_file = e->key_file;
    if ((rc = headers_init(e)))
        goto fail;
    if ((rc = eng_glue_start(e, &glue_ops)))
        goto fail;
    e->window_start_ns = clock_mono_ns();
    *out = e;
    return 0;
fail:
    eng_release_memory(e);
    return rc;
}

static struct eng_xfer *xfer_get(eng_t *e)
{
    struct eng_xfer *x = e->free_xfers;
    if (x) {
        e->free_xfers = x->next;
    } else if ((x = calloc(1, sizeof(*x)))) {
        x->eng = e;
    }
    return x;
}

static void xfer_put(eng_t *e, struct eng_xfer *x)
{
    eng_xfer_release(x);
    x->prev = NULL;
    x->next = e->free_xfers;
    e->free_xfers = x;
}

/* Appends a transfer to the admission queue. */
static void enqueue(eng_t *e, struct eng_xfer *x)
{
    x->next = NULL;
    if (e->queue_tail)
        e->queue_tail->next = x;
    else
        e->queue_head = x;
    e->queue_tail = x;
    if (++e->queued > e->max_queued)
        e->max_queued = e->queued;
}

/* Sets a held transfer's easy handle up now (all but what depends on its admission: whether an
 * h2c transfer opens a connection) and keeps it in hold order; the tail is the usual place. */
static int hold(eng_t *e, struct eng_xfer *x)
{
    if ((x->easy = easy_get(e))) {
        eng_xfer_setup(x);
        x->set_up = true;
    }
    struct eng_xfer *after = e->held_tail;
    while (after && after->req.hold_until_ns > x->req.hold_until_ns)
        after = after->prev;
    x->prev = after;
    x->next = after ? after->next : e->held_head;
    if (x->next)
        x->next->prev = x;
    else
        e->held_tail = x;
    if (after)
        after->next = x;
    else
        e->held_head = x;
    e->held++;
    e->submitted++;
    return 0;
}

static struct eng_xfer *held_pop(eng_t *e)
{
    struct eng_xfer *x = e->held_head;
    e->held_head = x->next;
    if (e->held_head)
        e->held_head->prev = NULL;
    else
        e->held_tail = NULL;
    x->next = x->prev = NULL;
    e->held--;
    return x;
}

bool eng_held_next(const eng_t *e, int64_t *at_ns)
{
    if (!e || !e->held_head)
        return false;
    *at_ns = e->held_head->req.hold_until_ns;
    return true;
}

int eng_release(eng_t *e, int64_t now_ns)
{
    int n = 0;
    bool write = !e->in_curl && !e->closing;
    int64_t start = clock_mono_ns();
    /* One multi handle's share at a time, written before the next is handed over: the tick's
     * first requests leave while the rest are still held, and a queue wait counts only the
     * time a request waited for a connection, not for its neighbours' writes. */
    while (e->held_head && e->held_head->req.hold_until_ns <= now_ns) {
        int64_t now = clock_mono_ns();
        for (int k = 0; k < ENG_MULTI_CONNS && e->held_head &&
                        e->held_head->req.hold_until_ns <= now_ns;
             k++, n++) {
            struct eng_xfer *x = held_pop(e);
            x->res.submitted_ns = start; /* handed over at its instant (schedule lag) */
            x->queued_ns = now;          /* waits for a connection from here */
            enqueue(e, x);
            if (x->req.on_release)
                x->req.on_release(x->req.user);
        }
        if (write) {
            admit(e);
            eng_glue_flush(e);
        }
    }
    return n;
}

int eng_submit(eng_t *e, const eng_req_t *req)
{
    if (!req || !req->on_done || !req->path)
        return SQ_EINVAL;
    if (e->stopped)
        return SQ_ESTOPPED;
    struct eng_xfer *x = xfer_get(e);
    if (!x)
        return SQ_ENOMEM;
    int rc = eng_xfer_prepare(x, req);
    if (rc) {
        xfer_put(e, x);
        return rc;
    }
    x->res.submitted_ns = clock_mono_ns();
    if (!x->res.intended_ns)
        x->res.intended_ns = x->res.submitted_ns;
    if (req->hold_until_ns > 0)
        return hold(e, x);
    x->queued_ns = x->res.submitted_ns;
    enqueue(e, x);
    e->submitted++;
    /* Admitting may not run inside a libcurl callback; the glue admits after it returns. */
    if (!e->in_curl)
        admit(e);
    return 0;
}

static int capacity(const eng_t *e)
{
    if (e->cfg.http == ENG_HTTP_1_1)
        return e->conns;
    if (!e->h2c)
        return e->conns * e->streams;
    int conns = e->n_socks + e->openers_pending;
    return (conns < e->conns ? conns + 1 : conns) * e->streams;
}

void eng_set_connections(eng_t *e, int n)
{
    e->conns = n < 1 ? 1 : n > e->cfg.connections ? e->cfg.connections : n;
    admit(e);
}

/* Whether the next h2c transfer must open a connection: fewer are open (or opening) than the
 * cap. Only openers may open one, so later transfers always find an h2 connection to share. */
static bool needs_opener(const eng_t *e)
{
    return e->h2c && e->n_socks + e->openers_pending < e->conns;
}

static CURL *easy_get(eng_t *e)
{
    if (e->n_easy_pool)
        return e->easy_pool[--e->n_easy_pool];
    return eng_easy_new(e);
}

static void easy_put(eng_t *e, CURL *c)
{
    if (e->n_easy_pool == e->easy_pool_cap) {
        int cap = e->easy_pool_cap ? e->easy_pool_cap * 2 : 64;
        CURL **n = realloc(e->easy_pool, (size_t)cap * sizeof(*n));
        if (!n) {
            curl_easy_cleanup(c);
            return;
        }
        e->easy_pool = n;
        e->easy_pool_cap = cap;
    }
    e->easy_pool[e->n_easy_pool++] = c;
}

static void flight_link(eng_t *e, struct eng_xfer *x)
{
    x->prev = NULL;
    x->next = e->flight;
    if (e->flight)
        e->flight->prev = x;
    e->flight = x;
    if (++e->in_flight > e->max_in_flight)
        e->max_in_flight = e->in_flight;
}

static void flight_unlink(eng_t *e, struct eng_xfer *x)
{
    if (x->prev)
        x->prev->next = x->next;
    else
        e->flight = x->next;
    if (x->next)
        x->next->prev = x->prev;
    x->next = x->prev = NULL;
    e->in_flight--;
}

/* A multi handle with room for one more transfer, looking round-robin from the last one used so
 * that connections are spread (and kept warm) over all of them. */
static struct eng_multi *multi_with_room(eng_t *e)
{
    for (int k = 0; k < e->n_multis; k++) {
        int i = (e->next_multi + k) % e->n_multis;
        if (e->multis[i].in_flight < e->multis[i].cap) {
            e->next_multi = (i + 1) % e->n_multis;
            return &e->multis[i];
        }
    }
    return NULL;
}

/* Hands one queued transfer to libcurl; false when it cannot (no easy handle, no room). */
static bool admit_one(eng_t *e)
{
    struct eng_xfer *x = e->queue_head;
    struct eng_multi *mh = multi_with_room(e);
    if (!mh || (!x->easy && !(x->easy = easy_get(e))))
        return false;
    x->mh = mh;
    e->queue_head = x->next;
    if (!e->queue_head)
        e->queue_tail = NULL;
    e->queued--;
    x->opener = x->was_opener = needs_opener(e);
    if (x->opener)
        e->openers_pending++;
    if (!x->set_up)
        eng_xfer_setup(x);
    else if (x->opener)
        eng_xfer_set_version(x);
    x->res.admitted_ns = clock_mono_ns();
    int64_t wait = x->res.admitted_ns - x->queued_ns;
    if (wait > e->max_queue_wait_ns)
        e->max_queue_wait_ns = wait;
    flight_link(e, x);
    mh->in_flight++;
    eng_glue_added(mh);
    if (curl_multi_add_handle(mh->m, x->easy) != CURLM_OK) {
        /* Finish it through the normal path so on_done still runs exactly once (finish unlinks
         * it from the in-flight list, once). */
        finish(e, x, CURLE_FAILED_INIT);
    }
    return true;
}

static void admit(eng_t *e)
{
    if (e->in_curl || e->closing)
        return;
    while (e->queue_head && e->in_flight < capacity(e))
        if (!admit_one(e))
            break;
}

void eng_flush(eng_t *e)
{
    if (e)
        eng_glue_flush(e);
}

static void set_unreachable(eng_t *e, const char *why)
{
    if (e->unreachable)
        return;
    e->unreachable = true;
    e->unreachable_why = why;
    if (e->cfg.on_unreachable)
        e->cfg.on_unreachable(e->cfg.user);
}

/* HTTP/2 asked for: an HTTP/1.x answer means the target cannot serve the plan as written; so
 * do openers that keep failing before any HTTP/2 answer (a server without cleartext HTTP/2
 * answers the prior-knowledge preface with an HTTP/1.1 error and closes). */
static void check_h2(eng_t *e, const struct eng_xfer *x)
{
    const eng_result_t *r = &x->res;
    if (r->outcome == ENG_OUT_VERSION) {
        set_unreachable(e, "answers HTTP/2 requests over HTTP/1.x (it does not speak HTTP/2 "
                           "here; use http: \"1.1\" or a target that does)");
    } else if (r->status > 0) {
        e->h2_seen = true;
    } else if (x->was_opener && !e->h2_seen && r->outcome == ENG_OUT_RESET &&
               ++e->h2_opener_fails >= e->cfg.unreachable_after) {
        set_unreachable(e, "closes new connections on the HTTP/2 preface (it does not speak "
                           "cleartext HTTP/2 with prior knowledge; use http: \"1.1\")");
    }
}

/* The server's certificate could not be verified: no later request can succeed, so the target is
 * unusable at once, named with libcurl's own reason ("SSL certificate problem: ..."). */
static void check_tls(eng_t *e, const struct eng_xfer *x)
{
    int rc = x->res.curl_code;
    if (rc != CURLE_PEER_FAILED_VERIFICATION && rc != CURLE_SSL_CACERT_BADFILE &&
        rc != CURLE_SSL_ISSUER_ERROR && rc != CURLE_SSL_PINNEDPUBKEYNOTMATCH)
        return;
    snprintf(e->tls_why, sizeof e->tls_why,
             "fails TLS verification: its certificate could not be verified (%s)",
             x->errbuf[0] ? x->errbuf : curl_easy_strerror((CURLcode)rc));
    set_unreachable(e, e->tls_why);
}

static void count_outcome(eng_t *e, const struct eng_xfer *x)
{
    const eng_result_t *r = &x->res;
    e->completed++;
    e->by_outcome[r->outcome]++;
    if (r->outcome == ENG_OUT_TLS)
        check_tls(e, x);
    if (e->cfg.http == ENG_HTTP_2)
        check_h2(e, x);
    if (r->status > 0) {
        e->unreachable_streak = 0;
    } else if (r->outcome == ENG_OUT_REFUSED || r->outcome == ENG_OUT_RESOLVE) {
        if (++e->unreachable_streak >= e->cfg.unreachable_after)
            set_unreachable(e, r->outcome == ENG_OUT_REFUSED ? ENG_WHY_REFUSED : ENG_WHY_RESOLVE);
    }
}

/* Finishes an in-flight transfer that is no longer in libcurl: result, pools, callback. */
static void finish(eng_t *e, struct eng_xfer *x, CURLcode rc)
{
    flight_unlink(e, x);
    if (x->mh) {
        x->mh->in_flight--;
        x->mh = NULL;
    }
    if (x->opener) {
        x->opener = false;
        e->openers_pending--;
    }
    eng_xfer_finish(x, rc);
    easy_put(e, x->easy);
    x->easy = NULL;
    count_outcome(e, x);
    x->req.on_done(x->req.user, &x->res);
    xfer_put(e, x);
}

/* Finishes a transfer that never reached libcurl (held or queued) as cancelled. */
static void cancel_waiting(eng_t *e, struct eng_xfer *x)
{
    x->cancelled = true;
    eng_xfer_finish(x, CURLE_ABORTED_BY_CALLBACK);
    if (x->easy) /* set up while it was held */
        easy_put(e, x->easy);
    x->easy = NULL;
    count_outcome(e, x);
    x->req.on_done(x->req.user, &x->res);
    xfer_put(e, x);
}

static void cancel_queued(eng_t *e)
{
    while (e->held_head)
        cancel_waiting(e, held_pop(e));
    while (e->queue_head) {
        struct eng_xfer *x = e->queue_head;
        e->queue_head = x->next;
        e->queued--;
        cancel_waiting(e, x);
    }
    e->queue_tail = NULL;
}

static void cancel_all(eng_t *e)
{
    cancel_queued(e);
    while (e->flight) {
        struct eng_xfer *x = e->flight;
        x->cancelled = true;
        curl_multi_remove_handle(x->mh->m, x->easy);
        finish(e, x, CURLE_ABORTED_BY_CALLBACK);
    }
}

static void on_grace(uv_timer_t *t)
{
    cancel_all(t->data);
}

void eng_stop(eng_t *e, int64_t grace_ms)
{
    e->stopped = true;
    cancel_queued(e);
    if (grace_ms == 0)
        cancel_all(e);
    else if (grace_ms > 0 && e->in_flight)
        uv_timer_start(&e->grace, on_grace, (uint64_t)grace_ms, 0);
}

void eng_stats(eng_t *e, eng_stats_t *st, bool reset_window)
{
    int64_t now = clock_mono_ns();
    memset(st, 0, sizeof(*st));
    st->in_flight = e->in_flight;
    st->queued = e->queued;
    st->capacity = capacity(e);
    st->connections = e->n_socks;
    st->max_in_flight = e->max_in_flight;
    st->max_queued = e->max_queued;
    st->max_queue_wait_ns = e->max_queue_wait_ns;
    st->max_loop_busy_ns = e->max_busy_ns;
    st->loop_busy_ns = e->busy_ns;
    st->window_ns = now - e->window_start_ns;
    st->submitted = e->submitted;
    st->completed = e->completed;
    memcpy(st->by_outcome, e->by_outcome, sizeof(st->by_outcome));
    st->unreachable = e->unreachable;
    st->why = e->unreachable_why;
    if (reset_window) {
        e->window_start_ns = now;
        e->max_queue_wait_ns = e->max_busy_ns = e->busy_ns = 0;
        e->max_in_flight = e->in_flight;
        e->max_queued = e->queued;
    }
}

void eng_free(eng_t *e)
{
    if (!e)
        return;
    e->stopped = true;
    cancel_all(e);
    e->closing = true;
    uv_timer_stop(&e->grace);
    eng_glue_close(e);
}
