/* One transfer: copying a request into pooled buffers, setting up a reused easy handle for it,
 * and reading back its timings, bytes and outcome. */
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "eng_int.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/value.h"

/* A pooled transfer keeps a response buffer up to this size (buf_append's first capacity). A
 * larger one (a list page) is freed when the transfer ends: kept, it ratcheted up the pool as
 * list pages landed on ever more of its hundreds of pooled transfers, and `squall run`'s RSS
 * grew for the whole soak (tools/bench/RESULTS.md, "Soak"). */
#define RESP_KEEP 4096u

static const char *const outcome_names[] = {
#define ENG_OUTCOME_NAME(name, text) text,
    ENG_OUTCOME_MAP(ENG_OUTCOME_NAME)
#undef ENG_OUTCOME_NAME
};

const char *eng_outcome_name(enum eng_outcome o)
{
    if ((int)o < 0 || o >= ENG_OUT_COUNT)
        return "unknown";
    return outcome_names[o];
}

enum eng_outcome eng_outcome_of(CURLcode rc, long status)
{
    switch (rc) {
    case CURLE_OK:
        if (status >= 500)
            return ENG_OUT_S5XX;
        if (status >= 400)
            return ENG_OUT_S4XX;
        if (status >= 300)
            return ENG_OUT_S3XX;
        return status >= 200 ? ENG_OUT_S2XX : ENG_OUT_OTHER;
    case CURLE_OPERATION_TIMEDOUT:
        return ENG_OUT_TIMEOUT;
    case CURLE_COULDNT_CONNECT:
        return ENG_OUT_REFUSED;
    case CURLE_COULDNT_RESOLVE_HOST:
    case CURLE_COULDNT_RESOLVE_PROXY:
        return ENG_OUT_RESOLVE;
    case CURLE_SSL_CONNECT_ERROR:
    case CURLE_PEER_FAILED_VERIFICATION:
    case CURLE_SSL_CERTPROBLEM:
    case CURLE_SSL_CIPHER:
    case CURLE_SSL_CACERT_BADFILE:
    case CURLE_SSL_ISSUER_ERROR:
    case CURLE_SSL_PINNEDPUBKEYNOTMATCH:
    case CURLE_SSL_INVALIDCERTSTATUS:
    case CURLE_SSL_CLIENTCERT:
    case CURLE_SSL_ENGINE_NOTFOUND:
    case CURLE_SSL_ENGINE_SETFAILED:
    case CURLE_SSL_ENGINE_INITFAILED:
    case CURLE_SSL_CRL_BADFILE:
    case CURLE_SSL_SHUTDOWN_FAILED:
    case CURLE_USE_SSL_FAILED:
        return ENG_OUT_TLS;
    case CURLE_RECV_ERROR:
    case CURLE_SEND_ERROR:
    case CURLE_GOT_NOTHING:
    case CURLE_PARTIAL_FILE:
    case CURLE_HTTP2:
    case CURLE_HTTP2_STREAM:
        return ENG_OUT_RESET;
    default:
        return ENG_OUT_OTHER;
    }
}

static int buf_set(struct eng_buf *b, const char *a, size_t alen, const char *c, size_t clen)
{
    size_t need = alen + clen + 1;
    if (need > b->cap) {
        char *n = realloc(b->data, need);
        if (!n)
            return SQ_ENOMEM;
        b->data = n;
        b->cap = need;
    }
    memcpy(b->data, a, alen);
    if (clen)
        memcpy(b->data + alen, c, clen);
    b->len = alen + clen;
    b->data[b->len] = '\0';
    return 0;
}

/* Grows by doubling, never past `max` bytes of capacity (max >= len + n + 1). */
static int buf_append(struct eng_buf *b, const char *d, size_t n, size_t max)
{
    if (b->len + n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : RESP_KEEP;
        while (cap < b->len + n + 1)
            cap *= 2;
        cap = cap < max ? cap : max;
        char *nd = realloc(b->data, cap);
        if (!nd)
            return SQ_ENOMEM;
        b->data = nd;
        b->cap = cap;
    }
    memcpy(b->data + b->len, d, n);
    b->len += n;
    b->data[b->len] = '\0';
    return 0;
}

static struct curl_slist *headers_build(const eng_t *e, const char *const *h, size_t n)
{
    struct curl_slist *l = NULL, *t;
    for (size_t i = 0; i < n; i++) {
        if (!(t = curl_slist_append(l, h[i])))
            goto fail;
        l = t;
    }
    for (const struct curl_slist *c = e->headers; c; c = c->next) {
        if (!(t = curl_slist_append(l, c->data)))
            goto fail;
        l = t;
    }
    return l;
fail:
    curl_slist_free_all(l);
    return NULL;
}

/* Copies a request into the transfer so the caller's memory may go away after eng_submit. */
int eng_xfer_prepare(struct eng_xfer *x, const eng_req_t *req)
{
    eng_t *e = x->eng;
    const char *m = req->method ? req->method : "GET";
    /* The origin was checked once (eng_new); what follows it must be a path, never text that
     * libcurl could read as another host ("@10.0.0.1/x") or a header line (CR, LF). A fragment
     * is never sent (RFC 3986, 3.5): it is cut off first. */
    size_t plen = strcspn(req->path, "#");
    if (buf_set(&x->url, req->path, plen, NULL, 0))
        return SQ_ENOMEM;
    if (value_path_problem(x->url.data))
        return SQ_EINVAL;
    if (buf_set(&x->url, e->base_url, strlen(e->base_url), req->path, plen) ||
        buf_set(&x->method, m, strlen(m), NULL, 0) ||
        buf_set(&x->body, req->body ? req->body : "", req->body ? req->body_len : 0, NULL, 0))
        return SQ_ENOMEM;
    x->req = *req;
    x->req.method = x->method.data;
    x->req.path = NULL;
    x->req.body = req->body ? x->body.data : NULL;
    x->req.headers = NULL;
    x->headers = NULL;
    if (req->n_headers && !(x->headers = headers_build(e, req->headers, req->n_headers)))
        return SQ_ENOMEM;
    memset(&x->res, 0, sizeof(x->res));
    x->res.intended_ns = req->intended_ns;
    x->resp.len = 0;
    x->opener = x->was_opener = x->aborted = x->cancelled = x->too_big = x->head_seen = false;
    x->set_up = false;
    return 0;
}

static size_t on_write(char *data, size_t size, size_t n, void *userp)
{
    struct eng_xfer *x = userp;
    size_t len = size * n;
    x->res.bytes_in_body += (int64_t)len;
    if (x->req.on_data && x->req.on_data(x->req.user, data, len)) {
        x->aborted = true;
        return 0;
    }
    if (x->req.keep_body && x->resp.len + len > (size_t)x->eng->cfg.max_body) {
        x->too_big = true; /* a hostile or broken target must not take all our memory */
        return 0;
    }
    if (x->req.keep_body && buf_append(&x->resp, data, len, (size_t)x->eng->cfg.max_body + 1))
        return 0;
    return len;
}

/* A Date header line: narrows the clock offset's bounds (engine.h, eng_clock_t). */
static void clock_sample(eng_t *e, const struct eng_xfer *x, const char *data, size_t len)
{
    char v[64];
    size_t skip = 5;
    while (skip < len && (data[skip] == ' ' || data[skip] == '\t'))
        skip++;
    size_t n = len - skip;
    while (n && (data[skip + n - 1] == '\r' || data[skip + n - 1] == '\n'))
        n--;
    if (n == 0 || n >= sizeof v || !x->res.sent_ns)
        return;
    memcpy(v, data + skip, n);
    v[n] = '\0';
    time_t d = curl_getdate(v, NULL); /* RFC 9110's three date forms, whole seconds */
    if (d < 0)
        return;
    int64_t mono = (int64_t)uv_hrtime(), real = clock_real_ns();
    int64_t sent = real - (mono - x->res.sent_ns), date = (int64_t)d * 1000000000;
    int64_t lo = sent - date - 1000000000, hi = real - date;
    eng_clock_t *c = &e->clock;
    if (c->samples == 0 || lo > c->lo_ns)
        c->lo_ns = lo;
    if (c->samples == 0 || hi < c->hi_ns)
        c->hi_ns = hi;
    c->samples++;
}

void eng_clock(const eng_t *e, eng_clock_t *out)
{
    *out = e->clock;
}

/* Header lines, one per call; the empty line ends a block. Only the final answer's block counts
 * (an interim 1xx has its own). */
static size_t on_header(char *data, size_t size, size_t n, void *userp)
{
    struct eng_xfer *x = userp;
    size_t len = size * n;
    if (len > 5 && x->eng->clock.samples < ENG_CLOCK_SAMPLES && !strncasecmp(data, "Date:", 5))
        clock_sample(x->eng, x, data, len);
    if (x->req.on_head && !x->head_seen && (len == 2 || len == 1) && (data[0] == '\r' || data[0] == '\n')) {
        long status = 0;
        curl_easy_getinfo(x->easy, CURLINFO_RESPONSE_CODE, &status);
        if (status >= 200) {
            x->head_seen = true;
            x->req.on_head(x->req.user, status);
        }
    }
    return len;
}

static int on_prereq(void *clientp, char *conn_primary_ip, char *conn_local_ip, int pport,
                     int lport)
{
    (void)conn_primary_ip;
    (void)conn_local_ip;
    (void)pport;
    (void)lport;
    struct eng_xfer *x = clientp;
    x->res.sent_ns = (int64_t)uv_hrtime();
    return CURL_PREREQFUNC_OK;
}

/* The options every transfer shares; set once per pooled easy handle. */
CURL *eng_easy_new(eng_t *e)
{
    CURL *c = curl_easy_init();
    if (!c)
        return NULL;
    curl_easy_setopt(c, CURLOPT_NOSIGNAL, 1L);
    curl_easy_setopt(c, CURLOPT_TCP_NODELAY, 1L);
    curl_easy_setopt(c, CURLOPT_WRITEFUNCTION, on_write);
    curl_easy_setopt(c, CURLOPT_PREREQFUNCTION, on_prereq);
    curl_easy_setopt(c, CURLOPT_HEADERFUNCTION, on_header);
    curl_easy_setopt(c, CURLOPT_OPENSOCKETFUNCTION, eng_glue_opensocket);
    curl_easy_setopt(c, CURLOPT_CLOSESOCKETFUNCTION, eng_glue_closesocket);
    curl_easy_setopt(c, CURLOPT_CLOSESOCKETDATA, e);
    curl_easy_setopt(c, CURLOPT_PROTOCOLS_STR, "http,https");
    /* No proxy: without this libcurl reads the *_proxy environment variables on every transfer
     * (getenv per transfer, ~2 % of the instructions per request under callgrind), and a stray
     * proxy variable must never re-route load meant for the plan's target. */
    curl_easy_setopt(c, CURLOPT_PROXY, "");
    if (e->cfg.recv_buffer)
        curl_easy_setopt(c, CURLOPT_BUFFERSIZE, e->cfg.recv_buffer);
    if (e->ca_file)
        curl_easy_setopt(c, CURLOPT_CAINFO, e->ca_file);
    if (e->cert_file)
        curl_easy_setopt(c, CURLOPT_SSLCERT, e->cert_file);
    if (e->key_file)
        curl_easy_setopt(c, CURLOPT_SSLKEY, e->key_file);
    if (e->cfg.insecure) {
        curl_easy_setopt(c, CURLOPT_SSL_VERIFYPEER, 0L);
        curl_easy_setopt(c, CURLOPT_SSL_VERIFYHOST, 0L);
    }
    return c;
}

static void set_method(struct eng_xfer *x)
{
    CURL *c = x->easy;
    const char *m = x->req.method;
    bool has_body = x->req.body != NULL;
    /* HEAD is answered without a body: libcurl must not wait for one (CURLOPT_NOBODY). */
    curl_easy_setopt(c, CURLOPT_NOBODY, (long)(!has_body && strcmp(m, "HEAD") == 0));
    if (!has_body && strcmp(m, "HEAD") == 0) {
        curl_easy_setopt(c, CURLOPT_CUSTOMREQUEST, NULL);
        return;
    }
    if (!has_body && strcmp(m, "GET") == 0) {
        curl_easy_setopt(c, CURLOPT_HTTPGET, 1L);
        curl_easy_setopt(c, CURLOPT_CUSTOMREQUEST, NULL);
        return;
    }
    if (has_body || strcmp(m, "POST") == 0) {
        curl_easy_setopt(c, CURLOPT_POSTFIELDSIZE_LARGE, (curl_off_t)x->body.len);
        curl_easy_setopt(c, CURLOPT_POSTFIELDS, x->body.data);
    } else {
        curl_easy_setopt(c, CURLOPT_HTTPGET, 1L);
    }
    curl_easy_setopt(c, CURLOPT_CUSTOMREQUEST, strcmp(m, "POST") == 0 ? NULL : m);
}

/* The per-request options of a reused easy handle. For h2c the opener opens a fresh connection
 * with prior knowledge and every other transfer asks for 2.0 and waits to multiplex: prior
 * knowledge on a reused connection fails in 7.88.1 (curl issue #10634). */
/* Hands libcurl the URL as a parsed handle: the transfer's own CURLU keeps the base URL parsed
 * once and gets only its path and query per request, so a request's path is never parsed as a
 * URL (eng_xfer_prepare checked it is a path). With CURLOPT_URL libcurl 7.88.1 would also parse
 * and print back the whole URL for every transfer (~10 % of the instructions per request under
 * callgrind). A path libcurl refuses fails the transfer (no URL: CURLE_URL_MALFORMAT). */
static void set_url(struct eng_xfer *x)
{
    eng_t *e = x->eng;
    char *path = x->url.data + e->origin_len;
    char *query = strchr(path, '?');
    if (!x->uh && (x->uh = curl_url()) &&
        curl_url_set(x->uh, CURLUPART_URL, e->base_url, 0) != CURLUE_OK) {
        curl_url_cleanup(x->uh);
        x->uh = NULL;
    }
    if (x->uh) {
        if (query)
            *query = '\0';
        CURLUcode uc = curl_url_set(x->uh, CURLUPART_PATH, path[0] ? path : "/", 0);
        if (query)
            *query = '?';
        if (uc == CURLUE_OK)
            uc = curl_url_set(x->uh, CURLUPART_QUERY, query ? query + 1 : NULL, 0);
        if (uc == CURLUE_OK) {
            curl_easy_setopt(x->easy, CURLOPT_CURLU, x->uh);
            return;
        }
    }
    curl_easy_setopt(x->easy, CURLOPT_CURLU, NULL);
    curl_easy_setopt(x->easy, CURLOPT_URL, NULL);
}

int eng_xfer_setup(struct eng_xfer *x)
{
    eng_t *e = x->eng;
    CURL *c = x->easy;
    set_url(x);
    curl_easy_setopt(c, CURLOPT_PRIVATE, x);
    curl_easy_setopt(c, CURLOPT_WRITEDATA, x);
    curl_easy_setopt(c, CURLOPT_HEADERDATA, x);
    x->errbuf[0] = '\0';
    curl_easy_setopt(c, CURLOPT_ERRORBUFFER, x->errbuf);
    curl_easy_setopt(c, CURLOPT_PREREQDATA, x);
    curl_easy_setopt(c, CURLOPT_OPENSOCKETDATA, x);
    curl_easy_setopt(c, CURLOPT_HTTPHEADER, x->headers ? x->headers : e->headers);
    int64_t t = x->req.timeout_ms ? x->req.timeout_ms : e->cfg.timeout_ms;
    curl_easy_setopt(c, CURLOPT_TIMEOUT_MS, (long)(t > 0 ? t : 0));
    set_method(x);
    eng_xfer_set_version(x);
    return 0;
}

void eng_xfer_set_version(struct eng_xfer *x)
{
    eng_t *e = x->eng;
    CURL *c = x->easy;
    if (e->cfg.http == ENG_HTTP_1_1) {
        curl_easy_setopt(c, CURLOPT_HTTP_VERSION, (long)CURL_HTTP_VERSION_1_1);
    } else if (e->h2c && x->opener) {
        curl_easy_setopt(c, CURLOPT_HTTP_VERSION, (long)CURL_HTTP_VERSION_2_PRIOR_KNOWLEDGE);
        curl_easy_setopt(c, CURLOPT_FRESH_CONNECT, 1L);
        curl_easy_setopt(c, CURLOPT_PIPEWAIT, 0L);
    } else {
        curl_easy_setopt(c, CURLOPT_HTTP_VERSION, (long)CURL_HTTP_VERSION_2_0);
        curl_easy_setopt(c, CURLOPT_FRESH_CONNECT, 0L);
        curl_easy_setopt(c, CURLOPT_PIPEWAIT, 1L);
    }
}

/* Reads libcurl's view of a finished transfer into x->res. */
void eng_xfer_finish(struct eng_xfer *x, CURLcode rc)
{
    eng_result_t *r = &x->res;
    CURL *c = x->easy;
    curl_off_t v = 0;
    long l = 0;
    r->done_ns = (int64_t)uv_hrtime();
    r->curl_code = (int)rc;
    if (c) {
        curl_easy_getinfo(c, CURLINFO_RESPONSE_CODE, &r->status);
        if (curl_easy_getinfo(c, CURLINFO_CONNECT_TIME_T, &v) == CURLE_OK)
            r->connect_us = v;
        if (curl_easy_getinfo(c, CURLINFO_APPCONNECT_TIME_T, &v) == CURLE_OK)
            r->appconnect_us = v;
        if (curl_easy_getinfo(c, CURLINFO_STARTTRANSFER_TIME_T, &v) == CURLE_OK)
            r->starttransfer_us = v;
        if (curl_easy_getinfo(c, CURLINFO_TOTAL_TIME_T, &v) == CURLE_OK)
            r->total_us = v;
        if (curl_easy_getinfo(c, CURLINFO_HEADER_SIZE, &l) == CURLE_OK)
            r->bytes_in = l + r->bytes_in_body;
        if (curl_easy_getinfo(c, CURLINFO_REQUEST_SIZE, &l) == CURLE_OK)
            r->bytes_out = l;
        if ((r->status == 429 || r->status == 503) &&
            curl_easy_getinfo(c, CURLINFO_RETRY_AFTER, &v) == CURLE_OK && v > 0)
            r->retry_after_s = v; /* life: teardown retries wait this long */
    }
    if (x->too_big)
        r->outcome = ENG_OUT_BODY;
    else if (x->aborted || x->cancelled)
        r->outcome = ENG_OUT_CANCELLED;
    else
        r->outcome = eng_outcome_of(rc, r->status);
    /* libcurl falls back to HTTP/1.1 (with "Upgrade: h2c" on http://) when a transfer must open
     * a connection the server will not speak HTTP/2 on; such an answer is not a success. */
    if (c && r->status > 0 && x->eng->cfg.http == ENG_HTTP_2 &&
        curl_easy_getinfo(c, CURLINFO_HTTP_VERSION, &l) == CURLE_OK && l != CURL_HTTP_VERSION_2_0)
        r->outcome = ENG_OUT_VERSION;
    if (x->req.keep_body) {
        r->body = x->resp.data ? x->resp.data : "";
        r->body_len = x->resp.len;
        char *ct = NULL;
        if (c && curl_easy_getinfo(c, CURLINFO_CONTENT_TYPE, &ct) == CURLE_OK)
            r->content_type = ct; /* owned by the easy handle, alive through on_done */
    }
    if (c) /* the pooled handle outlives this transfer: it must not keep pointing at its buffer */
        curl_easy_setopt(c, CURLOPT_ERRORBUFFER, NULL);
}

/* Frees a transfer's per-request list; its buffers stay for the next request. */
void eng_xfer_release(struct eng_xfer *x)
{
    curl_slist_free_all(x->headers);
    x->headers = NULL;
    if (x->resp.cap > RESP_KEEP) {
        free(x->resp.data);
        x->resp.data = NULL;
        x->resp.cap = x->resp.len = 0;
    }
}
