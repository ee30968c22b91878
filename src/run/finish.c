/* After the loop: every source's and observer's figures into the results, the phases as they
 * ran, the objectives judged, results.json and report.html written, the summary printed. */
#include <stdlib.h>
#include <string.h>

#include "run_int.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/judge.h"
#include "squall/launch.h"
#include "squall/report.h"

/* Each plan phase's elapsed time: from its start to when it stopped starting requests (its
 * planned end, or the moment a signal, a brake or a failure stopped it); 0 if never started. */
static judge_phase_t *phase_times(const run_t *r)
{
    size_t n = r->plan->n_phases;
    judge_phase_t *ph = calloc(n ? n : 1, sizeof(*ph));
    for (size_t i = 0; ph && i < n; i++) {
        const run_phase_t *p = &r->phases[i];
        ph[i].name = p->name;
        if (!p->started)
            continue;
        int64_t end = p->ended_ns ? p->ended_ns : r->end_ns;
        int64_t ran = end - p->base_ns;
        if (p->duration_ns && ran > p->duration_ns)
            ran = p->duration_ns;
        ph[i].elapsed_ns = ran > 0 ? ran : 0;
    }
    return ph;
}

/* {"phases": [{name, start_s, elapsed_s}]}: seconds from the run's start, for reports. */
static json_t *phases_json(const run_t *r, const judge_phase_t *ph)
{
    json_t *list = json_array();
    for (size_t i = 0; list && i < r->plan->n_phases; i++) {
        const run_phase_t *p = &r->phases[i];
        double start = p->started ? (double)(p->base_ns - r->start_ns) / 1e9 : 0;
        json_array_append_new(list, json_pack("{s:s, s:f, s:f}", "name", ph[i].name, "start_s",
                                              start, "elapsed_s", (double)ph[i].elapsed_ns / 1e9));
    }
    return json_pack("{s:o}", "phases", list);
}

/* The phases objectives judge: the plan's load phases; a teardown phase only when an
 * objective names it (its deletes are the run's own housekeeping, not the plan's traffic). */
static size_t judged_phases(const run_t *r)
{
    const plan_t *p = r->plan;
    size_t n = p->n_phases;
    if (n == 0 || !p->phases[n - 1].teardown.on)
        return n;
    for (size_t i = 0; i < p->n_objectives; i++)
        if (p->objectives[i].phase.index == (int)n - 1)
            return n;
    return n - 1;
}

/* The sections every run has, and the objectives judged; *j is the verdict (NULL on error).
 * Every plan class is also judged on a default error rate of 1 % unless an objective covers it. */
static int judge(run_t *r, const judge_phase_t *ph, judge_t **j)
{
    const char *watches[PLAN_MAX_REQS];
    /* The teardown's deletes are class "teardown" (src/observe/names.c): the run's own, judged
     * as a plan class only when the plan names them (a class of that name, or an objective on
     * the teardown phase, which judged_phases then keeps). */
    static const char *const internal[] = {"teardown"};
    size_t n = judged_phases(r);
    bool named =
        plan_find_req(r->plan, internal[0]) >= 0 || (n > 0 && r->plan->phases[n - 1].teardown.on);
    judge_opts_t jo = {.default_error_rate = JUDGE_DEFAULT_ERROR_RATE,
                       .watch_classes = watches,
                       .internal_classes = internal,
                       .n_internal_classes = !named};
    for (size_t i = 0; i < r->plan->n_reqs; i++)
        if (r->plan->reqs[i].kind == PLAN_WATCH)
            watches[jo.n_watch_classes++] = r->plan->reqs[i].name;
    judge_inputs_t in = {.objectives = r->plan->objectives,
                         .n_objectives = r->plan->n_objectives,
                         .accept = r->plan->accept,
                         .opts = jo,
                         .phases = ph,
                         .n_phases = n};
    int rc = judge_evaluate(in.objectives, in.n_objectives, r->res, ph, in.n_phases, &jo, j);
    if (rc == 0) /* what the verdict rests on, so that a merge judges it the same way */
        rc = results_set_section(r->res, JUDGE_INPUTS_SECTION, judge_inputs_json(&in));
    if (rc == 0 && r->start_ns)
        rc = results_set_section(r->res, "phases", phases_json(r, ph));
    if (rc == 0)
        rc = results_set_section(r->res, "brakes", obs_brakes_json(r->obs));
    if (rc == 0)
        rc = results_set_section(r->res, JUDGE_SECTION, judge_json(*j));
    if (rc)
        out_error(r->o, "objectives could not be judged: %s", sq_strerror(rc));
    return rc;
}

/* Every source's and observer's own figures, the sources' first (the teardown's figures go
 * into the ledger's section). */
static int sections(run_t *r)
{
    int rc = 0;
    for (size_t i = 0; i < r->n_phases; i++) {
        run_phase_t *p = &r->phases[i];
        for (size_t k = 0; p->started && k < p->n_src; k++) {
            int e = p->src[k].ops->finish ? p->src[k].ops->finish(p->src[k].self, r->res) : 0;
            rc = rc ? rc : e;
        }
    }
    int e = obs_finish(r->obs, r->dir);
    rc = rc ? rc : e;
    if (rc == 0 && r->scrape)
        rc = results_set_section(r->res, "metrics", scrape_section(r->scrape));
    if (rc == 0 && r->act)
        rc = results_set_section(r->res, "actions", act_section(r->act));
    return rc;
}

/* The outcome: the checks, weighed with what squall could offer and how the run ended. */
static enum judge_outcome outcome(run_t *r, const judge_t *j, json_t *reasons, json_t *accepted)
{
    if (!j)
        return JUDGE_OUTCOME_FAIL;
    obs_totals_t t;
    obs_totals(r->obs, &t);
    judge_evidence_t ev = {
        .generator_bound_s = t.generator_bound_s,
        .generator_seconds = t.generator_seconds,
        .generator_why = t.generator_why,
        .stopped_early = r->end != RUN_END_DONE,
        .stop_why = r->why,
        .accept = r->plan->accept,
    };
    return judge_outcome(j, &ev, reasons, accepted);
}

/* results.json's "run" section: how to run it again, and how it ended (the exit code is the
 * command line's, given the outcome). */
static json_t *run_json(run_t *r, const run_result_t *res, json_t *reasons, json_t *accepted)
{
    json_t *sets = json_array();
    for (size_t i = 0; sets && i < r->opts->n_overrides; i++)
        json_array_append_new(sets, json_string(r->opts->overrides[i]));
    json_t *s = json_pack("{s:I, s:o, s:s?, s:s, s:s, s:o, s:o}", "seed", (json_int_t)r->seed,
                          "overrides", sets, "command_line", r->opts->command_line, "verdict",
                          judge_outcome_name(res->outcome), "squall_version", SQUALL_VERSION,
                          "reasons", reasons, "accepted", accepted);
    if (s && sched_shard_split(r->shard))
        json_object_set_new(s, "shard_seed", json_integer((json_int_t)r->shard_seed));
    if (s && r->opts->exit_code)
        json_object_set_new(s, "exit_code", json_integer(r->opts->exit_code(0, res)));
    return s;
}

static json_t *instant_json(int64_t real_ns)
{
    char buf[64];
    if (!real_ns)
        return json_null();
    launch_format_instant(real_ns, buf, sizeof buf);
    return json_string(buf);
}

/* results.json's "launch" section: which shard this is and who said so, the start instant and
 * how close to it the run began, and this machine's clock against the target's. */
static json_t *launch_json(const run_t *r)
{
    const run_opts_t *o = r->opts;
    obs_totals_t t;
    obs_totals(r->obs, &t);
    json_t *shard = json_pack(
        "{s:i, s:i, s:s?, s:s?}", "index", o->shard_index ? o->shard_index : 1, "count",
        o->shard_count ? o->shard_count : 1, "from", o->shard_from, "variables", o->shard_vars);
    json_t *clock = json_null();
    if (r->clock.samples)
        clock = json_pack("{s:f, s:f, s:I, s:b, s:s}", "offset_ms",
                          (double)(r->clock.lo_ns + r->clock.hi_ns) / 2e6, "within_ms",
                          (double)(r->clock.hi_ns - r->clock.lo_ns) / 2e6, "samples",
                          (json_int_t)r->clock.samples, "consistent",
                          r->clock.lo_ns <= r->clock.hi_ns, "from",
                          "the target's Date headers (whole seconds; bounds narrowed by answers "
                          "that straddle its second)");
    int64_t real_start = o->start_at_ns;
    return json_pack("{s:o, s:o, s:o, s:f, s:o, s:o}", "shard", shard, "start_at",
                     instant_json(real_start), "began",
                     r->start_ns ? instant_json(clock_real_ns() - (clock_mono_ns() - r->start_ns))
                                 : json_null(),
                     "late_ms", o->start_at_ns ? (double)r->late_ns / 1e6 : 0.0, "first_request",
                     instant_json(t.first_sent_real_ns), "clock_offset", clock);
}

bool run_finish(run_t *r, run_result_t *res)
{
    results_set_duration(r->res, r->end_ns - r->start_ns);
    if (r->end != RUN_END_DONE)
        results_set_stopped(r->res, r->why);
    res->end = r->end;
    bool failed = sections(r) != 0;
    failed |= results_set_section(r->res, "launch", launch_json(r)) != 0;
    judge_phase_t *ph = phase_times(r);
    judge_t *j = NULL;
    failed |= !ph || judge(r, ph, &j) != 0;
    json_t *reasons = json_array(), *accepted = json_array();
    res->outcome = outcome(r, j, reasons, accepted);
    res->write_failed = failed;
    failed |=
        results_set_section(r->res, "run",
                            run_json(r, res, json_incref(reasons), json_incref(accepted))) != 0;
    failed |= results_write_dir(r->res, r->dir, r->o) != 0;
    res->write_failed = failed;
    if (report_html_write_dir(r->dir, r->res, r->o) != 0 && !failed) {
        /* results.json recorded an exit code that no longer holds: record the one that does. */
        res->write_failed = failed = true;
        results_set_section(r->res, "run",
                            run_json(r, res, json_incref(reasons), json_incref(accepted)));
        results_write_dir(r->res, r->dir, r->o);
    }
    snprintf(res->dir, sizeof res->dir, "%s", r->dir);
    int64_t *elapsed = ph ? calloc(r->plan->n_phases + 1, sizeof(*elapsed)) : NULL;
    for (size_t i = 0; elapsed && i < r->plan->n_phases; i++)
        elapsed[i] = ph[i].elapsed_ns;
    if (!r->opts->quiet && !r->opts->no_summary && elapsed)
        obs_summary(r->obs, &(obs_summary_t){.elapsed_ns = elapsed,
                                             .judged = j,
                                             .verdict = judge_outcome_word(res->outcome),
                                             .reasons = reasons,
                                             .accepted = accepted,
                                             .run_ns = r->end_ns - r->start_ns,
                                             .stopped_why = r->end != RUN_END_DONE ? r->why : NULL,
                                             .dir = r->dir});
    json_decref(reasons);
    json_decref(accepted);
    judge_free(j);
    free(elapsed);
    free(ph);
    return failed;
}
