/* The plan's `objectives` (what decides the exit code) and `brakes` (what stops a run early).
 * Both are lists of small mappings with exactly one limit each, e.g. {class: renew, p99: 1s}. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"
#include "squall/suggest.h"

/* "p99" -> 99, "p99.9" -> 99.9, "max" -> 100; false for anything else. */
static bool percentile_key(const char *k, double *pct)
{
    if (strcmp(k, "max") == 0) {
        *pct = 100;
        return true;
    }
    if (k[0] != 'p')
        return false;
    return value_parse_number(k + 1, 1e-9, 100, pct) == 0;
}

/* Checks keys: fixed ones from `keys`, plus percentile keys; suggestions come from `keys`. */
static void check_judge_keys(pctx_t *c, yaml_node_t *n, const char *where, const char *const *keys)
{
    pc_check_keys(c, n, where, NULL);
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        yaml_node_t *k = pc_node(c, pr->key);
        const char *name = pc_text(k);
        double pct;
        bool known = !name || percentile_key(name, &pct);
        for (int i = 0; keys[i] && !known; i++)
            known = strcmp(keys[i], name) == 0;
        if (known)
            continue;
        yaml_node_t one = *n;
        yaml_node_pair_t only = *pr;
        one.data.mapping.pairs.start = &only;
        one.data.mapping.pairs.top = &only + 1;
        pc_check_keys(c, &one, where, keys); /* reports it with a suggestion */
    }
}

/* The one limit of an objective or brake: a percentile key or one of `limits`. Returns the
 * index in `limits`, -2 for a percentile (key in *pk), or -1 after an error. */
static int one_limit(pctx_t *c, yaml_node_t *n, const char *where, const char *const *limits,
                     const char **pk)
{
    int found = -1, count = 0;
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        const char *name = pc_text(pc_node(c, pr->key));
        double pct;
        if (!name)
            continue;
        if (percentile_key(name, &pct)) {
            found = -2;
            *pk = name;
            count++;
        }
        for (int i = 0; limits[i]; i++)
            if (strcmp(limits[i], name) == 0) {
                found = i;
                count++;
            }
    }
    if (count == 1)
        return found;
    char exp[160] = "one of p99 (any percentile)";
    for (int i = 0; limits[i]; i++)
        snprintf(exp + strlen(exp), sizeof exp - strlen(exp), ", %s", limits[i]);
    pc_error(c, n, "%s: %s limit (expected exactly %s, got %d)", where,
             count ? "more than one" : "no", exp, count);
    return -1;
}

static void parse_objective(pctx_t *c, yaml_node_t *n, const char *where, plan_objective_t *ob)
{
    const char *const *keys = plan_keys(PLAN_KEYS_OBJECTIVE);
    static const char *const limits[] = {"error-rate", "min-rate", "max-sync", NULL};
    static const char *const metrics[] = {"response", "service", "open", "propagation", NULL};
    ob->pos = pc_pos(c, n);
    ob->cls.index = ob->phase.index = -1;
    check_judge_keys(c, n, where, keys);
    yaml_node_t *cls = pc_get(c, n, "class");
    if (!cls)
        pc_error(c, n, "%s: missing key 'class' (expected a class name or \"*\", got nothing)",
                 where);
    else
        pc_ref(c, &ob->cls, cls, where);
    if (pc_get(c, n, "phase"))
        pc_ref(c, &ob->phase, pc_get(c, n, "phase"), where);
    int m = 0;
    pc_enum(c, n, "metric", where, metrics, &m);
    ob->metric = (enum plan_metric)m;
    const char *pk = NULL;
    int lim = one_limit(c, n, where, limits, &pk);
    if (lim == -2) {
        ob->limit = PLAN_LIMIT_PERCENTILE;
        percentile_key(pk, &ob->percentile);
        pc_dur(c, n, pk, where, 1, &ob->max_ns);
    } else if (lim == 0) {
        ob->limit = PLAN_LIMIT_ERROR_RATE;
        pc_pct(c, n, "error-rate", where, &ob->value);
    } else if (lim == 1) {
        ob->limit = PLAN_LIMIT_MIN_RATE;
        pc_rate(c, n, "min-rate", where, &ob->value);
    } else if (lim == 2) {
        ob->limit = PLAN_LIMIT_MAX_SYNC;
        pc_num(c, n, "max-sync", where, 0, 1, &ob->value);
    }
}

static void parse_brake(pctx_t *c, yaml_node_t *n, const char *where, plan_brake_t *b)
{
    const char *const *keys = plan_keys(PLAN_KEYS_BRAKE);
    static const char *const limits[] = {"error-rate", "unreachable", "saturation", NULL};
    b->pos = pc_pos(c, n);
    b->cls.index = -1;
    b->for_ns = INT64_C(10000000000);
    check_judge_keys(c, n, where, keys);
    if (pc_get(c, n, "class"))
        pc_ref(c, &b->cls, pc_get(c, n, "class"), where);
    pc_dur(c, n, "for", where, 0, &b->for_ns);
    const char *pk = NULL;
    int lim = one_limit(c, n, where, limits, &pk);
    if (lim == -2) {
        b->kind = PLAN_BRAKE_PERCENTILE;
        percentile_key(pk, &b->percentile);
        pc_dur(c, n, pk, where, 1, &b->max_ns);
    } else if (lim == 0) {
        b->kind = PLAN_BRAKE_ERROR_RATE;
        pc_pct(c, n, "error-rate", where, &b->value);
    } else if (lim == 1) {
        b->kind = PLAN_BRAKE_UNREACHABLE;
        pc_dur(c, n, "unreachable", where, 1, &b->max_ns);
    } else if (lim == 2) {
        bool on = false;
        b->kind = PLAN_BRAKE_SATURATION;
        if (pc_bool(c, n, "saturation", where, &on) && !on)
            pc_error(c, pc_get(c, n, "saturation"),
                     "%s.saturation: a brake that never acts (expected true, got 'false')", where);
    }
}

/* Both sections: a list of mappings appended to the plan's array. */
static void parse_list(pctx_t *c, yaml_node_t *n, const char *section, bool objectives)
{
    if (!pc_expect_seq(c, n, section))
        return;
    size_t count = (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
    plan_t *p = c->p;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = pc_node(c, n->data.sequence.items.start[i]);
        char where[64];
        snprintf(where, sizeof where, "%s[%zu]", section, i);
        if (!pc_expect_map(c, it, where))
            continue;
        if (objectives) {
            p->objectives =
                pc_grow(c, p->objectives, &p->n_objectives, 1, sizeof(plan_objective_t));
            if (!c->nomem)
                parse_objective(c, it, where, &p->objectives[p->n_objectives - 1]);
        } else {
            p->brakes = pc_grow(c, p->brakes, &p->n_brakes, 1, sizeof(plan_brake_t));
            if (!c->nomem)
                parse_brake(c, it, where, &p->brakes[p->n_brakes - 1]);
        }
        if (c->nomem)
            return;
    }
}

void plan_parse_objectives(pctx_t *c, yaml_node_t *n)
{
    parse_list(c, n, "objectives", true);
}

void plan_parse_brakes(pctx_t *c, yaml_node_t *n)
{
    parse_list(c, n, "brakes", false);
}

/* `accept: [generator-bound, few-samples, stopped-early]`: reasons for INCONCLUSIVE the plan
 * accepts as not standing in the way of a PASS. */
void plan_parse_accept(pctx_t *c, yaml_node_t *n)
{
    if (!pc_expect_seq(c, n, "accept"))
        return;
    for (yaml_node_item_t *it = n->data.sequence.items.start; it < n->data.sequence.items.top;
         it++) {
        yaml_node_t *v = pc_node(c, *it);
        const char *t = pc_text(v);
        int k = -1;
        for (int i = 0; t && plan_accept_names[i]; i++)
            if (strcmp(plan_accept_names[i], t) == 0)
                k = i;
        if (k < 0) {
            const char *near = t ? suggest_closest(t, plan_accept_names) : NULL;
            pc_error(c, v,
                     "accept: unknown reason (expected one of generator-bound, few-samples, "
                     "stopped-early, got '%s')%s%s%s",
                     t ? t : "a non-scalar", near ? " (did you mean '" : "", near ? near : "",
                     near ? "'?)" : "");
            continue;
        }
        c->p->accept |= 1u << k;
    }
}
