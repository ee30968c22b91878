/* Lookups every part of the plan shares: a class or a phase by name, and the names of enum values
 * as written in plans. Depends on nothing else in src/plan/, so parsers and resolve.c both sit
 * above it. */
#include <string.h>

#include "plan_int.h"

const char *const plan_kind_names[] = {"get", "list", "write", "watch", NULL};
const char *const plan_accept_names[] = {"generator-bound", "few-samples", "stopped-early", NULL};
const char *const plan_backoff_names[] = {
    "immediate", "fixed", "exponential", "full-jitter", "equal-jitter", "decorrelated", NULL};

const char *const plan_next_names[] = {"fixed", "after-answer", NULL};

const char *plan_next_name(enum plan_next n)
{
    return plan_next_names[n];
}

const char *plan_kind_name(enum plan_kind k)
{
    return plan_kind_names[k];
}

bool plan_req_may_create(const plan_req_t *r)
{
    return r->kind == PLAN_WRITE && !r->write.deletes &&
           (!r->write.method || strcmp(r->write.method, "DELETE"));
}

const char *plan_backoff_name(enum plan_backoff b)
{
    return plan_backoff_names[b];
}

int plan_find_req(const plan_t *p, const char *name)
{
    for (size_t i = 0; i < p->n_reqs; i++)
        if (p->reqs[i].name && strcmp(p->reqs[i].name, name) == 0)
            return (int)i;
    return -1;
}

int plan_find_phase(const plan_t *p, const char *name)
{
    for (size_t i = 0; i < p->n_phases; i++)
        if (p->phases[i].name && strcmp(p->phases[i].name, name) == 0)
            return (int)i;
    return -1;
}
