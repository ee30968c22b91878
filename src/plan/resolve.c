/* Checks that need the whole plan: every class or phase named somewhere exists and has the
 * right kind, and the target is complete. Runs once, after every file has been read. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"
#include "squall/suggest.h"

enum need { NEED_ANY, NEED_NOT_WATCH, NEED_WATCH, NEED_LIST, NEED_CREATES, NEED_DELETES };

static const char *const need_text[] = {
    "any class",    "a get, list or write class",       "a watch class",
    "a list class", "a write class with creates: true", "a write class with deletes: true"};

static bool kind_fits(const plan_req_t *r, enum need need)
{
    switch (need) {
    case NEED_NOT_WATCH:
        return r->kind != PLAN_WATCH;
    case NEED_WATCH:
        return r->kind == PLAN_WATCH;
    case NEED_LIST:
        return r->kind == PLAN_LIST;
    case NEED_CREATES:
        return r->kind == PLAN_WRITE && r->write.creates;
    case NEED_DELETES:
        return r->kind == PLAN_WRITE && r->write.deletes;
    default:
        return true;
    }
}

/* Resolves a class reference; "*" is allowed only where `star` says so. */
static void resolve_class(pctx_t *c, plan_ref_t *ref, const char *what, enum need need, bool star,
                          const char *const *names)
{
    if (!ref->name)
        return;
    if (star && strcmp(ref->name, "*") == 0) {
        ref->index = -1;
        return;
    }
    ref->index = plan_find_req(c->p, ref->name);
    if (ref->index < 0) {
        const char *near = suggest_closest(ref->name, names);
        if (near)
            pc_error_at(c, ref->pos, "%s: unknown class '%s' (did you mean '%s'?)", what, ref->name,
                        near);
        else
            pc_error_at(c, ref->pos, "%s: unknown class '%s' (expected a name under requests)",
                        what, ref->name);
        return;
    }
    const plan_req_t *r = &c->p->reqs[ref->index];
    if (!kind_fits(r, need))
        pc_error_at(c, ref->pos, "%s: class '%s' cannot be used here (expected %s, got a %s)", what,
                    ref->name, need_text[need], plan_kind_name(r->kind));
}

static void resolve_phase_refs(pctx_t *c, plan_phase_t *ph, const char *const *names)
{
    char w[128];
    snprintf(w, sizeof w, "phases.%s", ph->name ? ph->name : "?");
    char wm[160];
    snprintf(wm, sizeof wm, "%s.mix", w);
    for (size_t i = 0; i < ph->n_mix; i++)
        resolve_class(c, &ph->mix[i].cls, wm, NEED_NOT_WATCH, false, names);
    snprintf(wm, sizeof wm, "%s.fleet.send", w);
    for (size_t i = 0; i < ph->fleet.n_send; i++)
        resolve_class(c, &ph->fleet.send[i].cls, wm, NEED_NOT_WATCH, false, names);
    snprintf(wm, sizeof wm, "%s.watches", w);
    for (size_t i = 0; i < ph->watches.n_sets; i++)
        resolve_class(c, &ph->watches.sets[i].cls, wm, NEED_WATCH, false, names);
    snprintf(wm, sizeof wm, "%s.churn.create", w);
    resolve_class(c, &ph->churn.create, wm, NEED_CREATES, false, names);
    snprintf(wm, sizeof wm, "%s.churn.delete", w);
    resolve_class(c, &ph->churn.del, wm, NEED_DELETES, false, names);
}

/* Whether class cls (-1: any) is a fleet action (phases[].fleet.send) of phase ph (-1: any). */
static bool fleet_sends(const plan_t *p, int cls, int ph)
{
    for (size_t i = 0; i < p->n_phases; i++)
        for (size_t k = 0; p->phases[i].fleet.on && k < p->phases[i].fleet.n_send; k++)
            if ((ph < 0 || (size_t)ph == i) &&
                (cls < 0 || p->phases[i].fleet.send[k].cls.index == cls))
                return true;
    return false;
}

/* A max-sync objective gauges a fleet action: its class must be one some fleet sends (in its
 * phase, when it names one). */
static void check_sync_objective(pctx_t *c, size_t i)
{
    const plan_objective_t *ob = &c->p->objectives[i];
    bool any = !ob->cls.name || strcmp(ob->cls.name, "*") == 0;
    if (ob->limit != PLAN_LIMIT_MAX_SYNC || (!any && ob->cls.index < 0) ||
        (ob->phase.name && ob->phase.index < 0))
        return; /* not one, or an unknown name already reported */
    if (!fleet_sends(c->p, any ? -1 : ob->cls.index, ob->phase.name ? ob->phase.index : -1))
        pc_error_at(c, ob->pos,
                    "objectives[%zu]: max-sync gauges a fleet action (expected a class that "
                    "phases[].fleet.send names%s%s, got %s)",
                    i, ob->phase.name ? " in phase " : "", ob->phase.name ? ob->phase.name : "",
                    any ? "\"*\" in a plan without a fleet" : ob->cls.name);
}

static void resolve_judges(pctx_t *c, const char *const *names)
{
    plan_t *p = c->p;
    for (size_t i = 0; i < p->n_objectives; i++) {
        plan_objective_t *ob = &p->objectives[i];
        char w[64];
        snprintf(w, sizeof w, "objectives[%zu].class", i);
        resolve_class(c, &ob->cls, w, NEED_ANY, true, names);
        if (ob->phase.name && (ob->phase.index = plan_find_phase(p, ob->phase.name)) < 0)
            pc_error_at(c, ob->phase.pos,
                        "objectives[%zu].phase: unknown phase '%s' "
                        "(expected a name under phases)",
                        i, ob->phase.name);
        bool watch = ob->cls.index >= 0 && p->reqs[ob->cls.index].kind == PLAN_WATCH;
        bool stream_metric =
            ob->metric == PLAN_METRIC_OPEN || ob->metric == PLAN_METRIC_PROPAGATION;
        if (ob->cls.index >= 0 && stream_metric && !watch)
            pc_error_at(c, ob->pos,
                        "objectives[%zu]: metric '%s' is measured on watches "
                        "(expected a watch class, got a %s)",
                        i, ob->metric == PLAN_METRIC_OPEN ? "open" : "propagation",
                        plan_kind_name(p->reqs[ob->cls.index].kind));
    }
    for (size_t i = 0; i < p->n_objectives; i++)
        check_sync_objective(c, i);
    for (size_t i = 0; i < p->n_brakes; i++) {
        char w[64];
        snprintf(w, sizeof w, "brakes[%zu].class", i);
        resolve_class(c, &p->brakes[i].cls, w, NEED_ANY, true, names);
    }
}

static void check_target(pctx_t *c)
{
    plan_target_t *t = &c->p->target;
    if (!t->url && !c->url_given)
        pc_error_at(c, t->pos,
                    "target.url: missing (expected an http:// or https:// URL like "
                    "http://127.0.0.1:7070, got nothing)");
    bool tls = t->tls.ca || t->tls.cert || t->tls.insecure;
    if (t->url && tls && !t->https)
        pc_error_at(c, t->pos,
                    "target.tls: TLS settings on a plain URL (expected an https:// "
                    "url, got %s)",
                    t->url);
    for (size_t i = 0; i < c->p->n_reqs; i++)
        if (c->p->reqs[i].timeout_ns == 0 && c->p->reqs[i].kind != PLAN_WATCH)
            c->p->reqs[i].timeout_ns = t->timeout_ns;
}

void plan_check_whole(pctx_t *c)
{
    plan_t *p = c->p;
    const char **names = calloc(p->n_reqs + 1, sizeof(*names));
    if (!names) {
        c->nomem = true;
        return;
    }
    for (size_t i = 0; i < p->n_reqs; i++)
        names[i] = p->reqs[i].name;
    check_target(c);
    for (size_t i = 0; i < p->n_reqs; i++)
        if (p->reqs[i].kind == PLAN_WATCH) {
            char w[128];
            snprintf(w, sizeof w, "requests.%s.relist", p->reqs[i].name);
            resolve_class(c, &p->reqs[i].watch.relist, w, NEED_LIST, false, names);
        }
    for (size_t i = 0; i < p->n_phases; i++)
        resolve_phase_refs(c, &p->phases[i], names);
    resolve_judges(c, names);
    if (p->n_phases == 0 && !c->phases_given)
        pc_error_at(c, (plan_pos_t){p->path, 1, 1},
                    "phases: missing (expected a list of at least one phase, got nothing)");
    free(names);
}
