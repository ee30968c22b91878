/* `squall merge`: pools results (the shards of one run) into one results directory whose
 * histograms are exactly those of all samples recorded together. */
#include <stdlib.h>
#include <string.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/results.h"

static const cli_opt_t merge_opts[] = {
    {"output", 'o', "DIR", "results directory to create (required)"},
    {"force", 0, NULL, "replace DIR/results.json if it exists"},
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

/* Reads every input and merges it into *merged; returns an exit code. */
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
        if (rc == SQ_EMISMATCH)
            exit_code = SQ_EXIT_USAGE;
        else if (rc != 0)
            exit_code = SQ_EXIT_FAILURE;
    }
    for (int i = 0; i < n; i++)
        results_free(read[i]);
    free(read);
    return exit_code;
}

static void print_summary(const results_t *r, int n, const char *dir, out_t *o)
{
    int64_t requests = 0;
    for (size_t i = 0; i < results_cell_count(r); i++)
        requests += results_cell_counters(results_cell_at(r, i))->count;
    out_print(o, "merged %d inputs: %zu cells, %lld requests -> %s/%s\n", n, results_cell_count(r),
              (long long)requests, dir, RESULTS_FILE);
    if (results_meta(r)->interrupted)
        out_warn(o, "at least one input ended early (%s)",
                 results_meta(r)->stop_reason ? results_meta(r)->stop_reason : "no reason given");
}

static int merge_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cli_args_t a;
    const char *v, *dir = NULL;
    bool force = false;
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
        else
            force = true;
    }
    int exit_code = SQ_EXIT_OK;
    results_t *merged = NULL;
    if (!dir || n == 0) {
        exit_code = cli_usage_error(
            cmd, o, "%s", !dir ? "missing -o DIR (where to write)" : "no inputs to merge");
    } else if (results_new(&merged) != 0) {
        exit_code = SQ_EXIT_FAILURE;
    } else {
        exit_code = merge_inputs(inputs, n, merged, o);
    }
    if (exit_code == SQ_EXIT_OK && !force) {
        char path[4096];
        snprintf(path, sizeof path, "%s/%s", dir, RESULTS_FILE);
        FILE *f = fopen(path, "r");
        if (f) {
            fclose(f);
            exit_code = cli_usage_error(cmd, o, "%s exists; pass --force to replace it", path);
        }
    }
    if (exit_code == SQ_EXIT_OK && results_write_dir(merged, dir, o) != 0)
        exit_code = SQ_EXIT_FAILURE;
    if (exit_code == SQ_EXIT_OK)
        print_summary(merged, n, dir, o);
    results_free(merged);
    free(inputs);
    return exit_code;
}

const cli_cmd_t cli_cmd_merge = {
    .name = "merge",
    .summary = "merge results of shards or runs into one results directory",
    .usage = "RESULTS... -o DIR [--force]",
    .description =
        "Each RESULTS is a results directory or a results.json file. Counters and histograms\n"
        "add up exactly: the merged percentiles are those of all samples recorded together.\n"
        "The merged meta lists every input (shard, host, start, sections). Inputs whose\n"
        "histogram configurations differ are refused (exit 2); unreadable or malformed\n"
        "inputs and write failures exit 6.",
    .opts = merge_opts,
    .main = merge_main,
};
