/* Internals of the judge shared by its files: a judge's checks and strings (judge_checks.c),
 * the objectives (judge.c) and the synchronisation objective (judge_sync.c). */
#ifndef SQUALL_JUDGE_INT_H
#define SQUALL_JUDGE_INT_H

#include "squall/judge.h"

/* judge_checks.c: the checks, and the strings they point to, owned by the judge. */
struct judge {
    judge_check_t *checks;
    size_t n, cap;
    char **strings; /* texts and class names the checks point to */
    size_t n_strings;
    const judge_opts_t *opts; /* while evaluating (judge.c) */
};

/* A new zeroed check at the end of j's list, or NULL when out of memory. */
judge_check_t *judge_add_check(judge_t *j);
/* A copy of s that j owns (freed with it), or NULL when out of memory. */
char *judge_keep(judge_t *j, const char *s);

/* The checks of a max-sync objective (PLAN_LIMIT_MAX_SYNC) over res's "sync" section, described
 * by text: one per (judged phase, fleet action of its class) and one per class for the run
 * unless the objective names a phase. SQ_ENOMEM. */
int judge_sync(judge_t *j, size_t oi, const plan_objective_t *ob, const char *text,
               const results_t *res, const judge_phase_t *phases, size_t n_phases);

#endif
