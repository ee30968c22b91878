/* The run's verdict: the plan's objectives judged over the finished results (the "objectives"
 * section of results.json, the table after the summary, exit 1 on a failure), the "phases"
 * section (when each phase ran), the "brakes" section (the brakes in force) and report.html. */
#include <stdlib.h>

#include "run_int.h"
#include "squall/err.h"
#include "squall/judge.h"
#include "squall/report.h"

struct run_verdict {
    judge_t *judge;
};

/* Each phase's elapsed time: planned, cut short where the run stopped; 0 if never started. */
static judge_phase_t *phase_times(const runner_t *r)
{
    judge_phase_t *ph = calloc(r->n_phases ? r->n_phases : 1, sizeof(*ph));
    for (size_t i = 0; ph && i < r->n_phases; i++) {
        const run_phase_t *p = &r->phases[i];
        ph[i].name = p->pp->name;
        if (i > r->cur || r->run_start_ns == 0)
            continue;
        int64_t ran = r->run_end_ns - p->base_ns;
        ph[i].elapsed_ns = ran < p->duration_ns ? (ran > 0 ? ran : 0) : p->duration_ns;
    }
    return ph;
}

/* {"phases": [{name, start_s, elapsed_s}]}: seconds from the run's start, for reports. */
static json_t *phases_json(const runner_t *r, const judge_phase_t *ph)
{
    json_t *list = json_array();
    for (size_t i = 0; list && i < r->n_phases; i++) {
        double start = i <= r->cur ? (double)(r->phases[i].base_ns - r->run_start_ns) / 1e9 : 0;
        json_array_append_new(list, json_pack("{s:s, s:f, s:f}", "name", ph[i].name, "start_s",
                                              start, "elapsed_s", (double)ph[i].elapsed_ns / 1e9));
    }
    return json_pack("{s:o}", "phases", list);
}

int run_verdict_judge(runner_t *r)
{
    struct run_verdict *v = calloc(1, sizeof(*v));
    judge_phase_t *ph = phase_times(r);
    int rc = v && ph ? 0 : SQ_ENOMEM;
    r->verdict = v;
    if (rc == 0)
        rc = judge_evaluate(r->plan->objectives, r->plan->n_objectives, r->res, ph, r->n_phases,
                            &v->judge);
    if (rc == 0 && r->run_start_ns)
        rc = results_set_section(r->res, "phases", phases_json(r, ph));
    if (rc == 0)
        rc = results_set_section(r->res, "brakes", run_health_brakes_json(r));
    free(ph);
    if (rc == 0 && r->plan->n_objectives)
        rc = results_set_section(r->res, JUDGE_SECTION, judge_json(v->judge));
    if (rc)
        out_error(r->o, "objectives could not be judged: %s", sq_strerror(rc));
    return rc;
}

bool run_verdict_failed(const runner_t *r)
{
    return !r->verdict || !r->verdict->judge || judge_failed(r->verdict->judge);
}

void run_verdict_print(runner_t *r)
{
    if (r->verdict && r->verdict->judge)
        judge_print(r->verdict->judge, r->o);
}

int run_verdict_report(runner_t *r, const char *dir)
{
    return report_html_write_dir(dir, r->res, r->o);
}

void run_verdict_close(runner_t *r)
{
    if (r->verdict)
        judge_free(r->verdict->judge);
    free(r->verdict);
    r->verdict = NULL;
}
