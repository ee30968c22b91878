/* `squall merge`: pools results (the shards of one run) into one results directory whose
 * histograms, series and storm ticks are those of all samples recorded together, and judges it
 * as one run: the verdict and exit code of a run with every shard's requests. */
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "cli_merge.h"
#include "squall/cli.h"
#include "squall/err.h"
#include "squall/journal.h"
#include "squall/judge.h"
#include "squall/observe.h"
#include "squall/report.h"
#include "squall/results.h"

static const cli_opt_t merge_opts[] = {
    {"output", 'o', "DIR", "results directory to create (required)"},
    {"force", 0, NULL,
     "replace DIR/results.json if it exists; merge inputs of different plans, seeds or overrides"},
    {"json", 0, NULL, "print the merged run's summary and verdict as JSON"},
    {NULL, 0, NULL, NULL},
};

/* Two inputs from the same shard of the same start are most likely one file given twice. */
static void warn_duplicate(const results_meta_t *a, const char *an, const results_meta_t *b,
                           const char *bn, out_t *o)
{
    if (a->shard_count && a->shard_index == b->shard_index && a->shard_count == b->shard_count &&
        a->start_unix_ms == b->start_unix_ms && a->host && b->host && !strcmp(a->host, b->host))
        out_warn(o, "%s and %s are the same shard (%d/%d) of the same start; merged twice?", an, bn,
                 a->shard_index, a->shard_count);
}

static int exit_of(int rc)
{
    return rc == SQ_EMISMATCH ? SQ_EXIT_USAGE : SQ_EXIT_FAILURE;
}

/* Reads every input and merges it into *merged, then combines their sections; returns an exit
 * code. */
static int merge_inputs(char **inputs, int n, results_t *merged, out_t *o)
{
    results_t **read = calloc((size_t)n, sizeof(*read));
    if (!read)
        return SQ_EXIT_FAILURE;
    int exit_code = SQ_EXIT_OK;
    for (int i = 0; i < n && exit_code == SQ_EXIT_OK; i++) {
        if (results_read(inputs[i], &read[i], o) != 0) {
            exit_code = SQ_EXIT_FAILURE;
            break;
        }
        for (int j = 0; j < i; j++)
            warn_duplicate(results_meta(read[j]), inputs[j], results_meta(read[i]), inputs[i], o);
        int rc = results_merge(merged, read[i], inputs[i], o);
        if (rc != 0)
            exit_code = exit_of(rc);
    }
    for (int i = 0; i < n; i++)
        results_free(read[i]);
    free(read);
    int rc = exit_code == SQ_EXIT_OK ? results_merge_finish(merged, o) : 0;
    return rc ? exit_of(rc) : exit_code;
}

/* ---- the verdict -------------------------------------------------------------------------- */

typedef struct {
    judge_t *j;
    enum judge_outcome outcome;
    json_t *reasons, *accepted;
    int exit_code; /* of the verdict, or 6 when a file could not be written */
} verdict_t;

/* Judges the merge from its own sections (judge_results): the same decision as a run's. Inputs
 * without a judgement (an older squall wrote them) cannot support a pass. */
static int judge_merged(results_t *r, verdict_t *v, out_t *o)
{
    char err[256] = "";
    v->reasons = json_array();
    v->accepted = json_array();
    int rc = judge_results(r, &v->j, &v->outcome, v->reasons, v->accepted, err, sizeof err);
    if (rc == SQ_ENOTFOUND) {
        v->outcome = JUDGE_OUTCOME_INCONCLUSIVE;
        json_array_append_new(v->reasons,
                              json_string("the inputs carry no judgement section (written by an "
                                          "older squall or not by `squall run`): nothing to "
                                          "judge the merge on"));
        rc = 0;
    } else if (rc == SQ_EPARSE) {
        out_error(o, "the inputs' %s: %s", err, sq_strerror(rc));
    } else if (rc == 0) {
        rc = results_set_section(r, JUDGE_SECTION, judge_json(v->j));
    }
    v->exit_code = v->outcome == JUDGE_OUTCOME_FAIL           ? SQ_EXIT_OBJECTIVES
                   : v->outcome == JUDGE_OUTCOME_INCONCLUSIVE ? SQ_EXIT_INCONCLUSIVE
                                                              : SQ_EXIT_OK;
    return rc;
}

/* Each input's run as it recorded itself: name, seed, command line, overrides, verdict, exit. */
static json_t *input_runs(const results_t *r)
{
    json_t *list = json_array(), *in;
    size_t i;
    json_array_foreach(results_inputs(r), i, in)
    {
        json_t *run = json_object_get(json_object_get(in, "sections"), "run");
        json_t *e = json_pack("{s:O?}", "name", json_object_get(in, "name"));
        static const char *const keys[] = {"seed",    "command_line", "overrides",
                                           "verdict", "exit_code",    "squall_version"};
        for (size_t k = 0; e && run && k < sizeof keys / sizeof keys[0]; k++)
            if (json_object_get(run, keys[k]))
                json_object_set(e, keys[k], json_object_get(run, keys[k]));
        json_array_append_new(list, e);
    }
    return list;
}

/* A value of the inputs' run sections when every input has the same, else NULL. */
static json_t *common(const json_t *runs, const char *key)
{
    json_t *first = json_object_get(json_array_get(runs, 0), key), *e;
    size_t i;
    json_array_foreach(runs, i, e)
    {
        if (!first || !json_equal(first, json_object_get(e, key)))
            return NULL;
    }
    return first;
}

/* The merge's "run" section: its verdict (what `squall merge` exits with), how it was made,
 * and each input's own run. Seed and overrides are there when every input had the same. */
static json_t *run_json(const results_t *r, const verdict_t *v, const char *line)
{
    json_t *runs = input_runs(r);
    json_t *s = json_pack("{s:s, s:O, s:O, s:i, s:s, s:s?, s:O?, s:O?, s:o}", "verdict",
                          judge_outcome_name(v->outcome), "reasons", v->reasons, "accepted",
                          v->accepted, "exit_code", v->exit_code, "squall_version", SQUALL_VERSION,
                          "command_line", line, "seed", common(runs, "seed"), "overrides",
                          common(runs, "overrides"), "inputs", runs);
    return s;
}

/* ---- writing -------------------------------------------------------------------------------- */

/* The directory an input names (a results directory, or the one holding a results.json). */
static char *input_dir(const char *path)
{
    struct stat st;
    if (stat(path, &st) == 0 && S_ISDIR(st.st_mode))
        return strdup(path);
    const char *slash = strrchr(path, '/');
    return slash ? strndup(path, (size_t)(slash - path) + (slash == path)) : strdup(".");
}

/* The inputs' journals as DIR/journal.ndjson, so that `squall cleanup DIR` finds every object
 * the shards created (their names are disjoint). */
static int merge_journals(char **dirs, int n, const char *dir, out_t *o)
{
    char **paths = calloc((size_t)n, sizeof(*paths)), out[4096];
    int rc = paths ? 0 : SQ_ENOMEM;
    for (int i = 0; rc == 0 && i < n; i++)
        rc = asprintf(&paths[i], "%s/%s", dirs[i], JOURNAL_FILE) < 0 ? (paths[i] = NULL, SQ_ENOMEM)
                                                                     : 0;
    snprintf(out, sizeof out, "%s/%s", dir, JOURNAL_FILE);
    if (rc == 0)
        rc = journal_merge((const char *const *)paths, (size_t)n, out, o);
    for (int i = 0; paths && i < n; i++)
        free(paths[i]);
    free(paths);
    return rc;
}

/* series.csv and series-hist.csv, storms.csv, journal.ndjson: the files beside results.json. */
static int write_files(char **inputs, int n, results_t *r, const char *dir, out_t *o)
{
    char **dirs = calloc((size_t)n, sizeof(*dirs));
    int rc = dirs ? 0 : SQ_ENOMEM;
    for (int i = 0; rc == 0 && i < n; i++)
        rc = (dirs[i] = input_dir(inputs[i])) ? 0 : SQ_ENOMEM;
    bool series;
    if (rc == 0)
        rc = results_series_merge((const char *const *)dirs, (size_t)n, r, dir, &series, o);
    if (rc == 0)
        rc = merge_journals(dirs, n, dir, o);
    for (int i = 0; dirs && i < n; i++)
        free(dirs[i]);
    free(dirs);
    json_t *storms = results_section(r, "storms");
    if (rc == 0 && storms)
        rc = obs_storms_csv(storms, dir, o);
    return rc;
}

static int write_all(char **inputs, int n, results_t *r, const char *dir, verdict_t *v,
                     const char *line, out_t *o)
{
    /* results.json first: it creates the directory. */
    int rc = results_set_section(r, "run", run_json(r, v, line));
    rc = rc ? rc : results_write_dir(r, dir, o);
    rc = rc ? rc : write_files(inputs, n, r, dir, o);
    rc = rc ? rc : report_html_write_dir(dir, r, o);
    if (rc) { /* results.json recorded an exit code that no longer holds: record the one that does
               */
        v->exit_code = SQ_EXIT_FAILURE;
        if (results_set_section(r, "run", run_json(r, v, line)) == 0)
            results_write_dir(r, dir, o);
    }
    return rc;
}

static void print_summary(const results_t *r, int n, const char *dir, const verdict_t *v, out_t *o)
{
    int64_t requests = 0;
    for (size_t i = 0; i < results_cell_count(r); i++)
        requests += results_cell_counters(results_cell_at(r, i))->count;
    out_print(o, "merged %d inputs: %zu cells, %lld requests -> %s/%s\n", n, results_cell_count(r),
              (long long)requests, dir, RESULTS_FILE);
    if (results_meta(r)->interrupted)
        out_warn(o, "at least one input ended early (%s)",
                 results_meta(r)->stop_reason ? results_meta(r)->stop_reason : "no reason given");
    if (v->j)
        judge_print(v->j, o);
    out_print(o, "\nverdict: %s\n", judge_outcome_word(v->outcome));
    size_t i;
    const json_t *why;
    json_array_foreach(v->reasons, i, why) out_print(o, "  %s\n", json_string_value(why));
    json_array_foreach(v->accepted, i, why)
        out_print(o, "  accepted by the plan: %s\n", json_string_value(why));
}

/* The summary is talk, not a result (the results are on disk): it goes to stderr, line by line
 * at the info level, through a capture so that the objectives table is laid out once. */
static void summary_to_diag(const results_t *r, int n, const char *dir, const verdict_t *v,
                            out_t *o)
{
    out_t *cap = out_new_capture();
    if (!cap) {
        out_error(o, "out of memory while printing the summary");
        return;
    }
    print_summary(r, n, dir, v, cap);
    cli_lines_to_diag(out_captured_diag(cap), OUT_WARN, o); /* its warnings, already prefixed */
    cli_lines_to_diag(out_captured_results(cap), OUT_INFO, o);
    out_free(cap);
}

/* --json: the figures of print_summary and results.json's "run" section (verdict, reasons,
 * accepted, inputs) and "objectives" section (every check) as written. */
static void print_json(const results_t *r, int n, const char *dir, out_t *o)
{
    int64_t requests = 0;
    for (size_t i = 0; i < results_cell_count(r); i++)
        requests += results_cell_counters(results_cell_at(r, i))->count;
    json_t *doc =
        json_pack("{s:s, s:i, s:s, s:i, s:I, s:I, s:O?, s:O?}", "format", "squall-merge", "version",
                  1, "results", dir, "inputs", n, "cells", (json_int_t)results_cell_count(r),
                  "requests", (json_int_t)requests, "run", results_section(r, "run"), "objectives",
                  results_section(r, "objectives"));
    char *text = doc ? json_dumps(doc, JSON_INDENT(2)) : NULL;
    if (text)
        out_print(o, "%s\n", text);
    free(text);
    json_decref(doc);
}

/* Refuses an existing DIR/results.json unless --force. */
static int check_output(const cli_cmd_t *cmd, const char *dir, bool force, out_t *o)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_FILE);
    struct stat st;
    if (!force && stat(path, &st) == 0)
        return cli_usage_error(cmd, o, "%s exists; pass --force to replace it", path);
    return SQ_EXIT_OK;
}

/* A value of input in: a section's key (section NULL: the input's meta), or its sub-key. */
static json_t *input_value(json_t *in, const char *section, const char *key, const char *sub)
{
    json_t *from = section ? json_object_get(json_object_get(in, "sections"), section) : in;
    json_t *v = json_object_get(from, key);
    return sub ? json_object_get(v, sub) : v;
}

/* Shards of one run ran one plan with one seed and the same overrides; inputs that differ in
 * any are refused unless --force (what differs, between which two, in one line). A value an
 * input does not record (an older squall's) is not compared. */
static int check_same_run(const cli_cmd_t *cmd, const results_t *r, bool force, out_t *o)
{
    static const struct {
        const char *what, *section, *key, *sub;
    } k[] = {
        {"plans (SHA-256)", NULL, "plan", "sha256"},
        {"seeds", "run", "seed", NULL},
        {"overrides (--set)", "run", "overrides", NULL},
    };
    json_t *inputs = results_inputs(r), *first = json_array_get(inputs, 0), *in;
    size_t i;
    json_array_foreach(inputs, i, in)
    {
        for (size_t j = 0; !force && i > 0 && j < sizeof k / sizeof k[0]; j++) {
            json_t *a = input_value(first, k[j].section, k[j].key, k[j].sub),
                   *b = input_value(in, k[j].section, k[j].key, k[j].sub);
            if (a && b && !json_equal(a, b))
                return cli_usage_error(cmd, o,
                                       "%s and %s ran with different %s: not shards of one run; "
                                       "pass --force to merge them anyway",
                                       json_string_value(json_object_get(first, "name")),
                                       json_string_value(json_object_get(in, "name")), k[j].what);
        }
    }
    return SQ_EXIT_OK;
}

int cli_merge_run(const cli_cmd_t *cmd, char **inputs, int n, const char *dir, bool force,
                  bool json, bool quiet, const char *line, out_t *o)
{
    results_t *merged = NULL;
    verdict_t v = {0};
    int exit_code = results_new(&merged) ? SQ_EXIT_FAILURE : merge_inputs(inputs, n, merged, o);
    if (exit_code == SQ_EXIT_OK)
        exit_code = check_same_run(cmd, merged, force, o);
    if (exit_code == SQ_EXIT_OK)
        exit_code = check_output(cmd, dir, force, o);
    if (exit_code == SQ_EXIT_OK && judge_merged(merged, &v, o) != 0)
        exit_code = SQ_EXIT_FAILURE;
    if (exit_code == SQ_EXIT_OK && write_all(inputs, n, merged, dir, &v, line, o) != 0)
        exit_code = SQ_EXIT_FAILURE;
    if (exit_code == SQ_EXIT_OK) {
        if (json)
            print_json(merged, n, dir, o);
        else if (!quiet)
            summary_to_diag(merged, n, dir, &v, o);
        exit_code = v.exit_code;
    }
    judge_free(v.j);
    json_decref(v.reasons);
    json_decref(v.accepted);
    results_free(merged);
    return exit_code;
}

static int merge_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cli_args_t a;
    const char *v, *dir = NULL;
    bool force = false, json = false;
    char **inputs = calloc((size_t)argc + 1, sizeof(*inputs));
    int n = 0, k;
    if (!inputs)
        return SQ_EXIT_FAILURE;
    cli_args_init(&a, cmd, argc, argv);
    while ((k = cli_next(&a, o, &v)) != CLI_END) {
        if (k == CLI_ERROR || k == CLI_HELP) {
            if (k == CLI_HELP)
                cli_print_help(cmd, o);
            free(inputs);
            return k == CLI_HELP ? SQ_EXIT_OK : SQ_EXIT_USAGE;
        }
        if (k == CLI_POSITIONAL)
            inputs[n++] = (char *)v;
        else if (k == 0)
            dir = v;
        else if (k == 1)
            force = true;
        else
            json = true;
    }
    int exit_code;
    char *line = cli_command_line(cmd->name, argc, argv);
    if (!dir || n == 0)
        exit_code = cli_usage_error(
            cmd, o, "%s", !dir ? "missing -o DIR (where to write)" : "no inputs to merge");
    else
        exit_code = line ? cli_merge_run(cmd, inputs, n, dir, force, json, false, line, o)
                         : SQ_EXIT_FAILURE;
    free(line);
    free(inputs);
    return exit_code;
}

const cli_cmd_t cli_cmd_merge = {
    .name = "merge",
    .summary = "merge results of shards or runs into one results directory, judged as one run",
    .usage = "RESULTS... -o DIR [--force] [--json]",
    .description =
        "Each RESULTS is a results directory or a results.json file. Counters and histograms\n"
        "add up exactly: the merged percentiles are those of all samples recorded together.\n"
        "series.csv is merged by wall-clock second (unix_ms) and phase and class: counts and\n"
        "planned starts add, each second's percentiles come from its rows' histograms\n"
        "(series-hist.csv). Storm ticks are combined per tick instant. The merged meta lists\n"
        "every input (shard, host, start, sections, and each one's own verdict). The inputs'\n"
        "journals become one (DIR/journal.ndjson), so `squall cleanup DIR` finds every object\n"
        "the shards created. Inputs that ran different plans, seeds or overrides are not\n"
        "shards of one run: refused (exit 2) unless --force.\n"
        "\n"
        "The merge is then judged as one run with all the inputs' requests, on the objectives\n"
        "the inputs recorded (their \"judgement\" section, which must be the same in every\n"
        "input, as must the brakes): a percentile a shard had too few samples for is judged\n"
        "on the merged samples; a second in which any input could not offer its planned load,\n"
        "and an input that stopped early, make it INCONCLUSIVE. DIR gets results.json,\n"
        "series.csv, storms.csv and report.html.\n"
        "\n"
        "The summary (inputs, objectives, verdict) goes to stderr; the results are in DIR.\n"
        "With --json, stdout carries one JSON document (format \"squall-merge\").\n"
        "\n"
        "Exit codes, as for run: 0 PASS, 1 FAIL (an objective failed), 7 INCONCLUSIVE (also\n"
        "when the inputs carry no judgement); 2 when the inputs' histogram configurations,\n"
        "judgements or brakes differ, or DIR/results.json exists without --force; 6 for\n"
        "unreadable or malformed inputs and write failures.",
    .opts = merge_opts,
    .main = merge_main,
};
