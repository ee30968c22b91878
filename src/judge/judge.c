/* Objectives judged against results: every objective becomes one check per phase its class ran
 * in and one for the whole run, each with the observed value, the threshold and a verdict. */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "judge_int.h"
#include "squall/err.h"
#include "squall/judge.h"
#include "squall/value.h"

/* What one (class, scope) gathered from the cells: counts and the metric's histogram. For a
 * watch class the counts are stream attempts: opened (its open time was recorded) or refused
 * (an error outcome: a status other than 2xx, or no connection). */
typedef struct {
    int64_t answered, errors, successes;
    double elapsed_s;
    hist_t *h;
} tally_t;

static const char *const metric_names[] = {
    [PLAN_METRIC_RESPONSE] = "response",
    [PLAN_METRIC_SERVICE] = "service",
    [PLAN_METRIC_OPEN] = "open",
    [PLAN_METRIC_PROPAGATION] = "propagation",
};

const char *judge_verdict_name(enum judge_verdict v)
{
    static const char *const names[] = {"pass", "fail", "no-data", "too-few"};
    return names[v];
}

static bool outcome_is_error(const char *oc)
{
    return strcmp(oc, "2xx") && strcmp(oc, "3xx") && strcmp(oc, "cancelled");
}

static double phase_elapsed_s(const judge_phase_t *phases, size_t n, const char *name)
{
    for (size_t i = 0; i < n; i++)
        if (strcmp(phases[i].name, name) == 0)
            return (double)phases[i].elapsed_ns / 1e9;
    return 0;
}

/* Sums the cells of class cls in phase `phase` (NULL: every phase) into t. The metric is
 * metric (-1 when this build does not record it: t->h then stays empty). A watch class's
 * 2xx cell counts events, not requests: its successes are the streams that opened. */
static void gather(const results_t *res, const char *cls, bool watch, const char *phase, int metric,
                   const judge_phase_t *phases, size_t n_phases, tally_t *t)
{
    t->answered = t->errors = t->successes = 0;
    t->elapsed_s = 0;
    hist_reset(t->h);
    for (size_t i = 0; i < n_phases; i++) {
        bool ran = false;
        if (phase && strcmp(phase, phases[i].name))
            continue;
        for (size_t k = 0; k < results_cell_count(res); k++) {
            const results_cell_t *c = results_cell_at(res, k);
            const char *oc = results_cell_outcome(c);
            if (strcmp(results_cell_class(c), cls) ||
                strcmp(results_cell_phase(c), phases[i].name) || strcmp(oc, "cancelled") == 0)
                continue;
            int64_t n = results_cell_counters((results_cell_t *)c)->count;
            if (watch) {
                const hist_t *open = results_cell_hist_find(c, RESULTS_M_OPEN);
                n = outcome_is_error(oc) ? n : open ? hist_count(open) : 0;
            }
            ran = ran || n > 0;
            t->answered += n;
            t->errors += outcome_is_error(oc) ? n : 0;
            t->successes += outcome_is_error(oc) ? 0 : n;
            const hist_t *h = metric >= 0 ? results_cell_hist_find(c, metric) : NULL;
            if (h)
                hist_merge(t->h, h);
        }
        if (ran)
            t->elapsed_s += phase_elapsed_s(phases, n_phases, phases[i].name);
    }
}

int64_t judge_samples_needed(double percentile)
{
    return percentile >= 100 ? 1 : (int64_t)ceil(100 / (100 - percentile) - 1e-9);
}

/* The observed value of objective ob over tally t; false when nothing was measured. */
static bool observe(const plan_objective_t *ob, const tally_t *t, judge_check_t *ck)
{
    switch (ob->limit) {
    case PLAN_LIMIT_PERCENTILE:
        ck->unit = "ms";
        ck->threshold = (double)ob->max_ns / 1e6;
        ck->samples = hist_count(t->h);
        ck->observed = (double)hist_value_at(t->h, ob->percentile) / 1e6;
        /* The p-th percentile is resolved by at least 1 / (1 - p/100) samples: 100 for p99,
         * 1,000 for p99.9; the maximum by one. */
        ck->needed = judge_samples_needed(ob->percentile);
        return ck->samples > 0;
    case PLAN_LIMIT_ERROR_RATE:
        ck->unit = "fraction";
        ck->threshold = ob->value;
        ck->samples = t->answered;
        ck->observed = t->answered ? (double)t->errors / (double)t->answered : 0;
        return t->answered > 0;
    case PLAN_LIMIT_MAX_SYNC: /* judged by judge_sync */
        return false;
    case PLAN_LIMIT_MIN_RATE:
        ck->unit = "per_s";
        ck->threshold = ob->value;
        ck->samples = t->answered;
        ck->observed = t->elapsed_s > 0 ? (double)t->answered / t->elapsed_s : 0;
        return t->elapsed_s > 0;
    }
    return false;
}

static bool holds(const plan_objective_t *ob, double observed, double threshold)
{
    return ob->limit == PLAN_LIMIT_MIN_RATE ? observed >= threshold : observed <= threshold;
}

/* The objective as a user would say it, its threshold as a plan writes it (the plan's own text
 * for the usual forms), e.g. "p99 of response <= 1s". */
static void describe(const plan_objective_t *ob, char *buf, size_t cap)
{
    char d[32];
    value_format_duration(ob->max_ns, d, sizeof d);
    if (ob->limit == PLAN_LIMIT_PERCENTILE && ob->percentile >= 100)
        snprintf(buf, cap, "max of %s <= %s", metric_names[ob->metric], d);
    else if (ob->limit == PLAN_LIMIT_PERCENTILE)
        snprintf(buf, cap, "p%g of %s <= %s", ob->percentile, metric_names[ob->metric], d);
    else if (ob->limit == PLAN_LIMIT_ERROR_RATE)
        snprintf(buf, cap, "error rate <= %g%%", ob->value * 100);
    else if (ob->limit == PLAN_LIMIT_MAX_SYNC)
        snprintf(buf, cap, "sync R-bar <= %g (whole windows)", ob->value);
    else
        snprintf(buf, cap, "rate >= %g/s", ob->value);
}

static int check_one(judge_t *j, size_t oi, const plan_objective_t *ob, const char *text,
                     const char *cls, const char *scope, const tally_t *t)
{
    judge_check_t *ck = judge_add_check(j);
    if (!ck)
        return SQ_ENOMEM;
    ck->objective = oi;
    ck->text = text;
    ck->cls = cls;
    ck->scope = scope;
    bool measured = observe(ob, t, ck);
    bool latency = ob->limit == PLAN_LIMIT_PERCENTILE;
    if (!measured)
        ck->verdict = JUDGE_NO_DATA;
    else if (latency && t->successes == 0 && ob->metric != PLAN_METRIC_OPEN &&
             ob->metric != PLAN_METRIC_PROPAGATION)
        ck->verdict = JUDGE_FAIL, ck->why = "no successful answer";
    else if (ck->samples < ck->needed) /* not resolved either way */
        ck->verdict = JUDGE_TOO_FEW;
    else
        ck->verdict = holds(ob, ck->observed, ck->threshold) ? JUDGE_PASS : JUDGE_FAIL;
    return 0;
}

/* A watch class: the plan says so (opts), or its cells carry its streams' open or propagation
 * times (results judged without the plan). */
static bool is_watch_class(const judge_t *j, const results_t *res, const char *cls)
{
    for (size_t i = 0; j->opts && i < j->opts->n_watch_classes; i++)
        if (strcmp(j->opts->watch_classes[i], cls) == 0)
            return true;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (strcmp(results_cell_class(c), cls) == 0 &&
            (results_cell_hist_find(c, RESULTS_M_OPEN) ||
             results_cell_hist_find(c, RESULTS_M_PROPAGATION)))
            return true;
    }
    return false;
}

/* A class the run added on its own (opts): "*" and the default objective leave it alone. */
static bool is_internal_class(const judge_t *j, const char *cls)
{
    for (size_t i = 0; j->opts && i < j->opts->n_internal_classes; i++)
        if (strcmp(j->opts->internal_classes[i], cls) == 0)
            return true;
    return false;
}

/* The checks of one objective for one class: each phase it ran in, then the run. */
static int judge_class(judge_t *j, size_t oi, const plan_objective_t *ob, const char *text,
                       const char *cls, bool wildcard, const results_t *res,
                       const judge_phase_t *phases, size_t n_phases, tally_t *t)
{
    int metric = results_metric_from_name(metric_names[ob->metric]);
    metric = metric < 0 ? -1 : metric;
    const char *kept = judge_keep(j, cls);
    if (!kept)
        return SQ_ENOMEM;
    bool watch = is_watch_class(j, res, cls);
    int rc = 0;
    if (wildcard) {
        /* "*" judges the classes that ran in the plan's phases (not e.g. a teardown's). */
        gather(res, cls, watch, NULL, metric, phases, n_phases, t);
        if (t->answered == 0)
            return 0;
    }
    for (size_t i = 0; rc == 0 && i < n_phases; i++) {
        if (ob->phase.name && strcmp(ob->phase.name, phases[i].name))
            continue;
        gather(res, cls, watch, phases[i].name, metric, phases, n_phases, t);
        if (t->answered == 0 && !ob->phase.name)
            continue;
        const char *scope = judge_keep(j, phases[i].name);
        rc = scope ? check_one(j, oi, ob, text, kept, scope, t) : SQ_ENOMEM;
    }
    if (rc == 0 && !ob->phase.name) {
        gather(res, cls, watch, NULL, metric, phases, n_phases, t);
        rc = check_one(j, oi, ob, text, kept, "run", t);
    }
    return rc;
}

/* Distinct class names of res's cells, in first-seen order; *n of them. NULL on ENOMEM. */
static const char **cell_classes(const results_t *res, size_t *n)
{
    size_t cells = results_cell_count(res);
    const char **names = calloc(cells ? cells : 1, sizeof(*names));
    *n = 0;
    for (size_t i = 0; names && i < cells; i++) {
        const char *c = results_cell_class(results_cell_at(res, i));
        size_t k = 0;
        while (k < *n && strcmp(names[k], c))
            k++;
        if (k == *n)
            names[(*n)++] = c;
    }
    return names;
}

static int judge_objective(judge_t *j, size_t oi, const plan_objective_t *ob, const results_t *res,
                           const judge_phase_t *phases, size_t n_phases, tally_t *t)
{
    char buf[128];
    describe(ob, buf, sizeof buf);
    const char *text = judge_keep(j, buf);
    if (!text)
        return SQ_ENOMEM;
    if (ob->limit == PLAN_LIMIT_MAX_SYNC)
        return judge_sync(j, oi, ob, text, res, phases, n_phases);
    if (ob->cls.name && strcmp(ob->cls.name, "*"))
        return judge_class(j, oi, ob, text, ob->cls.name, false, res, phases, n_phases, t);
    size_t n = 0, before = j->n;
    const char **names = cell_classes(res, &n);
    if (!names)
        return SQ_ENOMEM;
    int rc = 0;
    /* "*" leaves watches out of latency and rate objectives: their cells count events and stream
     * endings, not requests (common practice for control-plane latency objectives, which
     * exclude watches; no primary source). Their error rate is judged, over stream attempts. */
    for (size_t k = 0; rc == 0 && k < n; k++)
        if (!is_internal_class(j, names[k]) &&
            (ob->limit == PLAN_LIMIT_ERROR_RATE || !is_watch_class(j, res, names[k])))
            rc = judge_class(j, oi, ob, text, names[k], true, res, phases, n_phases, t);
    if (rc == 0 && j->n == before) { /* nothing ran at all */
        gather(res, "*", false, NULL, -1, phases, n_phases, t);
        rc = check_one(j, oi, ob, text, "*", "run", t);
    }
    free(names);
    return rc;
}

/* Whether an error-rate objective of the plan covers class cls ("*" covers every class). */
static bool error_rate_covered(const plan_objective_t *objs, size_t n, const char *cls)
{
    for (size_t i = 0; i < n; i++)
        if (objs[i].limit == PLAN_LIMIT_ERROR_RATE &&
            (!objs[i].cls.name || !strcmp(objs[i].cls.name, "*") || !strcmp(objs[i].cls.name, cls)))
            return true;
    return false;
}

/* The default error-rate objective for every class that ran and none of the plan's covers,
 * except the run's internal classes (opts). */
static int default_error_rate(judge_t *j, const plan_objective_t *objs, size_t n_objs, double rate,
                              const results_t *res, const judge_phase_t *phases, size_t n_phases,
                              tally_t *t)
{
    size_t n = 0;
    const char **names = cell_classes(res, &n);
    if (!names)
        return SQ_ENOMEM;
    char text[64];
    snprintf(text, sizeof text, "error rate <= %g%% (default)", rate * 100);
    const char *kept = judge_keep(j, text);
    int rc = kept ? 0 : SQ_ENOMEM;
    for (size_t k = 0; rc == 0 && k < n; k++) {
        if (error_rate_covered(objs, n_objs, names[k]) || is_internal_class(j, names[k]))
            continue;
        plan_objective_t ob = {.cls = {.name = names[k], .index = -1},
                               .phase = {.index = -1},
                               .limit = PLAN_LIMIT_ERROR_RATE,
                               .value = rate};
        size_t before = j->n;
        rc = judge_class(j, n_objs, &ob, kept, names[k], true, res, phases, n_phases, t);
        for (size_t i = before; i < j->n; i++)
            j->checks[i].implicit = true;
    }
    free(names);
    return rc;
}

int judge_evaluate(const plan_objective_t *objs, size_t n_objs, const results_t *res,
                   const judge_phase_t *phases, size_t n_phases, const judge_opts_t *opts,
                   judge_t **out)
{
    *out = NULL;
    judge_t *j = calloc(1, sizeof(*j));
    if (!j)
        return SQ_ENOMEM;
    int64_t lo, hi;
    int digits;
    results_hist_config(res, &lo, &hi, &digits);
    tally_t t = {0};
    j->opts = opts;
    int rc = hist_new(lo, hi, digits, &t.h);
    for (size_t i = 0; rc == 0 && i < n_objs; i++)
        rc = judge_objective(j, i, &objs[i], res, phases, n_phases, &t);
    if (rc == 0 && opts && opts->default_error_rate > 0)
        rc = default_error_rate(j, objs, n_objs, opts->default_error_rate, res, phases, n_phases,
                                &t);
    hist_free(t.h);
    j->opts = NULL;
    if (rc) {
        judge_free(j);
        return rc;
    }
    *out = j;
    return 0;
}

const char *judge_outcome_name(enum judge_outcome o)
{
    static const char *const names[] = {"pass", "fail", "inconclusive"};
    return names[o];
}

const char *judge_outcome_word(enum judge_outcome o)
{
    static const char *const words[] = {"PASS", "FAIL", "INCONCLUSIVE"};
    return words[o];
}

static void reason(json_t *reasons, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void reason(json_t *reasons, const char *fmt, ...)
{
    char buf[400];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    if (reasons)
        json_array_append_new(reasons, json_string(buf));
}

/* The checks that failed (or measured nothing), one reason each. */
static bool failures(const judge_t *j, json_t *reasons)
{
    bool failed = false;
    for (size_t i = 0; i < j->n; i++) {
        const judge_check_t *c = &j->checks[i];
        if (c->verdict != JUDGE_FAIL && c->verdict != JUDGE_NO_DATA)
            continue;
        failed = true;
        if (c->verdict == JUDGE_NO_DATA)
            reason(reasons, "%s in %s: %s: nothing was measured", c->cls, c->scope, c->text);
        else if (c->why)
            reason(reasons, "%s in %s: %s: %s", c->cls, c->scope, c->text, c->why);
        else
            reason(reasons, "%s in %s: %s: observed %g %s", c->cls, c->scope, c->text,
                   c->observed * (strcmp(c->unit, "fraction") ? 1 : 100),
                   strcmp(c->unit, "fraction") ? c->unit : "%");
    }
    return failed;
}

enum judge_outcome judge_outcome(const judge_t *j, const judge_evidence_t *ev, json_t *reasons,
                                 json_t *accepted)
{
    if (failures(j, reasons))
        return JUDGE_OUTCOME_FAIL;
    bool inconclusive = false;
    json_t *to;
#define WEIGH(what) /* a reason against a pass, unless the plan accepts it */                      \
    (to = ev->accept & 1u << (what) ? accepted : reasons, inconclusive |= to == reasons, to)
    if (ev->generator_bound_s > 0)
        reason(WEIGH(PLAN_ACCEPT_GENERATOR_BOUND),
               "squall could not offer the planned load for %lld s (seconds %s; last: %s): the "
               "target's figures for those seconds are not evidence",
               (long long)ev->generator_bound_s,
               ev->generator_seconds ? ev->generator_seconds : "?",
               ev->generator_why ? ev->generator_why : "?");
    for (size_t i = 0; i < j->n; i++) {
        const judge_check_t *c = &j->checks[i];
        if (c->verdict == JUDGE_TOO_FEW && c->why)
            reason(WEIGH(PLAN_ACCEPT_FEW_SAMPLES), "%s in %s: %s: too few samples: %s", c->cls,
                   c->scope, c->text, c->why);
        else if (c->verdict == JUDGE_TOO_FEW)
            reason(WEIGH(PLAN_ACCEPT_FEW_SAMPLES),
                   "%s in %s: %s: too few samples to resolve it (had %lld, needs %lld)", c->cls,
                   c->scope, c->text, (long long)c->samples, (long long)c->needed);
    }
    if (ev->stopped_early)
        reason(WEIGH(PLAN_ACCEPT_STOPPED_EARLY), "the run stopped early: %s",
               ev->stop_why ? ev->stop_why : "?");
#undef WEIGH
    return inconclusive ? JUDGE_OUTCOME_INCONCLUSIVE : JUDGE_OUTCOME_PASS;
}
