/* Request lifecycle of the embedded target: body collection and limits, the fault pipeline
 * (stall, in-flight limit, added latency, injected errors), admin and report routes, and each
 * request's server-side latency. The /v1/ store API is in api.c, answers and counts in reply.c. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "server_int.h"

struct srv_req {
    srv_server_t *sv;
    struct MHD_Connection *conn;
    uint64_t t0, due;
    int64_t wall0; /* CLOCK_REALTIME at receipt, for the access log */
    char method_text[16];
    int method;
    bool v1, watch, answered, admitted, delayed, stall_counted, too_large;
    srv_buf_t body;
    uv_timer_t *timer;
    srv_req_t *hprev, *hnext; /* in sv->held while suspended */
    srv_req_t *qnext;         /* in the in-flight queue */
};

static int method_index(const char *m)
{
    static const char *const names[] = {"GET", "HEAD", "PUT", "POST", "PATCH", "DELETE"};
    for (int i = 0; i < SRV_M_OTHER; i++)
        if (strcmp(m, names[i]) == 0)
            return i;
    return SRV_M_OTHER;
}

/* ---- Holding requests: suspended connections, woken by a timer or by a free slot. */

static void hold_link(srv_req_t *q)
{
    srv_server_t *sv = q->sv;
    q->hprev = NULL;
    q->hnext = sv->held;
    if (sv->held)
        sv->held->hprev = q;
    sv->held = q;
    MHD_suspend_connection(q->conn);
}

static void hold_release(srv_req_t *q)
{
    srv_server_t *sv = q->sv;
    if (q->hprev)
        q->hprev->hnext = q->hnext;
    else
        sv->held = q->hnext;
    if (q->hnext)
        q->hnext->hprev = q->hprev;
    q->hprev = q->hnext = NULL;
    MHD_resume_connection(q->conn);
    sv->kick(sv);
}

static void timer_free(uv_handle_t *h)
{
    free(h);
}

static void on_hold_timer(uv_timer_t *h)
{
    srv_req_t *q = h->data;
    uint64_t now = uv_hrtime();
    if (now < q->due) {
        /* libuv timers have millisecond resolution and may fire early: wait out the rest. */
        uv_timer_start(h, on_hold_timer, (q->due - now + 999999) / 1000000, 0);
        return;
    }
    uv_close((uv_handle_t *)h, timer_free);
    q->timer = NULL;
    hold_release(q);
}

/* Suspends q until `ns` from now. */
static enum MHD_Result hold_for(srv_req_t *q, int64_t ns)
{
    q->timer = malloc(sizeof(*q->timer));
    if (!q->timer)
        return srv_reply_error(q->sv, q->conn, q->method, 500, "no-memory", "out of memory");
    uv_timer_init(q->sv->loop, q->timer);
    q->timer->data = q;
    q->due = uv_hrtime() + (uint64_t)ns;
    uv_timer_start(q->timer, on_hold_timer, ((uint64_t)ns + 999999) / 1000000, 0);
    hold_link(q);
    return MHD_YES;
}

static void drop_timer(srv_req_t *q)
{
    if (!q->timer)
        return;
    uv_timer_stop(q->timer);
    uv_close((uv_handle_t *)q->timer, timer_free);
    q->timer = NULL;
}

void srv_http_release_all(srv_server_t *sv)
{
    while (sv->held) {
        drop_timer(sv->held);
        hold_release(sv->held);
    }
    sv->queue_head = sv->queue_tail = NULL;
}

/* Gives a freed in-flight slot to the oldest queued request. */
static void admit_next(srv_server_t *sv)
{
    srv_req_t *q = sv->queue_head;
    if (!q || sv->draining)
        return;
    sv->queue_head = q->qnext;
    if (!sv->queue_head)
        sv->queue_tail = NULL;
    q->qnext = NULL;
    q->admitted = true;
    sv->inflight++;
    hold_release(q);
}

static void slot_free(srv_req_t *q)
{
    if (!q->admitted)
        return;
    q->admitted = false;
    q->sv->inflight--;
    admit_next(q->sv);
}

/* ---- The fault pipeline for /v1/ requests; MHD_YES with nothing queued means "held". */

/* Inside a stall window: hold q until the window ends (counted once per request). */
static bool stall_hold(srv_req_t *q, enum MHD_Result *rc)
{
    srv_server_t *sv = q->sv;
    const server_faults_t *f = &sv->faults;
    if (f->stall_at_ns < 0 || f->stall_for_ns <= 0)
        return false;
    uint64_t now = uv_hrtime(), start = sv->faults_at + (uint64_t)f->stall_at_ns;
    uint64_t end = start + (uint64_t)f->stall_for_ns;
    if (now < start || now >= end)
        return false;
    if (!q->stall_counted)
        sv->fc.stalled++;
    q->stall_counted = true;
    *rc = hold_for(q, (int64_t)(end - now));
    return true;
}

/* Takes an in-flight slot, or rejects (429) or queues q when none is free. */
static bool admit_or_hold(srv_req_t *q, enum MHD_Result *rc)
{
    srv_server_t *sv = q->sv;
    const server_faults_t *f = &sv->faults;
    if (q->admitted)
        return false;
    if (f->max_inflight > 0 && sv->inflight >= f->max_inflight) {
        if (f->over_limit_reject) {
            sv->fc.rejected++;
            *rc = srv_reply_error_retry(sv, q->conn, q->method, 429, "over-limit",
                                        "too many requests in flight", f->retry_after_s);
            return true;
        }
        sv->fc.queued++;
        if (sv->queue_tail)
            sv->queue_tail->qnext = q;
        else
            sv->queue_head = q;
        sv->queue_tail = q;
        hold_link(q);
        *rc = MHD_YES;
        return true;
    }
    q->admitted = true;
    sv->inflight++;
    return false;
}

/* The order is that of a real overloaded server: a stall holds everything, then admission,
 * then the added service time, then an injected error instead of the answer. Each step runs
 * once per request even though the handler is called again after every hold. */
static enum MHD_Result faults_then_serve(srv_req_t *q, const char *url)
{
    srv_server_t *sv = q->sv;
    const server_faults_t *f = &sv->faults;
    enum MHD_Result rc;
    if (sv->draining)
        return srv_reply_error_retry(sv, q->conn, q->method, 503, "shutting-down",
                                     "the target is stopping", 1);
    if (stall_hold(q, &rc) || admit_or_hold(q, &rc))
        return rc;
    if (!q->delayed) {
        q->delayed = true;
        int64_t d = srv_fault_delay(f, &sv->rng);
        if (d > 0) {
            sv->fc.delayed++;
            sv->fc.delay_ns_total += (uint64_t)d;
            return hold_for(q, d);
        }
    }
    if (srv_fault_in_error_window(f, sv->faults_at, uv_hrtime()) ||
        (f->fail_rate > 0 && rng_unit(&sv->rng) <= f->fail_rate)) {
        sv->fc.failed++;
        return srv_reply_error_retry(sv, q->conn, q->method, (unsigned)f->fail_status, "injected",
                                     "an error injected by the target's fault settings",
                                     f->retry_after_s);
    }
    return srv_api_serve(sv, q->conn, q->method, url, q->body.p ? q->body.p : "", q->body.len,
                         &q->watch);
}

/* ---- Routes outside /v1/: reports and administration. */

static void on_drop(uv_timer_t *h)
{
    srv_server_t *sv = h->data;
    sv->fc.drops++;
    srv_stream_end_all(sv, true);
}

void srv_http_set_faults(srv_server_t *sv, const server_faults_t *f)
{
    sv->faults = *f;
    sv->faults_at = uv_hrtime();
    uv_timer_stop(&sv->drop);
    if (f->drop_at_ns >= 0)
        uv_timer_start(&sv->drop, on_drop, (uint64_t)(f->drop_at_ns / 1000000), 0);
}

/* Drops every watch stream from server.c's idle callback, soon after this request. */
static void drop_soon(srv_server_t *sv)
{
    /* Ending streams from inside one of libmicrohttpd's own callbacks left a parked stream
     * unnoticed (measured with 0.9.75); from outside MHD_run it always works. */
    sv->drop_pending = true;
    sv->kick(sv);
}

/* Applies a POSTed fault configuration; on a bad body answers 400 and returns true. */
static bool admin_faults_post(srv_req_t *q, enum MHD_Result *rc)
{
    srv_server_t *sv = q->sv;
    json_error_t je;
    char err[256];
    json_t *j = json_loadb(q->body.p ? q->body.p : "", q->body.len, 0, &je);
    server_faults_t f;
    if (!j) {
        snprintf(err, sizeof(err), "malformed JSON at line %d column %d: %s", je.line, je.column,
                 je.text);
        *rc = srv_reply_error(sv, q->conn, -1, 400, "bad-json", err);
        return true;
    }
    int bad = srv_faults_from_json(&f, j, err, sizeof(err));
    json_decref(j);
    if (bad < 0) {
        *rc = srv_reply_error(sv, q->conn, -1, 400, "bad-faults", err);
        return true;
    }
    srv_http_set_faults(sv, &f);
    out_info(sv->out, "serve: faults set through /admin/faults");
    return false;
}

static enum MHD_Result reply_json(srv_server_t *sv, struct MHD_Connection *conn, json_t *j)
{
    char *s = j ? json_dumps(j, JSON_COMPACT) : NULL;
    json_decref(j);
    if (!s)
        return srv_reply_error(sv, conn, -1, 500, "no-memory", "out of memory");
    enum MHD_Result rc = srv_reply(sv, conn, -1, 200, "application/json", s, strlen(s));
    free(s);
    return rc;
}

static enum MHD_Result route_report(srv_req_t *q, const char *url)
{
    srv_server_t *sv = q->sv;
    srv_buf_t b = {0};
    bool metrics = strcmp(url, "/metrics") == 0;
    int rc = metrics ? srv_report_metrics(sv, &b) : srv_report_stats(sv, &b);
    enum MHD_Result r = rc < 0 ? srv_reply_error(sv, q->conn, -1, 500, "no-memory", "out of memory")
                               : srv_reply(sv, q->conn, -1, 200,
                                           metrics ? "application/openmetrics-text; version=1.0.0; "
                                                     "charset=utf-8"
                                                   : "application/json",
                                           b.p, b.len);
    srv_buf_free(&b);
    return r;
}

static enum MHD_Result route_other(srv_req_t *q, const char *url)
{
    srv_server_t *sv = q->sv;
    bool get = q->method == SRV_M_GET || q->method == SRV_M_HEAD;
    bool post = q->method == SRV_M_POST || q->method == SRV_M_PUT;
    if (strcmp(url, "/stats") == 0 || strcmp(url, "/metrics") == 0)
        return get ? route_report(q, url)
                   : srv_reply_error(sv, q->conn, -1, 405, "bad-method", "use GET");
    if (strcmp(url, "/admin/faults") == 0) {
        enum MHD_Result rc;
        if (post && admin_faults_post(q, &rc))
            return rc;
        if (!get && !post)
            return srv_reply_error(sv, q->conn, -1, 405, "bad-method", "use GET or POST");
        return reply_json(sv, q->conn, srv_report_faults(sv));
    }
    if (strcmp(url, "/admin/drop-watches") == 0) {
        if (q->method != SRV_M_POST)
            return srv_reply_error(sv, q->conn, -1, 405, "bad-method", "use POST");
        sv->fc.drops++;
        drop_soon(sv);
        return reply_json(sv, q->conn, json_pack("{s:I}", "dropped", (json_int_t)sv->streams_open));
    }
    return srv_reply_error(sv, q->conn, -1, 404, "no-route",
                           "no such path: objects live under /v1/; see also /stats, /metrics, "
                           "/admin/faults, /admin/drop-watches");
}

/* ---- libmicrohttpd callbacks */

static srv_req_t *req_new(srv_server_t *sv, struct MHD_Connection *conn, const char *url,
                          const char *method)
{
    srv_req_t *q = calloc(1, sizeof(*q));
    if (!q)
        return NULL;
    q->sv = sv;
    q->conn = conn;
    q->t0 = uv_hrtime();
    q->wall0 = clock_real_ns();
    snprintf(q->method_text, sizeof q->method_text, "%s", method);
    q->method = method_index(method);
    q->v1 = strncmp(url, "/v1/", 4) == 0 || strcmp(url, "/v1") == 0;
    return q;
}

static enum MHD_Result too_large(srv_req_t *q)
{
    srv_server_t *sv = q->sv;
    char msg[96];
    sv->too_large++;
    snprintf(msg, sizeof(msg), "request body over the limit of %lld bytes", sv->opts.body_limit);
    return srv_reply_error(sv, q->conn, q->v1 ? q->method : -1, 413, "too-large", msg);
}

static enum MHD_Result other_length(void *cls, enum MHD_ValueKind kind, const char *key,
                                   const char *value)
{
    (void)kind;
    const char **first = cls;
    if (strcasecmp(key, "Content-Length") == 0 && value && strcmp(value, *first) != 0) {
        *first = NULL; /* found one that differs */
        return MHD_NO;
    }
    return MHD_YES;
}

/* Whether the request carries Content-Length headers with different values (first is one). */
static bool lengths_differ(struct MHD_Connection *conn, const char *first)
{
    MHD_get_connection_values(conn, MHD_HEADER_KIND, other_length, &first);
    return first == NULL;
}

enum MHD_Result srv_http_access(void *cls, struct MHD_Connection *conn, const char *url,
                                const char *method, const char *version, const char *upload,
                                size_t *upload_size, void **con_cls)
{
    srv_server_t *sv = cls;
    srv_req_t *q = *con_cls;
    (void)version;
    if (!q) {
        if (!(*con_cls = q = req_new(sv, conn, url, method)))
            return MHD_NO;
        const char *cl = MHD_lookup_connection_value(conn, MHD_HEADER_KIND, "Content-Length");
        if (cl && lengths_differ(conn, cl)) {
            q->answered = true;
            return srv_reply_error(sv, conn, q->method, 400, "bad-length",
                                   "two different Content-Length headers (RFC 9112, 6.3: an "
                                   "unrecoverable error)");
        }
        if (cl && strtoll(cl, NULL, 10) > sv->opts.body_limit) {
            q->answered = true;
            return too_large(q);
        }
        return MHD_YES;
    }
    if (*upload_size > 0) {
        if (!q->too_large && (long long)(q->body.len + *upload_size) > sv->opts.body_limit)
            q->too_large = true;
        if (!q->too_large && srv_buf_add(&q->body, upload, *upload_size) < 0)
            return MHD_NO;
        *upload_size = 0;
        return MHD_YES;
    }
    if (q->too_large)
        return (q->answered = true), too_large(q);
    if (!q->v1)
        return (q->answered = true), route_other(q, url);
    if (q->method == SRV_M_OTHER) {
        sv->bad_method++;
        q->answered = true;
        return srv_reply_error(sv, conn, q->method, 405, "bad-method",
                               "method not supported; allowed: GET, HEAD, PUT, POST, PATCH, "
                               "DELETE");
    }
    enum MHD_Result rc = faults_then_serve(q, url);
    q->answered = q->hprev || q->hnext || sv->held == q ? false : true;
    if (q->watch)
        slot_free(q); /* An open watch does not hold an in-flight slot. */
    return rc;
}

void srv_http_completed(void *cls, struct MHD_Connection *conn, void **con_cls,
                        enum MHD_RequestTerminationCode code)
{
    srv_server_t *sv = cls;
    srv_req_t *q = *con_cls;
    if (!q)
        return;
    if (code == MHD_REQUEST_TERMINATED_COMPLETED_OK && q->v1 && !q->watch && q->answered) {
        int64_t ns = (int64_t)(uv_hrtime() - q->t0);
        hist_record(sv->latency, ns);
        sv->latency_sum_s += (double)ns / 1e9;
    }
    if (sv->access_log)
        srv_access_write(sv, conn, q->method_text, q->wall0, (int64_t)(uv_hrtime() - q->t0));
    drop_timer(q);
    slot_free(q);
    srv_buf_free(&q->body);
    free(q);
    *con_cls = NULL;
    sv->kick(sv); /* A closing connection is only cleaned up on the next MHD_run. */
}
