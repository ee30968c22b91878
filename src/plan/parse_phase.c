/* The plan's `phases` list: each phase's duration and its sources of traffic (open-loop rate,
 * ramp or steps with a mix; closed-loop clients; a fleet; watches; churn; teardown; replay). */
#include <stdio.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"

static void parse_mix(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    char w[200];
    snprintf(w, sizeof w, "%s.mix", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, NULL);
    size_t count = (size_t)(n->data.mapping.pairs.top - n->data.mapping.pairs.start);
    ph->mix = pmem_alloc(c, (count ? count : 1) * sizeof(*ph->mix));
    if (!ph->mix)
        return;
    for (size_t i = 0; i < count; i++) {
        yaml_node_pair_t *pr = &n->data.mapping.pairs.start[i];
        yaml_node_t *k = pc_node(c, pr->key);
        plan_mix_t *m = &ph->mix[ph->n_mix];
        if (!pc_text(k) || !pc_ref(c, &m->cls, k, w))
            continue;
        if (!pc_num(c, n, pc_text(k), w, 1e-9, 1e9, &m->weight))
            continue;
        ph->n_mix++;
    }
    if (ph->n_mix == 0 && count == 0)
        pc_error(c, n, "%s: empty mix (expected at least one class: weight, got {})", w);
}

static void parse_ramp(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_RAMP);
    char w[200];
    snprintf(w, sizeof w, "%s.ramp", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, keys);
    pc_rate(c, n, "from", w, &ph->ramp_from);
    pc_rate(c, n, "to", w, &ph->ramp_to);
    if (!pc_get(c, n, "from") || !pc_get(c, n, "to"))
        pc_error(c, n, "%s: incomplete ramp (expected from and to, got %s)", w,
                 pc_get(c, n, "from") ? "only from"
                 : pc_get(c, n, "to") ? "only to"
                                      : "neither");
}

static void parse_steps(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_STEP);
    char w[200];
    snprintf(w, sizeof w, "%s.steps", where);
    if (!pc_expect_seq(c, n, w))
        return;
    size_t count = (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
    if (count == 0) {
        pc_error(c, n, "%s: no steps (expected a list of {rate, for}, got [])", w);
        return;
    }
    ph->steps = pmem_alloc(c, count * sizeof(*ph->steps));
    if (!ph->steps)
        return;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = pc_node(c, n->data.sequence.items.start[i]);
        char wi[240];
        snprintf(wi, sizeof wi, "%s[%zu]", w, i);
        if (!pc_expect_map(c, it, wi))
            continue;
        pc_check_keys(c, it, wi, keys);
        plan_step_t *s = &ph->steps[ph->n_steps];
        s->pos = pc_pos(c, it);
        bool ok = pc_rate(c, it, "rate", wi, &s->rate);
        ok = pc_dur(c, it, "for", wi, 1, &s->for_ns) && ok;
        if (!pc_get(c, it, "rate") || !pc_get(c, it, "for"))
            pc_error(c, it, "%s: incomplete step (expected rate and for, got %s)", wi,
                     pc_get(c, it, "rate")  ? "only rate"
                     : pc_get(c, it, "for") ? "only for"
                                            : "neither");
        else if (ok)
            ph->n_steps++;
    }
}

static void parse_clients(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_CLIENTS);
    char w[200];
    snprintf(w, sizeof w, "%s.clients", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, keys);
    ph->clients.on = true;
    if (!pc_get(c, n, "count"))
        pc_error(c, n, "%s: missing key 'count' (expected a number of clients, got nothing)", w);
    pc_int(c, n, "count", w, 1, 100000, &ph->clients.count);
    pc_dur(c, n, "think", w, 0, &ph->clients.think_ns);
}

/* retry: {policy, base, cap} of `n` when given; refused where no action retries (`allowed`
 * false: a send item on the fixed schedule). */
static void parse_retry(pctx_t *c, yaml_node_t *n, const char *w, enum plan_keyset keys,
                        bool allowed, plan_retry_t *r)
{
    yaml_node_t *v = pc_get(c, n, "retry");
    if (!v)
        return;
    if (!allowed) {
        pc_error(c, pc_get_key(c, n, "retry"),
                 "%s: key 'retry' needs next: after-answer (a fixed schedule never retries; "
                 "expected next: after-answer, got fixed)",
                 w);
        return;
    }
    char wr[300];
    snprintf(wr, sizeof wr, "%s.retry", w);
    pc_backoff(c, v, wr, keys, &r->policy, &r->base_ns, &r->cap_ns);
}

/* send: CLASS, or a list whose items are CLASS or {class, every, next, retry}. */
static void parse_send(pctx_t *c, yaml_node_t *n, const char *w, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_SEND);
    char ws[240];
    snprintf(ws, sizeof ws, "%s.send", w);
    bool seq = n->type == YAML_SEQUENCE_NODE;
    size_t count = seq ? (size_t)(n->data.sequence.items.top - n->data.sequence.items.start) : 1;
    ph->fleet.send = pmem_alloc(c, (count ? count : 1) * sizeof(*ph->fleet.send));
    if (!ph->fleet.send)
        return;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = seq ? pc_node(c, n->data.sequence.items.start[i]) : n;
        plan_send_t *s = &ph->fleet.send[ph->fleet.n_send];
        s->every_ns = ph->fleet.every_ns;
        s->next = ph->fleet.next;
        s->jitter = ph->fleet.jitter;
        s->retry = ph->fleet.retry;
        char wi[280];
        snprintf(wi, sizeof wi, seq ? "%s[%zu]" : "%s", ws, i);
        if (it->type == YAML_MAPPING_NODE) {
            pc_check_keys(c, it, wi, keys);
            yaml_node_t *cls = pc_get(c, it, "class");
            if (!cls) {
                pc_error(c, it, "%s: missing key 'class' (expected a request class, got nothing)",
                         wi);
                continue;
            }
            pc_dur(c, it, "every", wi, 1, &s->every_ns);
            int nx = (int)s->next;
            pc_enum(c, it, "next", wi, plan_next_names, &nx);
            s->next = (enum plan_next)nx;
            pc_pct(c, it, "jitter", wi, &s->jitter);
            if (pc_get_key(c, it, "jitter") && ph->fleet.timing != PLAN_TIMING_JITTER &&
                s->next != PLAN_NEXT_AFTER_ANSWER)
                pc_error(c, pc_get_key(c, it, "jitter"),
                         "%s: key 'jitter' needs timing jitter or next: after-answer (expected "
                         "one of them, got next fixed)",
                         wi);
            parse_retry(c, it, wi, PLAN_KEYS_SEND_RETRY, s->next == PLAN_NEXT_AFTER_ANSWER,
                        &s->retry);
            if (!pc_ref(c, &s->cls, cls, wi))
                continue;
        } else if (!pc_ref(c, &s->cls, it, wi)) {
            continue;
        }
        ph->fleet.n_send++;
    }
    if (count == 0)
        pc_error(c, n, "%s: nothing to send (expected a class or a list of them, got [])", ws);
}

/* Whether any of the fleet's send items takes its next instant from its answer. */
static bool any_after_answer(const plan_phase_t *ph)
{
    for (size_t i = 0; i < ph->fleet.n_send; i++)
        if (ph->fleet.send[i].next == PLAN_NEXT_AFTER_ANSWER)
            return true;
    return false;
}

static void parse_fleet(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_FLEET);
    static const char *const timings[] = {"spread", "jitter", "aligned", NULL};
    char w[200];
    snprintf(w, sizeof w, "%s.fleet", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, keys);
    ph->fleet.on = true;
    ph->fleet.jitter = 0.1;
    static const char *const required[] = {"agents", "every", "send"};
    for (int i = 0; i < 3; i++)
        if (!pc_get(c, n, required[i]))
            pc_error(c, n, "%s: missing key '%s' (expected agents, every and send, got no %s)", w,
                     required[i], required[i]);
    pc_int(c, n, "agents", w, 1, 10000000, &ph->fleet.agents);
    pc_dur(c, n, "every", w, 1, &ph->fleet.every_ns);
    int t = 0;
    pc_enum(c, n, "timing", w, timings, &t);
    ph->fleet.timing = (enum plan_timing)t;
    pc_pct(c, n, "jitter", w, &ph->fleet.jitter);
    pc_pct(c, n, "drift", w, &ph->fleet.drift);
    pc_dur(c, n, "join", w, 0, &ph->fleet.join_ns);
    pc_dur(c, n, "leave", w, 0, &ph->fleet.leave_ns);
    static const char *const conns[] = {"default", "shared", "per-agent", NULL};
    int cn = PLAN_CONNS_DEFAULT;
    pc_enum(c, n, "connections", w, conns, &cn);
    ph->fleet.conns = (enum plan_fleet_conns)cn;
    ph->fleet.watch.index = -1;
    if (pc_get(c, n, "watch")) {
        char ww[240];
        snprintf(ww, sizeof ww, "%s.watch", w);
        pc_ref(c, &ph->fleet.watch, pc_get(c, n, "watch"), ww);
    }
    int nx = PLAN_NEXT_FIXED;
    pc_enum(c, n, "next", w, plan_next_names, &nx);
    ph->fleet.next = (enum plan_next)nx;
    ph->fleet.retry = (plan_retry_t){.policy = PLAN_BACKOFF_FULL_JITTER,
                                     .base_ns = PLAN_RETRY_BASE_NS,
                                     .cap_ns = PLAN_RETRY_CAP_NS};
    parse_retry(c, n, w, PLAN_KEYS_RETRY, true, &ph->fleet.retry);
    if (pc_get(c, n, "send"))
        parse_send(c, pc_get(c, n, "send"), w, ph);
    bool after = any_after_answer(ph);
    if (pc_get_key(c, n, "jitter") && ph->fleet.timing != PLAN_TIMING_JITTER && !after)
        pc_error(c, pc_get_key(c, n, "jitter"),
                 "%s: key 'jitter' needs timing jitter or an action with next: after-answer "
                 "(expected timing: jitter or next: after-answer, got timing %s, next fixed)",
                 w, timings[t]);
    if (pc_get_key(c, n, "retry") && !after && ph->fleet.n_send)
        pc_error(c, pc_get_key(c, n, "retry"),
                 "%s: key 'retry' needs an action with next: after-answer (a fixed schedule never "
                 "retries; expected next: after-answer, got fixed)",
                 w);
}

/* fleet.watch: every agent keeps its own watch, a set of `agents` streams; without an `open`
 * spread of its own it opens as the agents join. Resolution checks it is a watch class. */
static void add_agent_watches(pctx_t *c, plan_phase_t *ph)
{
    plan_watch_set_t *sets = pmem_alloc(c, (ph->watches.n_sets + 1) * sizeof(*sets));
    if (!sets)
        return;
    for (size_t i = 0; i < ph->watches.n_sets; i++)
        sets[i] = ph->watches.sets[i];
    sets[ph->watches.n_sets] =
        (plan_watch_set_t){.cls = ph->fleet.watch, .count = ph->fleet.agents};
    ph->watches.sets = sets;
    ph->watches.n_sets++;
    if (ph->watches.spread_ns == 0)
        ph->watches.spread_ns = ph->fleet.join_ns;
}

/* watches: {CLASS: count, ..., open: at-once | spread DURATION}. */
static void parse_watches(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    char w[200];
    snprintf(w, sizeof w, "%s.watches", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, NULL);
    size_t count = (size_t)(n->data.mapping.pairs.top - n->data.mapping.pairs.start);
    ph->watches.sets = pmem_alloc(c, (count ? count : 1) * sizeof(*ph->watches.sets));
    if (!ph->watches.sets)
        return;
    for (size_t i = 0; i < count; i++) {
        yaml_node_pair_t *pr = &n->data.mapping.pairs.start[i];
        yaml_node_t *k = pc_node(c, pr->key), *v = pc_node(c, pr->value);
        const char *name = pc_text(k);
        if (!name)
            continue;
        if (strcmp(name, plan_keys(PLAN_KEYS_WATCHES)[0]) == 0) { /* "open" */
            const char *t = pc_text(v);
            if (t && strncmp(t, "spread ", 7) == 0) {
                yaml_node_t tmp = *v;
                tmp.data.scalar.value = (yaml_char_t *)t + 7;
                tmp.data.scalar.length -= 7;
                char wo[240];
                snprintf(wo, sizeof wo, "%s.open", w);
                pc_node_dur(c, &tmp, wo, 1, &ph->watches.spread_ns);
            } else if (!t || strcmp(t, "at-once") != 0) {
                char got[64];
                pc_describe(v, got, sizeof got);
                pc_error(c, v,
                         "%s.open: unknown value (expected at-once or spread DURATION, got "
                         "%s)",
                         w, got);
            }
            continue;
        }
        plan_watch_set_t *s = &ph->watches.sets[ph->watches.n_sets];
        if (pc_ref(c, &s->cls, k, w) && pc_int(c, n, name, w, 1, 1000000, &s->count))
            ph->watches.n_sets++;
    }
    if (ph->watches.n_sets == 0 && count == 0)
        pc_error(c, n, "%s: no watches (expected CLASS: count, got {})", w);
}

static void parse_churn(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    const char *const *keys = plan_keys(PLAN_KEYS_CHURN);
    char w[200];
    snprintf(w, sizeof w, "%s.churn", where);
    if (!pc_expect_map(c, n, w))
        return;
    pc_check_keys(c, n, w, keys);
    ph->churn.on = true;
    ph->churn.tolerance = 0.1;
    for (int i = 0; i < 4; i++)
        if (!pc_get(c, n, keys[i]))
            pc_error(c, n,
                     "%s: missing key '%s' (expected create, delete, rate and population, "
                     "got no %s)",
                     w, keys[i], keys[i]);
    if (pc_get(c, n, "create"))
        pc_ref(c, &ph->churn.create, pc_get(c, n, "create"), w);
    if (pc_get(c, n, "delete"))
        pc_ref(c, &ph->churn.del, pc_get(c, n, "delete"), w);
    pc_rate(c, n, "rate", w, &ph->churn.rate);
    pc_int(c, n, "population", w, 1, 100000000, &ph->churn.population);
    pc_pct(c, n, "tolerance", w, &ph->churn.tolerance);
}

/* teardown: true, or {rate: R}. */
static void parse_teardown(pctx_t *c, yaml_node_t *phase, const char *where, plan_phase_t *ph)
{
    yaml_node_t *n = pc_get(c, phase, "teardown");
    if (n->type == YAML_MAPPING_NODE) {
        const char *const *keys = plan_keys(PLAN_KEYS_TEARDOWN);
        char w[200];
        snprintf(w, sizeof w, "%s.teardown", where);
        pc_check_keys(c, n, w, keys);
        ph->teardown.on = true;
        pc_rate(c, n, "rate", w, &ph->teardown.rate);
        return;
    }
    pc_bool(c, phase, "teardown", where, &ph->teardown.on);
}

static void parse_shape(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    static const char *const shapes[] = {"rate", "ramp", "steps"};
    static const char *const arrivals[] = {"even", "poisson", NULL};
    const char *first = NULL;
    for (int i = 0; i < 3; i++) {
        yaml_node_t *k = pc_get_key(c, n, shapes[i]);
        if (!k)
            continue;
        if (first) {
            pc_error(c, k,
                     "%s: one load shape per phase (expected one of rate, ramp, steps, got %s "
                     "and %s)",
                     where, first, shapes[i]);
            continue;
        }
        first = shapes[i];
        ph->shape = (enum plan_load_shape)(PLAN_LOAD_CONSTANT + i);
        if (i == 0)
            pc_rate(c, n, "rate", where, &ph->rate);
        else if (i == 1)
            parse_ramp(c, pc_get(c, n, "ramp"), where, ph);
        else
            parse_steps(c, pc_get(c, n, "steps"), where, ph);
    }
    int a = 0;
    if (pc_enum(c, n, "arrivals", where, arrivals, &a))
        ph->arrivals = (enum plan_arrivals)a;
}

/* A key that only makes sense with another one present. */
static void needs(pctx_t *c, yaml_node_t *n, const char *where, const char *key, bool ok,
                  const char *expected)
{
    yaml_node_t *k = pc_get_key(c, n, key);
    if (k && !ok)
        pc_error(c, k,
                 "%s: key '%s' has nothing to drive (expected %s in the same phase, got "
                 "none)",
                 where, key, expected);
}

/* Rules across a phase's keys: sources present, compatible, and bounded in time. */
static void check_sources(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph)
{
    bool open = ph->shape != PLAN_LOAD_NONE, closed = ph->clients.on;
    bool mix = pc_get(c, n, "mix") != NULL;
    needs(c, n, where, "arrivals", open, "rate, ramp or steps");
    needs(c, n, where, "mix", open || closed, "rate, ramp, steps or clients");
    if (open && closed)
        pc_error(c, pc_get_key(c, n, "clients"),
                 "%s: open and closed loop in one phase (expected rate, ramp, steps or clients, "
                 "got both)",
                 where);
    if ((open || closed) && !mix)
        pc_error(c, n,
                 "%s: missing key 'mix' (expected the classes to send, like {read: 9, "
                 "write: 1}, got nothing)",
                 where);
    bool timed = open || closed || ph->fleet.on || ph->watches.n_sets || ph->churn.on;
    if (!timed && !ph->teardown.on && !ph->replay.on && !pc_get(c, n, "watches")) {
        pc_error(c, n,
                 "%s: no source of traffic (expected one of rate, ramp, steps, clients, "
                 "fleet, watches, churn, teardown, replay, got none)",
                 where);
        return;
    }
    if (ph->shape == PLAN_LOAD_STEPS && !ph->has_duration) {
        for (size_t i = 0; i < ph->n_steps; i++)
            ph->duration_ns += ph->steps[i].for_ns;
        ph->has_duration = ph->n_steps > 0;
    } else if (timed && !ph->has_duration && !pc_get(c, n, "duration")) {
        pc_error(c, n, "%s: missing key 'duration' (expected a duration like 5m, got nothing)",
                 where);
    }
    if (ph->has_duration && ph->fleet.leave_ns > ph->duration_ns)
        pc_error(c, pc_get(c, pc_get(c, n, "fleet"), "leave"),
                 "%s.fleet.leave: longer than the phase (expected at most %.6gs, got %.6gs)", where,
                 ph->duration_ns / 1e9, ph->fleet.leave_ns / 1e9);
    if (ph->has_duration && ph->fleet.join_ns > ph->duration_ns)
        pc_error(c, pc_get(c, pc_get(c, n, "fleet"), "join"),
                 "%s.fleet.join: longer than the phase (expected at most %.6gs, got %.6gs)", where,
                 ph->duration_ns / 1e9, ph->fleet.join_ns / 1e9);
    if (ph->has_duration && ph->watches.spread_ns > ph->duration_ns)
        pc_error(c, pc_get(c, pc_get(c, n, "watches"), "open"),
                 "%s.watches.open: longer than the phase (expected at most %.6gs, got %.6gs)",
                 where, ph->duration_ns / 1e9, ph->watches.spread_ns / 1e9);
}

static void parse_one(pctx_t *c, yaml_node_t *n, size_t index)
{
    char where[128];
    snprintf(where, sizeof where, "phases[%zu]", index);
    if (!pc_expect_map(c, n, where))
        return;
    plan_phase_t ph = {.pos = pc_pos(c, n), .arrivals = PLAN_ARRIVALS_EVEN};
    yaml_node_t *name = pc_get(c, n, "name");
    if (!name)
        pc_error(c, n, "%s: missing key 'name' (expected a phase name, got nothing)", where);
    else if (pc_name_ok(c, name, where, "phase")) {
        ph.name = pmem_strdup(c, pc_text(name));
        snprintf(where, sizeof where, "phases.%s", ph.name);
        int prev = plan_find_phase(c->p, ph.name);
        if (prev >= 0)
            pc_error(c, name, "%s: phase defined twice (first at %s:%d:%d)", where,
                     c->p->phases[prev].pos.file, c->p->phases[prev].pos.line,
                     c->p->phases[prev].pos.col);
    }
    pc_check_keys(c, n, where, plan_keys(PLAN_KEYS_PHASE));
    ph.has_duration = pc_dur(c, n, "duration", where, 1, &ph.duration_ns);
    parse_shape(c, n, where, &ph);
    if (pc_get(c, n, "mix"))
        parse_mix(c, pc_get(c, n, "mix"), where, &ph);
    if (pc_get(c, n, "clients"))
        parse_clients(c, pc_get(c, n, "clients"), where, &ph);
    if (pc_get(c, n, "fleet"))
        parse_fleet(c, pc_get(c, n, "fleet"), where, &ph);
    if (pc_get(c, n, "watches"))
        parse_watches(c, pc_get(c, n, "watches"), where, &ph);
    if (ph.fleet.on && ph.fleet.watch.name)
        add_agent_watches(c, &ph);
    if (pc_get(c, n, "churn"))
        parse_churn(c, pc_get(c, n, "churn"), where, &ph);
    if (pc_get(c, n, "teardown"))
        parse_teardown(c, n, where, &ph);
    if (pc_get(c, n, "replay"))
        plan_parse_replay(c, pc_get(c, n, "replay"), where, &ph);
    check_sources(c, n, where, &ph);
    if (pc_get(c, n, "actions"))
        plan_parse_actions(c, pc_get(c, n, "actions"), where, &ph);
    c->p->phases = pc_grow(c, c->p->phases, &c->p->n_phases, 1, sizeof(ph));
    if (!c->nomem)
        c->p->phases[c->p->n_phases - 1] = ph;
}

void plan_parse_phases(pctx_t *c, yaml_node_t *n)
{
    c->phases_given = true;
    if (!pc_expect_seq(c, n, "phases"))
        return;
    size_t count = (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
    size_t base = c->p->n_phases; /* phases from included files come first */
    if (count == 0)
        pc_error(c, n, "phases: empty list (expected at least one phase, got [])");
    for (size_t i = 0; i < count; i++)
        parse_one(c, pc_node(c, n->data.sequence.items.start[i]), base + i);
}
