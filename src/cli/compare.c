/* `squall compare`: BASE and NEW results directories compared per phase and class, with a
 * verdict per metric; the exit code says whether NEW was found slower (or with more errors). */
#include <stdlib.h>
#include <string.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/report.h"
#include "squall/results.h"
#include "squall/value.h"

enum { OPT_JSON, OPT_HTML, OPT_FALSE_ALARM, OPT_MIN_MS, OPT_MIN_TAIL, OPT_MIN_REL };

static const cli_opt_t compare_opts[] = {
    [OPT_JSON] = {"json", 0, NULL, "print the comparison as JSON instead of a table"},
    [OPT_HTML] = {"html", 0, "FILE", "also write a side-by-side HTML page to FILE"},
    [OPT_FALSE_ALARM] = {"false-alarm", 0, "PERCENT",
                         "chance per line of calling same-configuration runs different "
                         "(default 1%)"},
    [OPT_MIN_MS] = {"min-change", 0, "DURATION",
                    "smallest latency change that counts (default 1ms)"},
    [OPT_MIN_TAIL] = {"min-change-tail", 0, "DURATION",
                      "smallest p99 / p99.9 change that counts (default 3ms)"},
    [OPT_MIN_REL] = {"min-change-pct", 0, "PERCENT",
                     "smallest change relative to BASE that counts (default 10%)"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    const char *dir[2], *html;
    bool json;
    report_cmp_opts_t opts;
} compare_args_t;

static int parse_value(const cli_cmd_t *cmd, int k, const char *v, compare_args_t *ca, out_t *o)
{
    int64_t ns;
    if (k == OPT_HTML)
        ca->html = v;
    else if (k == OPT_FALSE_ALARM && (value_parse_percent(v, &ca->opts.false_alarm) ||
                                      ca->opts.false_alarm <= 0 || ca->opts.false_alarm > 0.5))
        return cli_usage_error(cmd, o, "--false-alarm needs %s above 0 and at most 50%%, got '%s'",
                               VALUE_PERCENT_EXPECTS, v);
    else if (k == OPT_MIN_MS && value_parse_duration(v, &ns))
        return cli_usage_error(cmd, o, "--min-change needs %s, got '%s'", VALUE_DURATION_EXPECTS,
                               v);
    else if (k == OPT_MIN_MS)
        ca->opts.min_abs_ms = (double)ns / 1e6;
    else if (k == OPT_MIN_TAIL && value_parse_duration(v, &ns))
        return cli_usage_error(cmd, o, "--min-change-tail needs %s, got '%s'",
                               VALUE_DURATION_EXPECTS, v);
    else if (k == OPT_MIN_TAIL)
        ca->opts.min_tail_ms = (double)ns / 1e6;
    else if (k == OPT_MIN_REL && value_parse_percent(v, &ca->opts.min_rel))
        return cli_usage_error(cmd, o, "--min-change-pct needs %s, got '%s'", VALUE_PERCENT_EXPECTS,
                               v);
    return -1;
}

/* One word of argv into *ca (cli_take_fn). */
static int take_word(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    compare_args_t *ca = ctx;
    if (k == CLI_POSITIONAL && ca->dir[1])
        return cli_usage_error(cmd, o, "two results directories only (BASE NEW), got a third: '%s'",
                               v);
    if (k == CLI_POSITIONAL)
        ca->dir[ca->dir[0] ? 1 : 0] = v;
    else if (k == OPT_JSON)
        ca->json = true;
    else
        return parse_value(cmd, k, v, ca, o);
    return -1;
}

/* Returns -1 to go on, else an exit code. */
static int parse(const cli_cmd_t *cmd, int argc, char **argv, compare_args_t *ca, out_t *o)
{
    report_cmp_opts_default(&ca->opts);
    int code = cli_parse(cmd, argc, argv, o, take_word, ca);
    if (code >= 0)
        return code;
    if (!ca->dir[1])
        return cli_usage_error(cmd, o, "needs BASE and NEW results directories");
    return -1;
}

/* Reads one run: results.json and series.csv (needed: the test runs on per-second samples). */
static int read_run(const char *dir, results_t **res, report_series_t **s, out_t *o)
{
    char path[4096];
    if (results_read(dir, res, o))
        return SQ_EIO;
    snprintf(path, sizeof path, "%s/%s", dir, REPORT_SERIES_FILE);
    return report_series_read(path, s, o) ? SQ_EIO : 0;
}

static int compare_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    compare_args_t ca = {0};
    int code = parse(cmd, argc, argv, &ca, o);
    if (code >= 0)
        return code;
    results_t *res[2] = {NULL, NULL};
    report_series_t *s[2] = {NULL, NULL};
    report_cmp_t *c = NULL;
    code = SQ_EXIT_FAILURE;
    if (read_run(ca.dir[0], &res[0], &s[0], o) || read_run(ca.dir[1], &res[1], &s[1], o) ||
        report_compare(res[0], s[0], res[1], s[1], &ca.opts, &c))
        goto out;
    report_cmp_warn(c, res[0], res[1], o);
    if (ca.json) {
        json_t *j = report_cmp_json(c, &ca.opts);
        char *text = j ? json_dumps(j, JSON_INDENT(2)) : NULL;
        if (text)
            out_print(o, "%s\n", text);
        free(text);
        json_decref(j);
    } else {
        report_cmp_print(c, o);
    }
    if (ca.html && report_cmp_html(c, res[0], res[1], ca.html, o))
        goto out;
    code = report_cmp_worse(c) ? SQ_EXIT_OBJECTIVES : SQ_EXIT_OK;
out:
    report_cmp_free(c);
    for (int i = 0; i < 2; i++) {
        results_free(res[i]);
        report_series_free(s[i]);
    }
    return code;
}

const cli_cmd_t cli_cmd_compare = {
    .name = "compare",
    .summary = "compare two runs: slower, faster or within noise",
    .usage = "BASE NEW [--json] [--html FILE] [--false-alarm PERCENT] [--min-change DURATION]",
    .description =
        "BASE and NEW are results directories (results.json and series.csv). For every phase\n"
        "and class of either, compares p50, p99, p99.9 and the error rate, each with a verdict:\n"
        "slower (more errors), faster (fewer errors), within noise, or untested. Samples are\n"
        "series.csv's seconds; in a fleet phase, the fleet's ticks; for a watch class, its open\n"
        "and propagation latencies, counted at most once per stream and per second of the\n"
        "phase. The test (Mann-Whitney U; for watch classes the quantile test with Fisher's\n"
        "exact test) must call the difference unlikely between runs of one configuration, at\n"
        "the --false-alarm chance per line, and the runs must differ by more than --min-change\n"
        "(p50; --min-change-tail for p99 and p99.9; 1 percentage point for error rates) and\n"
        "--min-change-pct of BASE. A line with too few samples to ever pass the test is\n"
        "untested and says how many would do. A warning names a different plan, target or --set\n"
        "overrides. The test sees the samples of one run: if the machine's load changed for a\n"
        "whole run, repeat.\n"
        "Exit 0: nothing slower; 1: a line is slower or has more errors; 2: usage mistake;\n"
        "6: a file could not be read or written.",
    .opts = compare_opts,
    .main = compare_main,
};
