/* The issuer: one request's life on the main engine. Classes are compiled once; a request is
 * rendered from its templates and handed to the engine at its intended start; a list follows
 * its continuation tokens page by page; every completion goes to the observers first, then to
 * the source that asked for it. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "squall/source.h"

#define REQ_CHUNK 1024
#define MAX_PAGES 100000

/* A request in flight (or a multi-page list); taken from a free list. */
typedef struct req {
    src_issuer_t *is;
    src_t *from;
    int cls, client, agent, pages;
    int64_t first_intended_ns; /* of page 1, for the whole-list sample */
    int64_t bytes_in, bytes_out;
    char *base_path;    /* lists: page 1's path for the following pages; writes: the object */
    const char *method; /* a replayed request's own method (NULL: the class's) */
    bool one_page;      /* a replayed list: the log holds its further pages */
    bool held;          /* issued ahead and not yet released (src_req_t.ahead) */
    struct req *next_free;
} req_t;

struct src_issuer {
    const plan_t *plan;
    obs_t *obs;
    out_t *o;
    eng_t *eng;
    tmpl_env_t *env;
    rng_t rng; /* the draws of every rendered template */
    src_class_t *classes;
    size_t n_classes;
    tmpl_buf_t path_buf, body_buf;
    req_t *free_reqs;
    void **chunks;
    size_t n_chunks;
    bool paging;
    uint64_t seq_step; /* {{seq}} advances by the shard count (1 for the whole run) */
};

/* ---- classes ------------------------------------------------------------------------------ */

/* A plan variable that is an integer range renders as a uniform pick in it. */
static int range_resolve(void *user, const char *arg, size_t arg_len, const tmpl_ctx_t *ctx,
                         char *dst, size_t cap, size_t *len)
{
    (void)arg;
    (void)arg_len;
    const plan_var_t *v = user;
    int64_t x = v->from + (int64_t)rng_below(ctx->rng, (uint64_t)(v->to - v->from) + 1);
    int n = snprintf(dst, cap, "%lld", (long long)x);
    *len = (size_t)n;
    return 0;
}

static int env_init(src_issuer_t *is)
{
    int rc = tmpl_env_new(&is->env);
    for (size_t i = 0; rc == 0 && i < is->plan->n_vars; i++) {
        const plan_var_t *v = &is->plan->vars[i];
        if (v->is_range)
            rc = tmpl_env_add_resolver(is->env, v->name, range_resolve, (void *)v);
        else
            rc = tmpl_env_add_list(is->env, v->name, v->values, v->n_values);
    }
    return rc ? rc : ledger_prepare(obs_ledger(is->obs), is->env);
}

/* Compiles one template, reporting a problem at the plan position of its text. */
static int compile_at(src_issuer_t *is, const char *text, plan_pos_t pos, const char *what,
                      tmpl_t **out)
{
    tmpl_error_t err;
    int rc = tmpl_compile(is->env, text, out, &err);
    if (rc == SQ_EPARSE)
        out_raw(is->o, OUT_ERROR, "%s:%d:%d: error: %s template: %s (at byte %zu of \"%s\")",
                pos.file, pos.line, pos.col, what, err.msg, err.offset, text);
    return rc;
}

static int class_init(src_issuer_t *is, src_class_t *c, const plan_req_t *pr)
{
    c->pr = pr;
    int rc = compile_at(is, pr->path, pr->path_pos, "path", &c->path);
    if (rc == 0 && pr->kind == PLAN_WRITE && pr->write.body)
        rc = compile_at(is, pr->write.body, pr->write.body_pos, "body", &c->body);
    if (rc == 0)
        rc = src_headers_new(pr->headers, pr->n_headers, &c->headers, &c->n_headers);
    if (rc)
        return rc;
    c->timeout_ms = pr->timeout_ns / 1000000;
    c->paginate = pr->kind == PLAN_LIST && pr->list.token_key && pr->list.token_key[0];
    return 0;
}

int src_issuer_new(const plan_t *plan, uint64_t seed, obs_t *obs, out_t *o, src_issuer_t **out)
{
    src_issuer_t *is = calloc(1, sizeof(*is));
    *out = is;
    if (!is)
        return SQ_ENOMEM;
    *is = (src_issuer_t){.plan = plan, .obs = obs, .o = o, .paging = true, .seq_step = 1};
    rng_seed(&is->rng, seed);
    tmpl_buf_init(&is->path_buf);
    tmpl_buf_init(&is->body_buf);
    int rc = env_init(is);
    is->n_classes = plan->n_reqs;
    if (rc == 0 && !(is->classes = calloc(plan->n_reqs ? plan->n_reqs : 1, sizeof(src_class_t))))
        rc = SQ_ENOMEM;
    int bad = 0;
    for (size_t i = 0; rc == 0 && i < plan->n_reqs; i++) {
        int e = class_init(is, &is->classes[i], &plan->reqs[i]);
        if (e == SQ_ENOMEM)
            rc = e;
        bad |= e != 0;
    }
    return rc ? rc : bad ? SQ_EPARSE : 0;
}

void src_issuer_shard(src_issuer_t *is, sched_shard_t sh)
{
    bool split = sched_shard_split(sh);
    is->seq_step = split ? (uint64_t)sh.count : 1;
    for (size_t i = 0; i < is->n_classes; i++)
        is->classes[i].seq = split ? (uint64_t)(sh.index - 1) : 0;
}

void src_issuer_free(src_issuer_t *is)
{
    if (!is)
        return;
    for (size_t i = 0; is->classes && i < is->n_classes; i++) {
        src_class_t *c = &is->classes[i];
        tmpl_free(c->path);
        tmpl_free(c->body);
        src_headers_free(c->headers, c->n_headers);
    }
    free(is->classes);
    for (size_t i = 0; i < is->n_chunks; i++)
        free(is->chunks[i]);
    free(is->chunks);
    tmpl_buf_close(&is->path_buf);
    tmpl_buf_close(&is->body_buf);
    tmpl_env_free(is->env);
    free(is);
}

void src_issuer_attach(src_issuer_t *is, eng_t *eng)
{
    is->eng = eng;
}

void src_issuer_paging(src_issuer_t *is, bool on)
{
    is->paging = on;
}

const src_class_t *src_class(const src_issuer_t *is, int cls)
{
    return &is->classes[cls];
}

int src_render_path(src_issuer_t *is, int cls, const tmpl_ctx_t *ctx, tmpl_buf_t *buf)
{
    return tmpl_render(is->classes[cls].path, ctx, buf);
}

/* ---- request contexts --------------------------------------------------------------------- */

/* Contexts come from a free list that grows by chunks, so the hot path allocates only when
 * more requests are in flight than ever before. */
static req_t *req_take(src_issuer_t *is)
{
    if (!is->free_reqs) {
        void **chunks = realloc(is->chunks, (is->n_chunks + 1) * sizeof(*chunks));
        if (!chunks)
            return NULL;
        is->chunks = chunks;
        req_t *block = calloc(REQ_CHUNK, sizeof(*block));
        if (!block)
            return NULL;
        is->chunks[is->n_chunks++] = block;
        for (int i = 0; i < REQ_CHUNK; i++) {
            block[i].next_free = is->free_reqs;
            is->free_reqs = &block[i];
        }
    }
    req_t *q = is->free_reqs;
    is->free_reqs = q->next_free;
    memset(q, 0, sizeof(*q));
    return q;
}

static void req_give(src_issuer_t *is, req_t *q)
{
    free(q->base_path);
    q->base_path = NULL;
    q->next_free = is->free_reqs;
    is->free_reqs = q;
}

/* ---- sending ------------------------------------------------------------------------------ */

size_t src_url_escape(const char *s, char *dst, size_t cap)
{
    static const char hex[] = "0123456789ABCDEF";
    size_t n = 0;
    for (; *s; s++) {
        unsigned char ch = (unsigned char)*s;
        bool keep = (ch >= 'A' && ch <= 'Z') || (ch >= 'a' && ch <= 'z') ||
                    (ch >= '0' && ch <= '9') || strchr("-._~", ch);
        if (n + 4 > cap)
            return 0;
        if (keep) {
            dst[n++] = (char)ch;
        } else {
            dst[n++] = '%';
            dst[n++] = hex[ch >> 4];
            dst[n++] = hex[ch & 15];
        }
    }
    dst[n] = '\0';
    return n;
}

/* The object a write names: its rendered path without a query. */
static const char *object_path(const req_t *q, char *buf, size_t cap)
{
    if (!q->base_path || q->is->classes[q->cls].pr->kind != PLAN_WRITE)
        return NULL;
    size_t n = strcspn(q->base_path, "?");
    n = n < cap ? n : cap - 1;
    memcpy(buf, q->base_path, n);
    buf[n] = '\0';
    return buf;
}

static void on_done(void *user, const eng_result_t *res);

/* The observers see a request start (held ones: when released). */
static void started(req_t *q)
{
    char obj[4096];
    obs_sent_t s = {.phase = q->from->phase,
                    .cls = q->cls,
                    .path = object_path(q, obj, sizeof obj),
                    .page = q->pages > 0};
    obs_sent(q->is->obs, &s);
}

static void on_release(void *user)
{
    req_t *q = user;
    q->held = false;
    started(q);
}

static int submit(src_issuer_t *is, req_t *q, const char *path, int64_t intended, bool hold)
{
    const src_class_t *c = &is->classes[q->cls];
    eng_req_t er = {
        .method = q->method                   ? q->method
                  : c->pr->kind == PLAN_WRITE ? c->pr->write.method
                                              : "GET",
        .path = path,
        .headers = c->headers,
        .n_headers = c->n_headers,
        .timeout_ms = c->timeout_ms,
        .intended_ns = intended,
        .hold_until_ns = hold ? intended : 0,
        .on_release = hold ? on_release : NULL,
        .keep_body = c->paginate || c->pr->write.creates, /* tokens; a create's version */
        .on_done = on_done,
        .user = q,
    };
    if (c->body && q->pages == 0) {
        er.body = is->body_buf.data;
        er.body_len = is->body_buf.len;
    }
    int rc = eng_submit(is->eng, &er);
    if (rc == 0 && hold)
        q->held = true;
    else if (rc == 0)
        started(q);
    return rc;
}

/* The continuation token in a list page, or NULL when this was the last page. */
static const char *page_token(const src_class_t *c, const eng_result_t *res, json_t **doc)
{
    *doc = json_loadb(res->body ? res->body : "", res->body_len, 0, NULL);
    json_t *tok = json_is_object(*doc) ? json_object_get(*doc, c->pr->list.token_key) : NULL;
    const char *s = json_is_string(tok) ? json_string_value(tok) : NULL;
    return s && s[0] ? s : NULL;
}

/* Follows a list's continuation token: the next page starts now and is its own sample. */
static bool next_page(src_issuer_t *is, req_t *q, const eng_result_t *res)
{
    const src_class_t *c = &is->classes[q->cls];
    json_t *doc = NULL;
    const char *tok = page_token(c, res, &doc);
    bool sent = false;
    char esc[1024], path[4096];
    if (tok && q->pages < MAX_PAGES && is->paging && src_url_escape(tok, esc, sizeof esc)) {
        const char *sep = strchr(q->base_path, '?') ? "&" : "?";
        int n;
        if (c->pr->list.page > 0)
            n = snprintf(path, sizeof path, "%s%s%s=%d&%s=%s", q->base_path, sep,
                         c->pr->list.limit_param, c->pr->list.page, c->pr->list.token_param, esc);
        else
            n = snprintf(path, sizeof path, "%s%s%s=%s", q->base_path, sep, c->pr->list.token_param,
                         esc);
        if (n > 0 && (size_t)n < sizeof path)
            sent = submit(is, q, path, (int64_t)uv_hrtime(), false) == 0;
    }
    json_decref(doc);
    return sent;
}

static void on_done(void *user, const eng_result_t *res)
{
    req_t *q = user;
    src_issuer_t *is = q->is;
    if (q->held) { /* cancelled before its instant: never started */
        req_give(is, q);
        return;
    }
    char obj[4096];
    obs_done_t d = {
        .phase = q->from->phase,
        .cls = q->cls,
        .first = q->pages == 0,
        .agent = q->agent,
        .source = q->from->ops->name,
        .path = object_path(q, obj, sizeof obj),
        .intended_ns = q->pages == 0 ? q->first_intended_ns : res->submitted_ns,
        .bytes_in = res->bytes_in,
        .bytes_out = res->bytes_out,
        .res = res,
    };
    obs_done(is->obs, &d);
    q->pages++;
    q->bytes_in += res->bytes_in;
    q->bytes_out += res->bytes_out;
    if (is->classes[q->cls].paginate && !q->one_page) {
        if (res->outcome == ENG_OUT_S2XX && next_page(is, q, res))
            return;
        d.whole = true;
        d.first = false;
        d.intended_ns = q->first_intended_ns;
        d.bytes_in = q->bytes_in;
        d.bytes_out = q->bytes_out;
        obs_done(is->obs, &d);
    }
    if (q->from->ops->done)
        q->from->ops->done(q->from->self, &(src_done_t){q->cls, q->client, q->agent, res});
    req_give(is, q);
}

/* The first page's path: the rendered path, with the page size when the class pages. */
static const char *first_path(const src_class_t *c, const char *path, char *buf, size_t cap)
{
    if (c->pr->kind != PLAN_LIST || c->pr->list.page <= 0)
        return path;
    const char *sep = strchr(path, '?') ? "&" : "?";
    int n = snprintf(buf, cap, "%s%s%s=%d", path, sep, c->pr->list.limit_param, c->pr->list.page);
    return n > 0 && (size_t)n < cap ? buf : NULL;
}

/* A request context for `req` of `from`, submitted at path; `base` (copied, may be NULL) is
 * what a list's later pages or a write's object are built from; `method` overrides the class's
 * (a replayed request, sent as one page). */
static int send_new(src_issuer_t *is, src_t *from, const src_req_t *req, const char *path,
                    const char *base, const char *method)
{
    req_t *q = req_take(is);
    if (!q)
        return SQ_ENOMEM;
    *q = (req_t){.is = is,
                 .from = from,
                 .cls = req->cls,
                 .client = req->client,
                 .agent = req->agent,
                 .first_intended_ns = req->intended_ns,
                 .method = method,
                 .one_page = method != NULL};
    if (base && !(q->base_path = strdup(base))) {
        req_give(is, q);
        return SQ_ENOMEM;
    }
    int rc = submit(is, q, path, req->intended_ns, req->ahead);
    if (rc)
        req_give(is, q);
    return rc;
}

/* Renders the class's templates for one request: the path (unless path is false) and the body
 * of a write. */
static int render(src_issuer_t *is, src_t *from, const src_req_t *req, bool path)
{
    src_class_t *c = &is->classes[req->cls];
    tmpl_ctx_t ctx = {
        .agent = req->agent,
        .seq = c->seq,
        .phase = from->phase < is->plan->n_phases ? is->plan->phases[from->phase].name : "teardown",
        .rng = &is->rng,
    };
    c->seq += is->seq_step;
    if (req->ahead) /* {{now_ns}} reads as at the intended instant */
        ctx.now_ns = clock_real_ns() + (req->intended_ns - clock_mono_ns());
    int rc = path ? tmpl_render(c->path, &ctx, &is->path_buf) : 0;
    if (rc == 0 && c->body)
        rc = tmpl_render(c->body, &ctx, &is->body_buf);
    return rc;
}

int src_issue(src_issuer_t *is, src_t *from, const src_req_t *req)
{
    src_class_t *c = &is->classes[req->cls];
    if (!ledger_ready(obs_ledger(is->obs), req->cls))
        return 0; /* a {{pick}} pool is empty: nothing to send */
    int rc = render(is, from, req, true);
    if (rc)
        return rc;
    char paged[4096];
    const char *path = first_path(c, is->path_buf.data, paged, sizeof paged);
    if (!path)
        return SQ_ELIMIT;
    bool track = c->paginate || c->pr->kind == PLAN_WRITE;
    return send_new(is, from, req, path, track ? is->path_buf.data : NULL, NULL);
}

int src_issue_as(src_issuer_t *is, src_t *from, const src_req_t *req, const char *method,
                 const char *path)
{
    src_class_t *c = &is->classes[req->cls];
    if (c->pr->kind == PLAN_WRITE && !c->body)
        return SQ_EINVAL;
    int rc = render(is, from, req, false);
    return rc ? rc : send_new(is, from, req, path, c->pr->kind == PLAN_WRITE ? path : NULL, method);
}

int src_release(src_issuer_t *is, int64_t now_ns)
{
    return is && is->eng ? eng_release(is->eng, now_ns) : 0;
}

bool src_held_next(const src_issuer_t *is, int64_t *at_ns)
{
    return is && eng_held_next(is->eng, at_ns);
}
