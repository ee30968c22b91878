/* The plan's `requests` section: named request classes (get, list, write, watch), each key
 * checked against the kinds it applies to so `page` on a write is an error, not a no-op. */
#include <stdio.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"

/* Keys that exist but belong to another kind of request. */
static void check_kind_keys(pctx_t *c, yaml_node_t *n, const char *where, enum plan_kind kind)
{
    const plan_keyset_t *ks = &plan_keysets[PLAN_KEYS_REQUEST];
    for (size_t i = 0; ks->keys[i]; i++) {
        if (ks->kinds[i] & (1u << kind))
            continue;
        yaml_node_t *k = pc_get_key(c, n, ks->keys[i]);
        if (!k)
            continue;
        char kinds[64] = "";
        for (int j = 0; plan_kind_names[j]; j++)
            if (ks->kinds[i] & (1u << j))
                snprintf(kinds + strlen(kinds), sizeof kinds - strlen(kinds), "%s%s",
                         kinds[0] ? " or " : "", plan_kind_names[j]);
        pc_error(c, k, "%s: key '%s' does not apply to this kind (expected kind %s, got %s)", where,
                 ks->keys[i], kinds, plan_kind_names[kind]);
    }
}

static void parse_list_keys(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    r->list.limit_param = "limit";
    r->list.token_key = "continue";
    r->list.token_param = "continue";
    pc_int(c, n, "page", where, 0, 1000000, &r->list.page);
    pc_str(c, n, "limit-param", where, &r->list.limit_param);
    pc_str(c, n, "token-key", where, &r->list.token_key);
    pc_str(c, n, "token-param", where, &r->list.token_param);
}

/* `keep: true` or `keep: "why"`: the objects this class creates stay on the target after the
 * run (its 201s are still journaled); the summary lists them with the reason. */
static void parse_keep(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    const char *t = pc_text(pc_get(c, n, "keep"));
    if (!t)
        return;
    if (strcmp(t, "true") == 0 || strcmp(t, "false") == 0) {
        pc_bool(c, n, "keep", where, &r->write.keep);
    } else if (pc_str(c, n, "keep", where, &r->write.keep_why)) {
        r->write.keep = true;
    }
}

static void parse_write_keys(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    static const char *const methods[] = {"POST", "PUT", "PATCH", "DELETE", NULL};
    int m = 1;
    pc_enum(c, n, "method", where, methods, &m);
    r->write.method = methods[m];
    if (pc_str(c, n, "body", where, &r->write.body))
        r->write.body_pos = pc_pos(c, pc_get(c, n, "body"));
    pc_bool(c, n, "creates", where, &r->write.creates);
    pc_bool(c, n, "deletes", where, &r->write.deletes);
    parse_keep(c, n, where, r);
    if (r->write.creates && r->write.deletes)
        pc_error(c, pc_get_key(c, n, "deletes"),
                 "%s: a class either creates or deletes (expected one of creates, deletes, got "
                 "both)",
                 where);
    else if (r->write.creates && m == 3)
        pc_error(c, pc_get_key(c, n, "creates"),
                 "%s: a DELETE cannot create (expected method POST, PUT or PATCH, got DELETE)",
                 where);
}

void pc_backoff(pctx_t *c, yaml_node_t *n, const char *w, enum plan_keyset keys,
                enum plan_backoff *policy, int64_t *base_ns, int64_t *cap_ns)
{
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, plan_keys(keys));
    int pol = (int)*policy;
    if (pc_enum(c, n, "policy", w, plan_backoff_names, &pol))
        *policy = (enum plan_backoff)pol;
    bool b = pc_dur(c, n, "base", w, 0, base_ns);
    bool k = pc_dur(c, n, "cap", w, 0, cap_ns);
    if ((b || k) && *cap_ns < *base_ns)
        pc_error(c, pc_get_key(c, n, k ? "cap" : "base"),
                 "%s: cap below base (expected cap >= base, got base %.3gs, cap %.3gs)", w,
                 *base_ns / 1e9, *cap_ns / 1e9);
}

static void parse_reconnect(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    char w[200];
    snprintf(w, sizeof w, "%s.reconnect", where);
    pc_backoff(c, n, w, PLAN_KEYS_RECONNECT, &r->watch.policy, &r->watch.base_ns, &r->watch.cap_ns);
}

void plan_watch_defaults(plan_req_t *r)
{
    r->watch.framing = PLAN_FRAME_NDJSON;
    r->watch.version_key = "version";
    r->watch.stamp_key = "stamp";
    r->watch.too_old_status = 410;
    r->watch.relist.index = -1;
    r->watch.policy = PLAN_BACKOFF_FULL_JITTER;
    r->watch.base_ns = INT64_C(200000000);
    r->watch.cap_ns = INT64_C(10000000000);
}

static void parse_watch_keys(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    static const char *const framings[] = {"ndjson", "sse", "raw", NULL};
    plan_watch_defaults(r);
    int f = 0;
    pc_enum(c, n, "framing", where, framings, &f);
    r->watch.framing = (enum plan_framing)f;
    pc_str(c, n, "version-key", where, &r->watch.version_key);
    pc_str(c, n, "stamp-key", where, &r->watch.stamp_key);
    pc_int(c, n, "too-old-status", where, 100, 599, &r->watch.too_old_status);
    yaml_node_t *rl = pc_get(c, n, "relist");
    if (rl) {
        char w[200];
        snprintf(w, sizeof w, "%s.relist", where);
        pc_ref(c, &r->watch.relist, rl, w);
    }
    if (pc_get(c, n, "reconnect"))
        parse_reconnect(c, pc_get(c, n, "reconnect"), where, r);
}

static void parse_common(pctx_t *c, yaml_node_t *n, const char *where, plan_req_t *r)
{
    /* 0 until plan_check_whole: a non-watch class then takes the target's timeout, which a
     * file read later (the includer) may still change. */
    r->timeout_ns = 0;
    pc_dur(c, n, "timeout", where, r->kind == PLAN_WATCH ? 0 : 1, &r->timeout_ns);
    yaml_node_t *path = pc_get(c, n, "path");
    if (!path)
        pc_error(c, n,
                 "%s: missing key 'path' (expected a path template like /v1/things, got "
                 "nothing)",
                 where);
    else if (pc_str(c, n, "path", where, &r->path)) {
        r->path_pos = pc_pos(c, path);
        if (r->path[0] != '/')
            pc_error(c, path, "%s.path: not a path (expected text starting with '/', got '%s')",
                     where, r->path);
    }
    if (pc_get(c, n, "headers")) {
        char w[200];
        snprintf(w, sizeof w, "%s.headers", where);
        plan_parse_headers_into(c, pc_get(c, n, "headers"), w, &r->headers, &r->n_headers);
    }
}

static void parse_one(pctx_t *c, yaml_node_t *k, yaml_node_t *n, plan_req_t *r)
{
    char where[128];
    snprintf(where, sizeof where, "requests.%s", pc_text(k));
    r->name = pmem_strdup(c, pc_text(k));
    r->pos = pc_pos(c, k);
    if (!pc_expect_map(c, n, where))
        return;
    pc_check_keys(c, n, where, plan_keys(PLAN_KEYS_REQUEST));
    int kind = -1;
    if (!pc_get(c, n, "kind")) {
        pc_error(c, n,
                 "%s: missing key 'kind' (expected one of get, list, write, watch, got "
                 "nothing)",
                 where);
        return;
    }
    if (!pc_enum(c, n, "kind", where, plan_kind_names, &kind))
        return;
    r->kind = (enum plan_kind)kind;
    check_kind_keys(c, n, where, r->kind);
    parse_common(c, n, where, r);
    if (r->kind == PLAN_LIST)
        parse_list_keys(c, n, where, r);
    else if (r->kind == PLAN_WRITE)
        parse_write_keys(c, n, where, r);
    else if (r->kind == PLAN_WATCH)
        parse_watch_keys(c, n, where, r);
}

void plan_parse_requests(pctx_t *c, yaml_node_t *n)
{
    if (!pc_expect_map(c, n, "requests"))
        return;
    pc_check_keys(c, n, "requests", NULL);
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        yaml_node_t *k = pc_node(c, pr->key);
        if (!pc_text(k) || !pc_name_ok(c, k, "requests", "class"))
            continue;
        int prev = plan_find_req(c->p, pc_text(k));
        if (prev >= 0) {
            plan_pos_t f = c->p->reqs[prev].pos;
            if (f.file != c->file) /* same file: already reported as a duplicate key */
                pc_error(c, k, "requests.%s: class defined twice (first at %s:%d:%d)", pc_text(k),
                         f.file, f.line, f.col);
            continue;
        }
        if (c->p->n_reqs >= PLAN_MAX_REQS) {
            pc_error(c, k, "requests: too many classes (expected at most %d, got more)",
                     PLAN_MAX_REQS);
            return;
        }
        c->p->reqs = pc_grow(c, c->p->reqs, &c->p->n_reqs, 1, sizeof(plan_req_t));
        if (c->nomem)
            return;
        parse_one(c, k, pc_node(c, pr->value), &c->p->reqs[c->p->n_reqs - 1]);
    }
}
