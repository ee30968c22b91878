/* Objectives: the plan's service-level objectives judged against a run's results.
 *
 * An objective is one limit on one class (or every class, "*"): a percentile of a metric under
 * a threshold, an error rate under a limit, or a minimum achieved rate. judge_evaluate turns
 * each objective into *checks*, one per scope: every phase in which the class ran (or only the
 * phase the objective names) and, unless a phase is named, the whole run. Each check holds the
 * observed value, the threshold and a verdict. A check with nothing measured is "no-data" and
 * counts as a failure: a gate that measured nothing must not pass. A percentile needs enough
 * samples to be resolved (p99 at least 100, p99.9 at least 1,000: 1 / (1 - p/100)); with fewer
 * it is "too-few". A latency objective fails when its class had no successful answer (2xx or
 * 3xx) at all, whatever the latency of its errors. Every class that ran and has no error-rate
 * objective of its own (nor a "*" one) is judged on a default error rate (1 %).
 * The run's *outcome* (judge_outcome) then weighs the checks and the evidence: FAIL when a
 * check failed or had no data; else INCONCLUSIVE when the evidence cannot support a pass
 * (squall could not offer the planned load, a percentile had too few samples, the run stopped
 * early), unless the plan accepts that reason; else PASS.
 * Glossary: "errors" are outcomes other than 2xx, 3xx and cancelled; "achieved rate" is the
 * number of answered requests (any outcome but cancelled) per second of the phase's elapsed
 * time; "scope" is a phase name or "run". Percentiles use hist_value_at (HDR, 3 digits). */
#ifndef SQUALL_JUDGE_H
#define SQUALL_JUDGE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "squall/out.h"
#include "squall/plan.h"
#include "squall/results.h"
#include "squall/verdict.h"

#define JUDGE_SECTION "objectives" /* the results.json section judge_json fills */

/* A phase as it ran: its name and the time it was issuing requests (stopped early, a phase is
 * shorter than planned; phases that never started have duration 0 and are skipped). */
typedef struct {
    const char *name;
    int64_t elapsed_ns;
} judge_phase_t;

enum judge_verdict { JUDGE_PASS, JUDGE_FAIL, JUDGE_NO_DATA, JUDGE_TOO_FEW };

/* One check: a small public value. Its strings are the judge_t's own (or static). */
typedef struct {
    size_t objective;  /* index in the objectives given */
    const char *text;  /* the objective as written: "p99 of response <= 20 ms" */
    const char *cls;   /* the class judged */
    const char *scope; /* a phase name, or "run" */
    double observed;   /* ms for percentiles, fraction for error rates, per second for rates */
    double threshold;  /* in the same unit */
    const char *unit;  /* "ms", "fraction" or "per_s" */
    int64_t samples;   /* requests the value is computed from */
    int64_t needed;    /* samples a percentile needs to be resolved (0: any) */
    bool implicit;     /* the default error-rate objective, not one the plan wrote */
    const char *why;   /* why it failed when not by its value ("no successful answer"), or NULL */
    enum judge_verdict verdict;
} judge_check_t;

/* Sends a whole window needs for a max-sync objective with bound `bound` to judge it: with
 * phases at random, R̄ exceeds the bound by chance at most once in 1,000 (judge_sync.c). */
int64_t judge_sync_min_sends(double bound);

/* The error rate every class is judged on when no objective of the plan covers it. */
#define JUDGE_DEFAULT_ERROR_RATE 0.01

/* Samples a p-th percentile needs to be resolved: 1 / (1 - p/100), so 100 for p99 and 1,000
 * for p99.9; 1 for the maximum (p100). */
int64_t judge_samples_needed(double percentile);

typedef struct {
    double default_error_rate; /* for classes no error-rate objective covers; 0 = none */
    /* The plan's watch classes: their error rate counts stream attempts (opened or refused),
     * and "*" latency objectives leave them out. Without the list, a class whose cells carry
     * open or propagation times is taken as one. */
    const char *const *watch_classes;
    size_t n_watch_classes;
    /* Classes the run adds on its own (the teardown's deletes, class "teardown"): neither "*"
     * nor the default error rate judges them; only an objective naming them does. */
    const char *const *internal_classes;
    size_t n_internal_classes;
} judge_opts_t;

typedef struct judge judge_t;

/* Evaluates every objective over res. phases lists the run's phases in order. Returns 0 and
 * *out, or SQ_ENOMEM. Never fails for lack of data (see "no-data" above). */
int judge_evaluate(const plan_objective_t *objs, size_t n_objs, const results_t *res,
                   const judge_phase_t *phases, size_t n_phases, const judge_opts_t *opts,
                   judge_t **out);
void judge_free(judge_t *j);

size_t judge_check_count(const judge_t *j);
const judge_check_t *judge_check_at(const judge_t *j, size_t i);
/* True when at least one check failed or had no data (the run then exits 1). */
bool judge_failed(const judge_t *j);

/* ---- the run's outcome ----------------------------------------------------------------------- */


/* What else a verdict rests on besides the checks. */
typedef struct {
    int64_t generator_bound_s;   /* seconds squall itself could not offer the planned load */
    const char *generator_seconds; /* which, e.g. "4, 5, 9" (may be NULL) */
    const char *generator_why;   /* the last reason, e.g. "schedule lag p99 12.3 ms" */
    bool stopped_early;          /* a signal, a brake, an unreachable target, a failure */
    const char *stop_why;
    unsigned accept;             /* 1 << enum plan_accept: reasons the plan accepts */
} judge_evidence_t;

/* The outcome and, into reasons (a JSON array, appended to), one sentence per reason; a reason
 * the plan accepts goes into accepted instead (may be NULL), so a pass still says what it
 * rests on. */
enum judge_outcome judge_outcome(const judge_t *j, const judge_evidence_t *ev, json_t *reasons,
                                 json_t *accepted);
const char *judge_outcome_name(enum judge_outcome o); /* "pass", "fail", "inconclusive" */
/* The verdict as the terminal prints it: "PASS", "FAIL", "INCONCLUSIVE". */
const char *judge_outcome_word(enum judge_outcome o);

/* The results.json section: {"passed": bool, "objectives": N, "checks": [{objective, text,
 * class, scope, observed, threshold, unit, samples, needed, why, default, verdict:
 * "pass"|"fail"|"no-data"|"too-few"}]}. A new reference; NULL when out of memory. */
json_t *judge_json(const judge_t *j);
/* The verdict table for the end of a run (results stream); nothing when there are no checks. */
void judge_print(const judge_t *j, out_t *o);

const char *judge_verdict_name(enum judge_verdict v);

/* ---- the judgement's inputs as data --------------------------------------------------------- */

#define JUDGE_INPUTS_SECTION "judgement" /* the results.json section judge_inputs_json fills */

/* Everything a verdict is judged from besides the results themselves: the plan's objectives,
 * the reasons it accepts, the options and the phases judged (their names; elapsed_ns is filled
 * in from the "phases" section when saved results are judged again). Written into every run's
 * results.json, so that results judged later (a merge of shards) are judged exactly as the run
 * judged itself, without the plan. */
typedef struct {
    const plan_objective_t *objectives;
    size_t n_objectives;
    unsigned accept; /* 1 << enum plan_accept */
    judge_opts_t opts;
    const judge_phase_t *phases;
    size_t n_phases;
    void *mem; /* owned memory of judge_inputs_init_json; NULL for inputs a caller points */
} judge_inputs_t;

/* The "judgement" section: {"objectives": [{class, phase, metric, limit, percentile, max_ms |
 * value}], "accept": [...], "default_error_rate", "watch_classes": [...], "internal_classes": [...] (absent in
 * results of an older squall: none), "phases": [...]}.
 * A new reference; NULL when out of memory. */
json_t *judge_inputs_json(const judge_inputs_t *in);
/* Reads a "judgement" section back into *in (release it with judge_inputs_close). SQ_EPARSE
 * with a message in err (the key and what is wrong) when it is malformed; SQ_ENOMEM. */
int judge_inputs_init_json(judge_inputs_t *in, const json_t *section, char *err, size_t cap);
void judge_inputs_close(judge_inputs_t *in);

/* Judges saved results from their own sections exactly as a run judges itself (judge_evaluate,
 * then judge_outcome): the "judgement" section, each judged phase's elapsed time from "phases",
 * the generator-bound seconds from "generator", and "stopped early" from meta (interrupted).
 * Reasons and accepted reasons are appended as by judge_outcome. SQ_ENOTFOUND when res has no
 * judgement section (written by an older squall); SQ_EPARSE (err says why) when it is
 * malformed; SQ_ENOMEM. */
int judge_results(const results_t *res, judge_t **j, enum judge_outcome *outcome, json_t *reasons,
                  json_t *accepted, char *err, size_t cap);

#endif
