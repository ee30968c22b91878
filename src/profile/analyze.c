/* The three passes of squall profile over a log: shapes, then classes and keys, then fleet
 * phases and the open-loop counts; see include/squall/profile.h. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "prof_int.h"
#include "squall/err.h"
#include "squall/rng.h"

#define NS INT64_C(1000000000)

void prof_config_init(prof_config_t *c)
{
    memset(c, 0, sizeof *c);
    alog_config_init(&c->log);
    c->target_url = "http://127.0.0.1:7070";
    c->phase_name = "recorded";
    c->watch_param = "watch";
    c->bin_ns = 10 * NS;
    c->tolerance = 0.10;
    c->alpha = 0.001;
    c->min_agents = 3;
}


static int cmp_i64(const void *a, const void *b)
{
    int64_t x = *(const int64_t *)a, y = *(const int64_t *)b;
    return (x > y) - (x < y);
}

int64_t prof_class_quantile(const prof_class_t *c, double q)
{
    if (c->n_res == 0)
        return -1;
    int64_t v[PROF_RESERVOIR];
    memcpy(v, c->res, c->n_res * sizeof v[0]);
    qsort(v, c->n_res, sizeof v[0], cmp_i64);
    size_t i = (size_t)(q * (double)(c->n_res - 1) + 0.5);
    return v[i];
}

/* ---- one request: its class ------------------------------------------------------------ */

static bool is_watch(const prof_t *p, const char *q)
{
    return alog_query_marks(q, p->cfg.watch_param);
}

/* GET and HEAD read, POST / PUT / PATCH / DELETE write; anything else: -1 (left out). */
static int kind_of(const prof_t *p, const alog_record_t *rec, uint32_t node, enum plan_kind *k)
{
    const char *m = rec->method, *q = strchr(rec->path, '?');
    if (strcmp(m, "GET") == 0 || strcmp(m, "HEAD") == 0) {
        const char *v;
        size_t n;
        if (is_watch(p, q ? q + 1 : NULL))
            *k = PLAN_WATCH;
        else if ((q && (alog_query_param(q + 1, "limit", &v, &n) ||
                        alog_query_param(q + 1, "continue", &v, &n))) ||
                 prof_trie_collection(&p->trie, node))
            *k = PLAN_LIST;
        else
            *k = PLAN_GET;
        return 0;
    }
    if (strcmp(m, "POST") == 0 || strcmp(m, "PUT") == 0 || strcmp(m, "PATCH") == 0 ||
        strcmp(m, "DELETE") == 0) {
        *k = PLAN_WRITE;
        return 0;
    }
    return -1;
}

static prof_class_t *class_of(prof_t *p, uint32_t node, const char *method, enum plan_kind k)
{
    if (k != PLAN_WRITE)
        method = "GET";
    for (uint32_t i = p->trie.nodes[node].cls; i != PROF_NONE; i = p->cls[i].next_at_node)
        if (p->cls[i].kind == k && strcmp(p->cls[i].method, method) == 0)
            return &p->cls[i];
    if (p->n_cls >= PLAN_MAX_REQS)
        return NULL;
    if (p->n_cls == p->cap_cls) {
        size_t cap = p->cap_cls ? 2 * p->cap_cls : 16;
        prof_class_t *g = realloc(p->cls, cap * sizeof *g);
        if (!g)
            return NULL;
        p->cls = g;
        p->cap_cls = cap;
    }
    prof_class_t *c = &p->cls[p->n_cls];
    memset(c, 0, sizeof *c);
    c->node = node;
    c->kind = k;
    snprintf(c->method, sizeof c->method, "%s", method);
    c->next_at_node = p->trie.nodes[node].cls;
    p->trie.nodes[node].cls = (uint32_t)p->n_cls++;
    return c;
}

/* The class of a record, or NULL (counted as left out). */
static prof_class_t *classify(prof_t *p, const alog_record_t *rec, bool count)
{
    uint32_t node = prof_trie_match(&p->trie, rec->path);
    enum plan_kind k;
    if (node == PROF_NONE) {
        p->no_shape += count;
        return NULL;
    }
    if (kind_of(p, rec, node, &k)) {
        if (count && p->no_method++ == 0)
            snprintf(p->no_method_names, sizeof p->no_method_names, "%s", rec->method);
        return NULL;
    }
    prof_class_t *c = class_of(p, node, rec->method, k);
    if (!c)
        p->too_many_classes += count;
    return c;
}

/* ---- pass 2: what each class and key saw ----------------------------------------------- */

static void note_query(prof_class_t *c, const char *q, const prof_t *p)
{
    const char *v;
    size_t n;
    if (c->kind == PLAN_LIST && alog_query_param(q, "limit", &v, &n)) {
        int64_t lim = 0;
        for (size_t i = 0; i < n && i < 9 && v[i] >= '0' && v[i] <= '9'; i++)
            lim = lim * 10 + (v[i] - '0');
        size_t i = 0;
        while (i < c->n_limits && c->limits[i].v != lim)
            i++;
        if (i < 8) {
            c->limits[i].v = lim;
            c->limits[i].n++;
            c->n_limits += i == c->n_limits;
        }
    }
    if (alog_query_param(q, "continue", &v, &n) && n > 0)
        c->with_token++;
    if (c->kind == PLAN_WATCH && !c->watch_value[0] &&
        alog_query_param(q, p->cfg.watch_param, &v, &n))
        snprintf(c->watch_value, sizeof c->watch_value, "%.*s", (int)(n < 15 ? n : 15), v);
    /* Other parameters are named in a comment (at most 8). */
    for (const char *s = q; s && *s && c->n_q < 8;) {
        size_t kn = strcspn(s, "=&");
        bool known = (kn == 5 && memcmp(s, "limit", 5) == 0) ||
                     (kn == 8 && memcmp(s, "continue", 8) == 0) ||
                     (kn == 5 && memcmp(s, "since", 5) == 0) ||
                     (kn == strlen(p->cfg.watch_param) && memcmp(s, p->cfg.watch_param, kn) == 0);
        for (size_t i = 0; i < c->n_q && !known; i++)
            known = strlen(c->qnames[i]) == kn && memcmp(c->qnames[i], s, kn) == 0;
        if (!known && kn > 0 && kn < 64 && (c->qnames[c->n_q] = strndup(s, kn)))
            c->n_q++;
        s = strchr(s, '&');
        s = s ? s + 1 : NULL;
    }
}

static void note_class(prof_class_t *c, const alog_record_t *rec, rng_t *g, const prof_t *p)
{
    c->count++;
    c->status[rec->status >= 100 ? rec->status / 100 : 0]++;
    c->created += rec->status == 201;
    const char *q = strchr(rec->path, '?');
    if (q)
        note_query(c, q + 1, p);
    if (rec->duration_ns >= 0) {
        c->dur_sum += (double)rec->duration_ns;
        c->dur_n++;
        /* A uniform sample of durations (Vitter's Algorithm R, ACM TOMS 11(1), 1985). */
        if (c->n_res < PROF_RESERVOIR) {
            c->res[c->n_res++] = rec->duration_ns;
        } else {
            uint64_t j = rng_below(g, c->dur_n);
            if (j < PROF_RESERVOIR)
                c->res[j] = rec->duration_ns;
        }
    }
    if (!c->body && rec->body && rec->body_len > 0 && rec->body_len <= 4096 &&
        (c->body = malloc(rec->body_len + 1))) {
        memcpy(c->body, rec->body, rec->body_len);
        c->body[rec->body_len] = '\0';
        c->body_len = rec->body_len;
    }
}

/* A key: one client's requests of one class to one path (its part before '?'). */
static uint64_t key_hash(const prof_t *p, const prof_class_t *c, const alog_record_t *rec)
{
    uint32_t ci = (uint32_t)(c - p->cls);
    uint64_t h = prof_hash(&ci, sizeof ci, 0);
    h = prof_hash(rec->client, strlen(rec->client) + 1, h);
    return prof_hash(rec->path, strcspn(rec->path, "?"), h);
}

/* One client's requests to one path with one method: the gaps between them (Welford). */
static void note_key(prof_t *p, prof_class_t *c, const alog_record_t *rec)
{
    prof_key_t *k = prof_key_find(p, key_hash(p, c, rec), true);
    if (!k) {
        p->untracked++;
        return;
    }
    if (k->n == 0) {
        k->cls = (uint32_t)(c - p->cls);
        k->first = rec->t_ns;
        c->keys++;
    } else {
        double gap = (double)(rec->t_ns - k->prev);
        uint32_t m = k->n; /* gaps so far + 1 */
        double d = gap - k->mean;
        k->mean += d / m;
        k->m2 += d * (gap - k->mean);
    }
    k->prev = rec->t_ns;
    k->n++;
}

/* ---- the passes ------------------------------------------------------------------------ */

static int read_error(prof_t *p, alog_t *r, int rc, out_t *o)
{
    out_error(o, "%s", alog_error(r)[0] ? alog_error(r) : p->log_path);
    return rc;
}

/* The log's span comes from requests other than watches when there are any: a writer that
 * logs a request when it ends (nginx) puts a watch's line long after the traffic it belongs to,
 * and 1 s resolution formats carry no duration to correct it with. */
static int pass_shapes(prof_t *p, alog_t *r, out_t *o)
{
    alog_record_t rec;
    int rc;
    int64_t all0 = INT64_MAX, all1 = INT64_MIN;
    p->t0 = INT64_MAX;
    p->t1 = INT64_MIN;
    p->res = NS;
    while ((rc = alog_next(r, &rec)) == 1) {
        p->records++;
        const char *q = strchr(rec.path, '?');
        bool watch = is_watch(p, q ? q + 1 : NULL);
        int64_t *lo = watch ? &all0 : &p->t0, *hi = watch ? &all1 : &p->t1;
        *lo = rec.t_ns < *lo ? rec.t_ns : *lo;
        *hi = rec.t_ns > *hi ? rec.t_ns : *hi;
        p->res = rec.resolution_ns < p->res ? rec.resolution_ns : p->res;
        prof_trie_add(&p->trie, rec.path);
    }
    if (p->t0 > p->t1) { /* watches only */
        p->t0 = all0;
        p->t1 = all1;
    }
    if (rc < 0)
        return read_error(p, r, rc, o);
    if (p->trie.left_out)
        out_warn(o,
                 "%s: %llu requests left out: paths deeper than %d segments or past %d path "
                 "shapes",
                 p->log_path, (unsigned long long)p->trie.left_out, PROF_MAX_DEPTH, PROF_MAX_NODES);
    prof_trie_finalize(&p->trie);
    return 0;
}

static int pass_classes(prof_t *p, alog_t *r, out_t *o)
{
    alog_record_t rec;
    rng_t g;
    rng_seed(&g, 1);
    int rc;
    while ((rc = alog_next(r, &rec)) == 1) {
        prof_class_t *c = classify(p, &rec, true);
        if (c) {
            note_class(c, &rec, &g, p);
            note_key(p, c, &rec);
        }
    }
    return rc < 0 ? read_error(p, r, rc, o) : 0;
}

/* A watch stream covers the instants t0 + i + 0.5 s within [start, end): a difference array
 * of those seconds, summed once the pass is over. */
static void note_open(prof_t *p, prof_class_t *c, const alog_record_t *rec)
{
    if (rec->duration_ns < 0 || (!c->open && !(c->open = calloc(p->n_sec + 1, sizeof *c->open))))
        return;
    double a = (double)(rec->t_ns - p->t0) / 1e9 - 0.5, b = a + (double)rec->duration_ns / 1e9;
    long i0 = (long)ceil(a), i1 = (long)ceil(b), n = (long)p->n_sec;
    i0 = i0 < 0 ? 0 : i0 > n ? n : i0;
    i1 = i1 < 0 ? 0 : i1 > n ? n : i1;
    c->open[i0]++;
    c->open[i1]--;
}

static int cmp_i32(const void *a, const void *b)
{
    int32_t x = *(const int32_t *)a, y = *(const int32_t *)b;
    return (x > y) - (x < y);
}

static void open_medians(prof_t *p)
{
    for (size_t i = 0; i < p->n_cls; i++) {
        prof_class_t *c = &p->cls[i];
        if (!c->open)
            continue;
        for (size_t s = 1; s < p->n_sec; s++)
            c->open[s] += c->open[s - 1];
        qsort(c->open, p->n_sec, sizeof *c->open, cmp_i32);
        c->open_median = (uint32_t)(c->open[p->n_sec / 2] > 0 ? c->open[p->n_sec / 2] : 0);
    }
}

/* Fleet requests add their phase to their key; the rest not watching count per second. */
static int pass_phases(prof_t *p, alog_t *r, out_t *o)
{
    alog_record_t rec;
    int rc;
    while ((rc = alog_next(r, &rec)) == 1) {
        prof_class_t *c = classify(p, &rec, false);
        if (!c)
            continue;
        prof_key_t *k = prof_key_find(p, key_hash(p, c, &rec), false);
        if (k && k->fleet >= 0 && p->fleets[k->fleet].in_plan) {
            int64_t every = p->fleets[k->fleet].every_ns;
            double th = 2 * M_PI * (double)(rec.t_ns % every) / (double)every;
            k->c += cos(th);
            k->s += sin(th);
            c->fleet++;
        } else if (c->kind == PLAN_WATCH) {
            note_open(p, c, &rec);
        } else {
            size_t i = (size_t)((rec.t_ns - p->t0) / NS);
            p->sec[i < p->n_sec ? i : p->n_sec - 1]++;
            c->residual++;
            p->residual++;
        }
    }
    return rc < 0 ? read_error(p, r, rc, o) : 0;
}

static void warn_log(const prof_t *p, const alog_t *r, out_t *o)
{
    const alog_stats_t *st = alog_stats(r);
    if (st->malformed == 0)
        return;
    out_warn(o, "%s: %llu malformed lines skipped, e.g.:", p->log_path,
             (unsigned long long)st->malformed);
    for (size_t i = 0; i < st->n_samples && i < 3; i++)
        out_warn(o, "  %s", st->samples[i]);
}

static int run_passes(prof_t *p, alog_t *r, out_t *o)
{
    int rc = pass_shapes(p, r, o);
    if (rc)
        return rc;
    if (p->records == 0) {
        out_error(o, "%s: no requests in the log (%llu lines, %llu malformed)", p->log_path,
                  (unsigned long long)alog_stats(r)->lines,
                  (unsigned long long)alog_stats(r)->malformed);
        return SQ_EINVAL;
    }
    if (prof_span_s(p) > PROF_MAX_SPAN_S) {
        out_error(o, "%s: the log spans %lld days (expected at most 31: cut it first)", p->log_path,
                  (long long)(prof_span_s(p) / 86400));
        return SQ_EINVAL;
    }
    if (alog_rewind(r))
        return read_error(p, r, SQ_EIO, o);
    if ((rc = prof_keys_init(p)) || (rc = pass_classes(p, r, o)))
        return rc;
    prof_fleets_find(p);
    p->n_sec = (size_t)((p->t1 - p->t0) / NS) + 1; /* every second a start falls in */
    if (!(p->sec = calloc(p->n_sec, sizeof *p->sec)))
        return SQ_ENOMEM;
    if (alog_rewind(r))
        return read_error(p, r, SQ_EIO, o);
    if ((rc = pass_phases(p, r, o)))
        return rc;
    warn_log(p, r, o);
    p->log = *alog_stats(r);
    p->log.n_samples = 0;
    open_medians(p);
    prof_fleets_phases(p);
    prof_rates(p);
    prof_name_things(p);
    return 0;
}

int prof_analyze(const char *path, const prof_config_t *cfg, prof_t **out, out_t *o)
{
    *out = NULL;
    prof_t *p = calloc(1, sizeof *p);
    if (!p || !(p->log_path = strdup(path)) || prof_trie_init(&p->trie)) {
        prof_free(p);
        return SQ_ENOMEM;
    }
    p->cfg = *cfg;
    char err[1024];
    alog_t *r;
    int rc = alog_open(path, &cfg->log, &r, err, sizeof err);
    if (rc) {
        out_error(o, "%s", err);
        prof_free(p);
        return rc;
    }
    rc = run_passes(p, r, o);
    alog_close(r);
    if (rc == 0 && p->n_cls == 0) {
        out_error(o, "%s: no request a plan can send (methods left out: %llu, e.g. %s)", path,
                  (unsigned long long)p->no_method, p->no_method_names);
        rc = SQ_EINVAL;
    }
    if (rc) {
        if (rc == SQ_ENOMEM)
            out_error(o, "%s: out of memory", path);
        prof_free(p);
        return rc;
    }
    *out = p;
    return 0;
}

void prof_free(prof_t *p)
{
    if (!p)
        return;
    for (size_t i = 0; i < p->n_cls; i++) {
        for (size_t k = 0; k < p->cls[i].n_q; k++)
            free(p->cls[i].qnames[k]);
        free(p->cls[i].body);
        free(p->cls[i].open);
    }
    free(p->cls);
    free(p->keys);
    free(p->fleets);
    free(p->sec);
    free(p->steps);
    prof_trie_close(&p->trie);
    free(p->log_path);
    free(p);
}
