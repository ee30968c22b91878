/* A phase's `replay:` key: which recorded log, how to read it, which part of it, how fast, how
 * many copies, and the rules that rewrite and classify its paths. The log itself is read by the
 * replay source (src/source/replay.c), which also compiles the patterns and resolves classes. */
#include <stdio.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"

/* Options passed through to the log reader (alog_config_set's names). */
static const char *const log_opts[] = {"format", "time-unit", "duration-unit", "time-at", NULL};

static void parse_fields(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    char w[260];
    snprintf(w, sizeof w, "%s.fields", where);
    if (!pc_expect_map(c, n, w))
        return;
    for (yaml_node_pair_t *p = n->data.mapping.pairs.start; p < n->data.mapping.pairs.top; p++) {
        yaml_node_t *k = pc_node(c, p->key), *v = pc_node(c, p->value);
        const char *kt = pc_text(k), *vt = pc_text(v);
        if (!kt || !vt) {
            pc_error(c, v, "%s: wrong type (expected NAME: KEY, like time: ts)", w);
            continue;
        }
        char *kv = pmem_alloc(c, strlen(kt) + strlen(vt) + 2);
        if (!kv)
            return;
        sprintf(kv, "%s=%s", kt, vt);
        ph->replay.log_opts =
            pc_grow(c, ph->replay.log_opts, &ph->replay.n_log_opts, 1, sizeof(plan_kv_t));
        if (!c->nomem)
            ph->replay.log_opts[ph->replay.n_log_opts - 1] =
                (plan_kv_t){.name = "field", .value = kv, .pos = pc_pos(c, v)};
    }
}

/* A list of {match: ERE, KEY: value} rules. */
static void parse_rules(pctx_t *c, yaml_node_t *n, const char *where, const char *key,
                        plan_replay_rule_t **out, size_t *n_out)
{
    char w[260];
    snprintf(w, sizeof w, "%s.%s", where, key);
    if (!pc_expect_seq(c, n, w))
        return;
    const char *const *keys = plan_keys(key[0] == 'r' ? PLAN_KEYS_REWRITE : PLAN_KEYS_CLASSIFY);
    size_t i = 0;
    for (yaml_node_item_t *it = n->data.sequence.items.start; it < n->data.sequence.items.top;
         it++, i++) {
        yaml_node_t *r = pc_node(c, *it);
        char wi[300];
        snprintf(wi, sizeof wi, "%s[%zu]", w, i);
        if (!pc_expect_map(c, r, wi))
            continue;
        pc_check_keys(c, r, wi, keys);
        plan_replay_rule_t rule = {.pos = pc_pos(c, r), .cls = {.index = -1}};
        for (int k = 0; k < 2; k++)
            if (!pc_get(c, r, keys[k]))
                pc_error(c, r, "%s: missing key '%s' (expected %s, got nothing)", wi, keys[k],
                         k == 0          ? "a regular expression"
                         : key[0] == 'r' ? "a path"
                                         : "a class");
        if (pc_str(c, r, "match", wi, &rule.match))
            rule.pos = pc_pos(c, pc_get(c, r, "match"));
        if (key[0] == 'r')
            pc_str(c, r, "to", wi, &rule.to);
        else if (pc_get(c, r, "class"))
            pc_ref(c, &rule.cls, pc_get(c, r, "class"), wi);
        *out = pc_grow(c, *out, n_out, 1, sizeof(rule));
        if (!c->nomem)
            (*out)[*n_out - 1] = rule;
    }
}

static void parse_methods(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    char w[260];
    snprintf(w, sizeof w, "%s.methods", where);
    if (!pc_expect_seq(c, n, w))
        return;
    for (yaml_node_item_t *it = n->data.sequence.items.start; it < n->data.sequence.items.top;
         it++) {
        const char *t = pc_text(pc_node(c, *it));
        if (!t) {
            pc_error(c, pc_node(c, *it), "%s: wrong type (expected a method like GET)", w);
            continue;
        }
        ph->replay.methods =
            pc_grow(c, ph->replay.methods, &ph->replay.n_methods, 1, sizeof(*ph->replay.methods));
        if (!c->nomem)
            ph->replay.methods[ph->replay.n_methods - 1] = pmem_strdup(c, t);
    }
}

/* The classes unmatched GET and HEAD requests fall into, by path shape: `replay-get` for an
 * object, `replay-list` for a collection, `replay-watch` for a recorded watch stream. Added
 * unless the plan defines them itself. */
static int implicit_class(pctx_t *c, const char *name, enum plan_kind kind, plan_pos_t pos)
{
    int i = plan_find_req(c->p, name);
    if (i >= 0)
        return i;
    plan_req_t r = {.name = name, .pos = pos, .kind = kind, .path = "/", .path_pos = pos};
    r.list.limit_param = "limit";
    if (kind == PLAN_WATCH)
        plan_watch_defaults(&r);
    c->p->reqs = pc_grow(c, c->p->reqs, &c->p->n_reqs, 1, sizeof(r));
    if (c->nomem)
        return -1;
    c->p->reqs[c->p->n_reqs - 1] = r;
    return (int)c->p->n_reqs - 1;
}

void plan_parse_replay(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_REPLAY);
    static const char *const spreads[] = {"even", "poisson", NULL};
    char w[200];
    snprintf(w, sizeof w, "%s.replay", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, keys);
    ph->replay.on = true;
    ph->replay.speed = 1.0;
    ph->replay.copies = 1;
    ph->replay.offset_ns = 1000000;
    ph->replay.watch_param = "watch";
    ph->replay.watch_min_ns = 1000000000;
    if (!pc_get(c, n, "log"))
        pc_error(c, n, "%s: missing key 'log' (expected an access log path, got nothing)", w);
    pc_path(c, n, "log", w, &ph->replay.log);
    pc_num(c, n, "speed", w, 0.001, 1000, &ph->replay.speed);
    for (int i = 0; log_opts[i]; i++) {
        const char *v;
        if (!pc_str(c, n, log_opts[i], w, &v))
            continue;
        ph->replay.log_opts =
            pc_grow(c, ph->replay.log_opts, &ph->replay.n_log_opts, 1, sizeof(plan_kv_t));
        if (!c->nomem)
            ph->replay.log_opts[ph->replay.n_log_opts - 1] = (plan_kv_t){
                .name = log_opts[i], .value = v, .pos = pc_pos(c, pc_get(c, n, log_opts[i]))};
    }
    if (pc_get(c, n, "fields"))
        parse_fields(c, pc_get(c, n, "fields"), w, ph);
    pc_dur(c, n, "from", w, 0, &ph->replay.from_ns);
    ph->replay.has_to = pc_dur(c, n, "to", w, 1, &ph->replay.to_ns);
    for (int k = 0; k < 2; k++) {
        int64_t v = k ? ph->replay.to_ns : ph->replay.from_ns;
        if (v % 1000000000)
            pc_error(c, pc_get(c, n, k ? "to" : "from"),
                     "%s.%s: not whole seconds (expected a time like 10m or 90s, got %.6gs)", w,
                     k ? "to" : "from", v / 1e9);
    }
    if (ph->replay.has_to && ph->replay.to_ns <= ph->replay.from_ns)
        pc_error(c, pc_get(c, n, "to"),
                 "%s.to: not after 'from' (expected more than %.6gs, got %.6gs)", w,
                 ph->replay.from_ns / 1e9, ph->replay.to_ns / 1e9);
    if (pc_get(c, n, "methods"))
        parse_methods(c, pc_get(c, n, "methods"), w, ph);
    if (pc_str(c, n, "match", w, &ph->replay.match))
        ph->replay.match_pos = pc_pos(c, pc_get(c, n, "match"));
    if (pc_get(c, n, "rewrite"))
        parse_rules(c, pc_get(c, n, "rewrite"), w, "rewrite", &ph->replay.rewrite,
                    &ph->replay.n_rewrite);
    if (pc_get(c, n, "classify"))
        parse_rules(c, pc_get(c, n, "classify"), w, "classify", &ph->replay.classify,
                    &ph->replay.n_classify);
    pc_int(c, n, "copies", w, 1, 1000, &ph->replay.copies);
    pc_dur(c, n, "offset", w, 0, &ph->replay.offset_ns);
    int sp = 0;
    if (pc_enum(c, n, "spread", w, spreads, &sp))
        ph->replay.spread = (enum plan_arrivals)sp;
    pc_str(c, n, "watch-param", w, &ph->replay.watch_param);
    pc_dur(c, n, "watch-min", w, 0, &ph->replay.watch_min_ns);
    ph->replay.get_cls = implicit_class(c, "replay-get", PLAN_GET, pc_pos(c, n));
    ph->replay.list_cls = implicit_class(c, "replay-list", PLAN_LIST, pc_pos(c, n));
    ph->replay.watch_cls = implicit_class(c, "replay-watch", PLAN_WATCH, pc_pos(c, n));
}
