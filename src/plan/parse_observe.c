/* What squall does at the target beside the load: the `observe` section (`metrics` endpoints
 * scraped every `every`, URLs `collect`ed into the results at a moment of the run) and each
 * phase's `actions` (a request sent or a program run at an offset into the phase). Endpoints
 * and collects read from an included file are added to the includer's. */
#include <stdio.h>
#include <string.h>

#include "plan_int.h"

#define SCRAPE_MIN_NS      (INT64_C(250) * 1000000) /* a shorter interval is refused */
#define COLLECT_TIMEOUT_NS (INT64_C(10) * 1000000000)
#define ACTION_TIMEOUT_NS  (INT64_C(30) * 1000000000)
#define COLLECT_MAX_BYTES  (INT64_C(16) * 1024 * 1024)

static size_t seq_len(const yaml_node_t *n)
{
    return (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
}

/* An absolute http(s) URL, or (when relative is allowed) a path on the target's origin. The
 * path must be a path: no spaces or control bytes, which would end up in a request line. */
static bool parse_url_node(pctx_t *c, yaml_node_t *n, const char *where, bool relative,
                           plan_url_t *u)
{
    const char *t = pc_text(n);
    if (t && t[0] == '/' && relative) {
        for (const char *s = t; *s; s++)
            if ((unsigned char)*s <= ' ' || *s == 0x7f) {
                pc_error(c, n, "%s: bad path (expected no spaces or control characters, got '%s')",
                         where, t);
                return false;
            }
        *u = (plan_url_t){.url = pmem_strdup(c, t), .relative = true, .path = pmem_strdup(c, t)};
        return true;
    }
    char host[256];
    const char *path;
    if (!plan_split_url(c, n, where, &u->https, host, sizeof host, &u->port, &path, &u->loopback))
        return false;
    for (const char *s = path; *s; s++)
        if ((unsigned char)*s <= ' ' || *s == 0x7f) {
            pc_error(c, n, "%s: bad URL (expected no spaces or control characters, got '%s')",
                     where, t);
            return false;
        }
    u->relative = false;
    u->url = pmem_strdup(c, t);
    u->host = pmem_strdup(c, host);
    u->path = pmem_strdup(c, *path ? path : "/");
    return true;
}

static bool url_key(pctx_t *c, yaml_node_t *n, const char *key, const char *where, bool relative,
                    plan_url_t *u)
{
    char w[128];
    snprintf(w, sizeof w, "%s.%s", where, key);
    yaml_node_t *v = pc_get(c, n, key);
    if (!v) {
        pc_error(c, n, "%s: missing key '%s' (expected a URL like http://127.0.0.1:7070/metrics%s)",
                 where, key, relative ? " or a path on the target like /metrics" : "");
        return false;
    }
    return parse_url_node(c, v, w, relative, u);
}

/* keep: a pattern or a list of them: metric-name characters and '*'. */
static void parse_keep(pctx_t *c, yaml_node_t *n, const char *where, plan_scrape_t *s)
{
    bool seq = n->type == YAML_SEQUENCE_NODE;
    size_t count = seq ? seq_len(n) : 1;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = seq ? pc_node(c, n->data.sequence.items.start[i]) : n;
        const char *t = pc_text(it);
        size_t len = t ? strlen(t) : 0;
        if (len == 0 || strspn(t, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
                                  "0123456789_:*") != len) {
            char got[64];
            pc_describe(it, got, sizeof got);
            pc_error(c, it,
                     "%s.keep: bad pattern (expected metric names with '*' for any run of "
                     "characters, e.g. gateway_requests_*, got %s)",
                     where, got);
            continue;
        }
        s->keep = pc_grow(c, s->keep, &s->n_keep, 1, sizeof(*s->keep));
        if (c->nomem)
            return;
        s->keep[s->n_keep - 1] = pmem_strdup(c, t);
    }
}

static void parse_scrape(pctx_t *c, yaml_node_t *n, const char *where, plan_scrape_t *s)
{
    const char *const *keys = plan_keys(PLAN_KEYS_SCRAPE);
    s->pos = pc_pos(c, n);
    s->every_ns = INT64_C(5000000000);
    pc_check_keys(c, n, where, keys);
    url_key(c, n, "url", where, true, &s->at);
    pc_dur(c, n, "every", where, SCRAPE_MIN_NS, &s->every_ns);
    if (pc_get(c, n, "keep"))
        parse_keep(c, pc_get(c, n, "keep"), where, s);
}

/* at: run-start | run-end | phase-start:NAME | phase-end:NAME */
static void parse_moment(pctx_t *c, yaml_node_t *n, const char *where, plan_collect_t *k)
{
    const char *t = n ? pc_text(n) : NULL;
    const char *name = NULL;
    if (t && strcmp(t, "run-start") == 0) {
        k->when = PLAN_AT_RUN_START;
        return;
    }
    if (t && strcmp(t, "run-end") == 0) {
        k->when = PLAN_AT_RUN_END;
        return;
    }
    if (t && strncmp(t, "phase-start:", 12) == 0) {
        k->when = PLAN_AT_PHASE_START;
        name = t + 12;
    } else if (t && strncmp(t, "phase-end:", 10) == 0) {
        k->when = PLAN_AT_PHASE_END;
        name = t + 10;
    }
    k->phase = name ? plan_find_phase(c->p, name) : -1;
    if (k->phase >= 0)
        return;
    char got[64];
    if (n)
        pc_describe(n, got, sizeof got);
    pc_error_at(c, n ? pc_pos(c, n) : k->pos,
                "%s.at: %s (expected run-start, run-end, phase-start:NAME or phase-end:NAME "
                "with NAME a phase of the plan, got %s)",
                where, name ? "unknown phase" : "bad moment", n ? got : "nothing");
}

static void parse_collect(pctx_t *c, yaml_node_t *n, const char *where, plan_collect_t *k)
{
    const char *const *keys = plan_keys(PLAN_KEYS_COLLECT);
    k->pos = pc_pos(c, n);
    k->timeout_ns = COLLECT_TIMEOUT_NS;
    k->max_bytes = COLLECT_MAX_BYTES;
    pc_check_keys(c, n, where, keys);
    url_key(c, n, "url", where, true, &k->at);
    parse_moment(c, pc_get(c, n, "at"), where, k);
    yaml_node_t *s = pc_get(c, n, "save");
    if (!s)
        pc_error(c, n,
                 "%s: missing key 'save' (expected a file name for the results "
                 "directory, like target-stats.json)",
                 where);
    else if (pc_str(c, n, "save", where, &k->save) &&
             (k->save[0] == '\0' || k->save[0] == '.' || strchr(k->save, '/') ||
              strspn(k->save,
                     "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789._-") !=
                  strlen(k->save)))
        pc_error(c, s,
                 "%s.save: bad file name (expected letters, digits, '.', '_' and '-', not "
                 "starting with '.', got '%s')",
                 where, k->save);
    pc_dur(c, n, "timeout", where, 1, &k->timeout_ns);
    if (pc_get(c, n, "max")) {
        int mib = 0;
        if (pc_int(c, n, "max", where, 1, 1024, &mib))
            k->max_bytes = (int64_t)mib * 1024 * 1024;
    }
}

void plan_parse_observe(pctx_t *c, yaml_node_t *n)
{
    const char *const *keys = plan_keys(PLAN_KEYS_OBSERVE);
    if (!pc_expect_map(c, n, "observe"))
        return;
    pc_check_keys(c, n, "observe", keys);
    plan_t *p = c->p;
    yaml_node_t *m = pc_get(c, n, "metrics");
    for (size_t i = 0; m && pc_expect_seq(c, m, "observe.metrics") && i < seq_len(m); i++) {
        yaml_node_t *it = pc_node(c, m->data.sequence.items.start[i]);
        char where[64];
        snprintf(where, sizeof where, "observe.metrics[%zu]", i);
        if (!pc_expect_map(c, it, where))
            continue;
        p->scrapes = pc_grow(c, p->scrapes, &p->n_scrapes, 1, sizeof(*p->scrapes));
        if (c->nomem)
            return;
        parse_scrape(c, it, where, &p->scrapes[p->n_scrapes - 1]);
    }
    yaml_node_t *k = pc_get(c, n, "collect");
    for (size_t i = 0; k && pc_expect_seq(c, k, "observe.collect") && i < seq_len(k); i++) {
        yaml_node_t *it = pc_node(c, k->data.sequence.items.start[i]);
        char where[64];
        snprintf(where, sizeof where, "observe.collect[%zu]", i);
        if (!pc_expect_map(c, it, where))
            continue;
        p->collects = pc_grow(c, p->collects, &p->n_collects, 1, sizeof(*p->collects));
        if (c->nomem)
            return;
        parse_collect(c, it, where, &p->collects[p->n_collects - 1]);
    }
}

/* http: {method, url, body} */
static void parse_http(pctx_t *c, yaml_node_t *n, const char *where, plan_action_t *a)
{
    const char *const *keys = plan_keys(PLAN_KEYS_ACTION_HTTP);
    if (!pc_expect_map(c, n, where))
        return;
    pc_check_keys(c, n, where, keys);
    a->method = "POST";
    if (pc_str(c, n, "method", where, &a->method) &&
        (a->method[0] == '\0' ||
         strspn(a->method, "ABCDEFGHIJKLMNOPQRSTUVWXYZ") != strlen(a->method)))
        pc_error(c, pc_get(c, n, "method"),
                 "%s.method: bad method (expected an upper-case HTTP method like POST, got '%s')",
                 where, a->method);
    url_key(c, n, "url", where, true, &a->url);
    pc_str(c, n, "body", where, &a->body);
}

/* exec: [program, args...]: run without a shell. */
static void parse_exec(pctx_t *c, yaml_node_t *n, const char *where, plan_action_t *a)
{
    if (!pc_expect_seq(c, n, where))
        return;
    size_t count = seq_len(n);
    if (count == 0) {
        pc_error(c, n, "%s: empty (expected [program, arguments...], got [])", where);
        return;
    }
    const char **argv = pmem_alloc(c, (count + 1) * sizeof(*argv));
    for (size_t i = 0; argv && i < count; i++) {
        yaml_node_t *it = pc_node(c, n->data.sequence.items.start[i]);
        if (!pc_text(it)) {
            char got[64];
            pc_describe(it, got, sizeof got);
            pc_error(c, it, "%s[%zu]: wrong type (expected text, got %s)", where, i, got);
            return;
        }
        argv[i] = pmem_strdup(c, pc_text(it));
    }
    if (argv)
        argv[count] = NULL;
    a->exec = true;
    a->argv = argv;
}

static void parse_action(pctx_t *c, yaml_node_t *n, const char *where, const plan_phase_t *ph,
                         size_t k, plan_action_t *a)
{
    const char *const *keys = plan_keys(PLAN_KEYS_ACTION);
    a->pos = pc_pos(c, n);
    a->timeout_ns = ACTION_TIMEOUT_NS;
    pc_check_keys(c, n, where, keys);
    if (pc_get(c, n, "name")) {
        if (pc_name_ok(c, pc_get(c, n, "name"), where, "action"))
            a->name = pmem_strdup(c, pc_text(pc_get(c, n, "name")));
    } else {
        char def[160];
        snprintf(def, sizeof def, "%s-%zu", ph->name ? ph->name : "phase", k + 1);
        a->name = pmem_strdup(c, def);
    }
    if (!pc_get(c, n, "at"))
        pc_error(c, n, "%s: missing key 'at' (expected an offset into the phase like 15s)", where);
    else if (pc_dur(c, n, "at", where, 0, &a->at_ns) && ph->has_duration &&
             a->at_ns >= ph->duration_ns)
        pc_error(c, pc_get(c, n, "at"),
                 "%s.at: after the phase ends (expected less than %.6gs, got %.6gs)", where,
                 ph->duration_ns / 1e9, a->at_ns / 1e9);
    pc_dur(c, n, "timeout", where, 1, &a->timeout_ns);
    yaml_node_t *h = pc_get(c, n, "http"), *x = pc_get(c, n, "exec");
    char w[240];
    if (!h == !x) {
        pc_error(c, n, "%s: %s (expected one of http or exec)", where,
                 h ? "both http and exec" : "nothing to do");
    } else if (h) {
        snprintf(w, sizeof w, "%s.http", where);
        parse_http(c, h, w, a);
    } else {
        snprintf(w, sizeof w, "%s.exec", where);
        parse_exec(c, x, w, a);
    }
}

void plan_parse_actions(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    char w[160];
    snprintf(w, sizeof w, "%s.actions", where);
    if (!pc_expect_seq(c, n, w))
        return;
    for (size_t i = 0; i < seq_len(n); i++) {
        yaml_node_t *it = pc_node(c, n->data.sequence.items.start[i]);
        char wi[200];
        snprintf(wi, sizeof wi, "%s[%zu]", w, i);
        if (!pc_expect_map(c, it, wi))
            continue;
        ph->actions = pc_grow(c, ph->actions, &ph->n_actions, 1, sizeof(*ph->actions));
        if (c->nomem)
            return;
        parse_action(c, it, wi, ph, i, &ph->actions[ph->n_actions - 1]);
    }
    /* In the order they fire (a stable insertion sort: lists are short). */
    for (size_t i = 1; i < ph->n_actions; i++)
        for (size_t j = i; j > 0 && ph->actions[j].at_ns < ph->actions[j - 1].at_ns; j--) {
            plan_action_t t = ph->actions[j];
            ph->actions[j] = ph->actions[j - 1];
            ph->actions[j - 1] = t;
        }
}
