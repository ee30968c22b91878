/* Saved results judged again from their own sections (a merge of shards): the same
 * judge_evaluate and judge_outcome a run calls, fed from results.json instead of the plan. */
#include <stdio.h>
#include <string.h>

#include "squall/err.h"
#include "squall/judge.h"

/* Each judged phase's elapsed time from the "phases" section (0 when it never ran). */
static void elapsed_from(const results_t *res, judge_inputs_t *in)
{
    const json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    judge_phase_t *ph = (judge_phase_t *)in->phases;
    for (size_t i = 0; i < in->n_phases; i++) {
        size_t k;
        ph[i].elapsed_ns = 0;
        json_array_foreach(list, k, p)
        {
            const char *name = json_string_value(json_object_get(p, "name"));
            if (name && strcmp(name, ph[i].name) == 0)
                ph[i].elapsed_ns =
                    (int64_t)(json_number_value(json_object_get(p, "elapsed_s")) * 1e9);
        }
    }
}

/* "4, 5, 9" from a bound kind's list of seconds (", ..." when the list is shorter than the
 * count, or longer than fits). */
static void seconds_text(const json_t *bound, char *buf, size_t cap)
{
    const json_t *list = json_object_get(bound, "list"), *s;
    size_t i, n = 0;
    buf[0] = '\0';
    json_array_foreach(list, i, s)
    {
        if (n + 24 >= cap)
            break;
        n += (size_t)snprintf(buf + n, cap - n, "%s%lld", i ? ", " : "",
                              (long long)json_integer_value(s));
    }
    if ((json_int_t)json_array_size(list) < json_integer_value(json_object_get(bound, "seconds")) ||
        i < json_array_size(list))
        snprintf(buf + n, cap - n, ", ...");
}

int judge_results(const results_t *res, judge_t **j, enum judge_outcome *outcome, json_t *reasons,
                  json_t *accepted, char *err, size_t cap)
{
    *j = NULL;
    const json_t *sec = results_section(res, JUDGE_INPUTS_SECTION);
    if (!sec)
        return SQ_ENOTFOUND;
    judge_inputs_t in;
    int rc = judge_inputs_init_json(&in, sec, err, cap);
    if (rc)
        return rc;
    elapsed_from(res, &in);
    rc = judge_evaluate(in.objectives, in.n_objectives, res, in.phases, in.n_phases, &in.opts, j);
    if (rc == 0) {
        const json_t *gb = json_object_get(results_section(res, "generator"), "generator_bound");
        char seconds[160];
        seconds_text(gb, seconds, sizeof seconds);
        const results_meta_t *m = results_meta(res);
        judge_evidence_t ev = {
            .generator_bound_s = json_integer_value(json_object_get(gb, "seconds")),
            .generator_seconds = seconds,
            .generator_why = json_string_value(json_object_get(gb, "last_reason")),
            .stopped_early = m->interrupted,
            .stop_why = m->stop_reason,
            .accept = in.accept,
        };
        *outcome = judge_outcome(*j, &ev, reasons, accepted);
    }
    judge_inputs_close(&in);
    return rc;
}
