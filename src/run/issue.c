/* One request's life in a run: classes compiled once, a request rendered from its templates and
 * handed to the engine at its intended start, its completion recorded, list pages followed. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "run_int.h"
#include "squall/err.h"

#define REQ_CHUNK 1024

bool run_is_error(enum eng_outcome oc)
{
    return oc != ENG_OUT_S2XX && oc != ENG_OUT_S3XX && oc != ENG_OUT_CANCELLED;
}

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

static int env_init(runner_t *r)
{
    int rc = tmpl_env_new(&r->env);
    for (size_t i = 0; rc == 0 && i < r->plan->n_vars; i++) {
        const plan_var_t *v = &r->plan->vars[i];
        if (v->is_range)
            rc = tmpl_env_add_resolver(r->env, v->name, range_resolve, (void *)v);
        else
            rc = tmpl_env_add_list(r->env, v->name, v->values, v->n_values);
    }
    return rc;
}

/* Compiles one template, reporting a problem at the plan position of its text. */
static int compile_at(runner_t *r, const char *text, plan_pos_t pos, const char *what, tmpl_t **out)
{
    tmpl_error_t err;
    int rc = tmpl_compile(r->env, text, out, &err);
    if (rc == SQ_EPARSE)
        out_raw(r->o, OUT_ERROR, "%s:%d:%d: error: %s template: %s (at byte %zu of \"%s\")",
                pos.file, pos.line, pos.col, what, err.msg, err.offset, text);
    return rc;
}

static int class_init(runner_t *r, run_class_t *c, const plan_req_t *pr)
{
    const plan_target_t *t = &r->plan->target;
    c->pr = pr;
    int rc = compile_at(r, pr->path, pr->path_pos, "path", &c->path);
    if (rc == 0 && pr->kind == PLAN_WRITE && pr->write.body)
        rc = compile_at(r, pr->write.body, pr->write.body_pos, "body", &c->body);
    if (rc)
        return rc;
    size_t n = t->n_headers + pr->n_headers;
    c->headers = calloc(n ? n : 1, sizeof(*c->headers));
    if (!c->headers)
        return SQ_ENOMEM;
    for (size_t i = 0; i < n; i++) {
        const plan_kv_t *kv = i < t->n_headers ? &t->headers[i] : &pr->headers[i - t->n_headers];
        size_t len = strlen(kv->name) + strlen(kv->value) + 3;
        char *h = malloc(len);
        if (!h)
            return SQ_ENOMEM;
        snprintf(h, len, "%s: %s", kv->name, kv->value);
        c->headers[c->n_headers++] = h;
    }
    c->timeout_ms = pr->timeout_ns / 1000000;
    c->paginate = pr->kind == PLAN_LIST && pr->list.token_key && pr->list.token_key[0];
    size_t an = strlen(pr->name) + sizeof("/all-pages");
    c->all_name = malloc(an);
    if (!c->all_name)
        return SQ_ENOMEM;
    snprintf(c->all_name, an, "%s/all-pages", pr->name);
    return 0;
}

int run_classes_init(runner_t *r)
{
    int rc = env_init(r);
    if (rc == 0)
        rc = run_life_init(r); /* life: the pick resolver, before any template compiles */
    if (rc)
        return rc;
    r->n_classes = r->plan->n_reqs;
    r->classes = calloc(r->n_classes ? r->n_classes : 1, sizeof(*r->classes));
    if (!r->classes)
        return SQ_ENOMEM;
    int bad = 0;
    for (size_t i = 0; i < r->n_classes; i++) {
        rc = class_init(r, &r->classes[i], &r->plan->reqs[i]);
        if (rc == SQ_ENOMEM)
            return rc;
        bad |= rc != 0;
    }
    tmpl_buf_init(&r->path_buf);
    tmpl_buf_init(&r->body_buf);
    return bad ? SQ_EPARSE : 0;
}

void run_classes_close(runner_t *r)
{
    for (size_t i = 0; r->classes && i < r->n_classes; i++) {
        run_class_t *c = &r->classes[i];
        tmpl_free(c->path);
        tmpl_free(c->body);
        for (size_t k = 0; k < c->n_headers; k++)
            free((char *)c->headers[k]);
        free(c->headers);
        free(c->all_name);
    }
    free(r->classes);
    r->classes = NULL;
    tmpl_buf_close(&r->path_buf);
    tmpl_buf_close(&r->body_buf);
    tmpl_env_free(r->env);
    r->env = NULL;
}

/* Request contexts come from a free list that grows by chunks, so the hot path allocates only
 * when more requests are in flight than ever before. */
static run_req_t *req_take(runner_t *r)
{
    if (!r->free_reqs) {
        void **chunks = realloc(r->req_chunks, (r->n_req_chunks + 1) * sizeof(*chunks));
        if (!chunks)
            return NULL;
        r->req_chunks = chunks;
        run_req_t *block = calloc(REQ_CHUNK, sizeof(*block));
        if (!block)
            return NULL;
        r->req_chunks[r->n_req_chunks++] = block;
        for (int i = 0; i < REQ_CHUNK; i++) {
            block[i].next_free = r->free_reqs;
            r->free_reqs = &block[i];
        }
    }
    run_req_t *q = r->free_reqs;
    r->free_reqs = q->next_free;
    memset(q, 0, sizeof(*q));
    return q;
}

static void req_give(runner_t *r, run_req_t *q)
{
    free(q->base_path);
    q->base_path = NULL;
    q->next_free = r->free_reqs;
    r->free_reqs = q;
}

void run_reqs_close(runner_t *r)
{
    for (size_t i = 0; i < r->n_req_chunks; i++)
        free(r->req_chunks[i]);
    free(r->req_chunks);
    r->req_chunks = NULL;
    r->n_req_chunks = 0;
    r->free_reqs = NULL;
}

/* The cell of (phase, class or its whole-list twin, outcome), looked up once per run. */
static results_cell_t *cell_for(runner_t *r, int phase, int cls, bool whole, enum eng_outcome oc)
{
    size_t slot = ((size_t)phase * 2 * r->n_classes + 2 * (size_t)cls + whole) * ENG_OUT_COUNT + oc;
    if (!r->cells[slot]) {
        const run_class_t *c = &r->classes[cls];
        r->cells[slot] = results_cell(r->res, r->plan->phases[phase].name,
                                      whole ? c->all_name : c->pr->name, eng_outcome_name(oc));
    }
    return r->cells[slot];
}

static void hist_add(results_cell_t *cell, enum results_metric m, int64_t v)
{
    hist_t *h = results_cell_hist(cell, m);
    if (h)
        hist_record(h, v);
}

/* Records one page (or one single request) into its cell. */
static void record(runner_t *r, const run_req_t *q, const eng_result_t *res, int64_t intended)
{
    results_cell_t *cell = cell_for(r, q->phase, q->cls, false, res->outcome);
    if (!cell)
        return;
    results_counters_t *k = results_cell_counters(cell);
    k->count++;
    k->bytes_in += res->bytes_in;
    k->bytes_out += res->bytes_out;
    hist_add(cell, RESULTS_M_RESPONSE, res->done_ns - intended);
    if (res->sent_ns) {
        hist_add(cell, RESULTS_M_SERVICE, res->done_ns - res->sent_ns);
        hist_add(cell, RESULTS_M_LAG, res->sent_ns - intended);
    }
    if (res->connect_us > 0)
        hist_add(cell, RESULTS_M_CONNECT, res->connect_us * 1000);
    if (res->appconnect_us > 0)
        hist_add(cell, RESULTS_M_TLS, (res->appconnect_us - res->connect_us) * 1000);
    if (res->starttransfer_us > 0)
        hist_add(cell, RESULTS_M_FIRST_BYTE, res->starttransfer_us * 1000);
    if (res->status > 0)
        r->last_response_ns = res->done_ns;
    if (q->pages == 0 && res->submitted_ns) {
        hist_record(r->sched_lag, res->submitted_ns - intended);
        hist_record(r->sec_sched_lag, res->submitted_ns - intended);
    }
    run_sec_record(r, q->cls, res);
    run_storm_done(r, q->phase, q->cls, intended, res); /* watch: storm reporting */
}

static void record_whole(runner_t *r, const run_req_t *q, const eng_result_t *last)
{
    results_cell_t *cell = cell_for(r, q->phase, q->cls, true, last->outcome);
    if (!cell)
        return;
    results_counters_t *k = results_cell_counters(cell);
    k->count++;
    k->bytes_in += q->bytes_in;
    k->bytes_out += q->bytes_out;
    hist_add(cell, RESULTS_M_RESPONSE, last->done_ns - q->first_intended_ns);
}

size_t run_url_escape(const char *s, char *dst, size_t cap)
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

/* The continuation token in a list page, or NULL when this was the last page. */
static const char *page_token(const run_class_t *c, const eng_result_t *res, json_t **doc)
{
    *doc = json_loadb(res->body ? res->body : "", res->body_len, 0, NULL);
    json_t *tok = json_is_object(*doc) ? json_object_get(*doc, c->pr->list.token_key) : NULL;
    const char *s = json_is_string(tok) ? json_string_value(tok) : NULL;
    return s && s[0] ? s : NULL;
}

static void on_done(void *user, const eng_result_t *res);

static int submit(runner_t *r, run_req_t *q, const char *path, int64_t intended)
{
    const run_class_t *c = &r->classes[q->cls];
    eng_req_t er = {
        .method = c->pr->kind == PLAN_WRITE ? c->pr->write.method : "GET",
        .path = path,
        .headers = c->headers,
        .n_headers = c->n_headers,
        .timeout_ms = c->timeout_ms,
        .intended_ns = intended,
        .keep_body = c->paginate || c->pr->write.creates, /* life: a create's version */
        .on_done = on_done,
        .user = q,
    };
    if (c->body) {
        er.body = r->body_buf.data;
        er.body_len = r->body_buf.len;
    }
    int rc = eng_submit(r->eng, &er);
    if (rc == 0)
        if (r->in_flight++ == 0)
            r->busy_since_ns = (int64_t)uv_hrtime();
    return rc;
}

/* Follows a list's continuation token: the next page starts now and is its own sample. */
static bool next_page(runner_t *r, run_req_t *q, const eng_result_t *res)
{
    const run_class_t *c = &r->classes[q->cls];
    json_t *doc = NULL;
    const char *tok = page_token(c, res, &doc);
    bool sent = false;
    if (tok && q->pages < 100000 && r->state == RUN_ACTIVE) {
        char esc[1024], path[4096];
        if (run_url_escape(tok, esc, sizeof esc)) {
            const char *sep = strchr(q->base_path, '?') ? "&" : "?";
            int n;
            if (c->pr->list.page > 0)
                n = snprintf(path, sizeof path, "%s%s%s=%d&%s=%s", q->base_path, sep,
                             c->pr->list.limit_param, c->pr->list.page, c->pr->list.token_param,
                             esc);
            else
                n = snprintf(path, sizeof path, "%s%s%s=%s", q->base_path, sep,
                             c->pr->list.token_param, esc);
            if (n > 0 && (size_t)n < sizeof path)
                sent = submit(r, q, path, (int64_t)uv_hrtime()) == 0;
        }
    }
    json_decref(doc);
    return sent;
}

static void on_done(void *user, const eng_result_t *res)
{
    run_req_t *q = user;
    runner_t *r = q->r;
    r->in_flight--;
    record(r, q, res, q->pages == 0 ? q->first_intended_ns : res->submitted_ns);
    q->pages++;
    q->bytes_in += res->bytes_in;
    q->bytes_out += res->bytes_out;
    run_life_done(r, q, res); /* life: pools and journal */
    const run_class_t *c = &r->classes[q->cls];
    if (c->paginate) {
        if (res->outcome == ENG_OUT_S2XX && next_page(r, q, res))
            return;
        record_whole(r, q, res);
    }
    if (q->client >= 0) {
        run_phase_t *ph = &r->phases[q->phase];
        int64_t next;
        bool again = sched_closed_complete(ph->closed, q->client, res->done_ns - ph->base_ns,
                                           &next);
        /* A client with no think time starts again now, not at the next 1 ms wake-up. */
        if (again && r->state == RUN_ACTIVE && (size_t)q->phase == r->cur &&
            ph->base_ns + next <= res->done_ns && run_closed_due(r, res->done_ns))
            run_request_stop(r, RUN_STOP_SIGNAL, "the generator could not issue a request");
    }
    req_give(r, q);
}

int run_issue(runner_t *r, int phase, int cls, int64_t intended_ns, int agent, int client)
{
    run_class_t *c = &r->classes[cls];
    if (run_life_skip(r, cls))
        return 0; /* life: a {{pick}} pool is empty, nothing to send */
    tmpl_ctx_t ctx = {
        .agent = agent,
        .seq = c->seq++,
        .phase = r->plan->phases[phase].name,
        .rng = &r->rng,
    };
    int rc = tmpl_render(c->path, &ctx, &r->path_buf);
    if (rc == 0 && c->body)
        rc = tmpl_render(c->body, &ctx, &r->body_buf);
    if (rc)
        return rc;
    const char *path = r->path_buf.data;
    char paged[4096];
    if (c->pr->kind == PLAN_LIST && c->pr->list.page > 0) {
        const char *sep = strchr(path, '?') ? "&" : "?";
        int n = snprintf(paged, sizeof paged, "%s%s%s=%d", path, sep, c->pr->list.limit_param,
                         c->pr->list.page);
        if (n < 0 || (size_t)n >= sizeof paged)
            return SQ_ELIMIT;
        path = paged;
    }
    run_req_t *q = req_take(r);
    if (!q)
        return SQ_ENOMEM;
    q->r = r;
    q->phase = phase;
    q->cls = cls;
    q->client = client;
    q->first_intended_ns = intended_ns;
    bool track = c->paginate || c->pr->write.creates || c->pr->write.deletes; /* life */
    if (track && !(q->base_path = strdup(r->path_buf.data))) {
        req_give(r, q);
        return SQ_ENOMEM;
    }
    run_life_sending(r, cls, r->path_buf.data); /* life: a create's journal line goes first */
    rc = submit(r, q, path, intended_ns);
    if (rc) {
        req_give(r, q);
        return rc;
    }
    r->phases[phase].started++;
    r->total_started++;
    r->sec_started++;
    r->sec[cls].started++;
    return 0;
}
