/* Objectives as output: the results.json section and the verdict table printed after a run. */
#include <stdio.h>
#include <string.h>

#include "squall/err.h"
#include "squall/judge.h"
#include "squall/table.h"

json_t *judge_json(const judge_t *j)
{
    json_t *checks = json_array();
    size_t objectives = 0;
    for (size_t i = 0; checks && i < judge_check_count(j); i++) {
        const judge_check_t *c = judge_check_at(j, i);
        if (c->objective + 1 > objectives)
            objectives = c->objective + 1;
        json_t *ck = json_pack("{s:I, s:s, s:s, s:s, s:f, s:f, s:s, s:I, s:s, s:b}", "objective",
                               (json_int_t)c->objective, "text", c->text, "class", c->cls, "scope",
                               c->scope, "observed", c->observed, "threshold", c->threshold, "unit",
                               c->unit, "samples", (json_int_t)c->samples, "verdict",
                               judge_verdict_name(c->verdict), "default", c->implicit);
        if (ck && c->needed)
            json_object_set_new(ck, "needed", json_integer(c->needed));
        if (ck && c->why)
            json_object_set_new(ck, "why", json_string(c->why));
        json_array_append_new(checks, ck);
    }
    return json_pack("{s:b, s:I, s:o}", "passed", !judge_failed(j), "objectives",
                     (json_int_t)objectives, "checks", checks);
}

/* A value in its unit, for people: "12.40 ms", "0.50%", "199.8/s". */
static void human(double v, const char *unit, char *buf, size_t cap)
{
    if (strcmp(unit, "ms") == 0)
        snprintf(buf, cap, "%.2f ms", v);
    else if (strcmp(unit, "fraction") == 0)
        snprintf(buf, cap, "%.2f%%", v * 100);
    else if (strcmp(unit, "r_bar") == 0)
        snprintf(buf, cap, "%.3f", v);
    else
        snprintf(buf, cap, "%.1f/s", v);
}

/* One check as a row (and its note) of t. */
static int check_row(table_t *t, const judge_check_t *c)
{
    static const char *const shout[] = {"pass", "FAIL", "NO-DATA", "TOO-FEW"};
    char obs[32] = "-", note[96];
    bool no_window = !strcmp(c->unit, "r_bar") && c->samples == 0; /* nothing gauged */
    if (c->verdict != JUDGE_NO_DATA && !no_window)
        human(c->observed, c->unit, obs, sizeof obs);
    const char *cells[] = {shout[c->verdict], c->scope, c->cls, c->text, obs};
    int rc = table_add(t, cells);
    if (rc == 0 && c->verdict == JUDGE_TOO_FEW && !c->why) {
        snprintf(note, sizeof note, "%lld samples, needs %lld to resolve it", (long long)c->samples,
                 (long long)c->needed);
        rc = table_note(t, 3, note);
    } else if (rc == 0 && c->why) {
        rc = table_note(t, 3, c->why);
    }
    return rc;
}

void judge_print(const judge_t *j, out_t *o)
{
    size_t n = judge_check_count(j), failed = 0;
    if (n == 0)
        return;
    static const table_col_t cols[] = {{"verdict", TABLE_LEFT},
                                       {"scope", TABLE_LEFT},
                                       {"class", TABLE_LEFT},
                                       {"objective", TABLE_LEFT},
                                       {"observed", TABLE_RIGHT}};
    table_t *t = table_new(cols, 5);
    int rc = t ? 0 : SQ_ENOMEM;
    for (size_t i = 0; rc == 0 && i < n; i++) {
        const judge_check_t *c = judge_check_at(j, i);
        rc = check_row(t, c);
        failed += c->verdict != JUDGE_PASS;
    }
    out_print(o, "\nobjectives\n");
    if (rc == 0)
        table_print(t, o);
    else
        out_print(o, "(out of memory while laying out the objectives)\n");
    table_free(t);
    if (failed)
        out_print(o,
                  "%zu of %zu objective checks did not pass (no-data counts as a failure, "
                  "too-few as inconclusive)\n",
                  failed, n);
    else
        out_print(o, "all %zu objective checks passed\n", n);
}
