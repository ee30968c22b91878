/* `squall trend RUNS... | DIR`: many runs in start order, change points per phase x class and
 * metric; the exit code says whether the newest runs are significantly worse. */
#include <dirent.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/results.h"
#include "squall/trend.h"
#include "squall/value.h"

enum { OPT_JSON, OPT_HTML, OPT_STRICT, OPT_FALSE_ALARM };

static const cli_opt_t trend_opts[] = {
    [OPT_JSON] = {"json", 0, NULL, "print the trend as JSON instead of a table"},
    [OPT_HTML] = {"html", 0, "FILE", "also write a page with one plot per phase and class"},
    [OPT_STRICT] = {"strict", 0, NULL,
                    "refuse runs of different plans, overrides or squall versions"},
    [OPT_FALSE_ALARM] = {"false-alarm", 0, "PERCENT",
                         "chance per change of calling noise significant (default 1%)"},
    {NULL, 0, NULL, NULL},
};

#define TREND_MAX_RUNS 10000

typedef struct {
    char **dirs;
    size_t n;
    const char *html;
    bool json, strict;
    report_cmp_opts_t opts;
} trend_args_t;

static bool has_results(const char *dir)
{
    char path[4200];
    struct stat st;
    if (strlen(dir) > 4096)
        return false;
    snprintf(path, sizeof path, "%s/results.json", dir);
    return stat(path, &st) == 0 && S_ISREG(st.st_mode);
}

static int add_dir(trend_args_t *ta, const char *dir)
{
    if (ta->n >= TREND_MAX_RUNS)
        return SQ_ELIMIT;
    char *d = strdup(dir);
    if (!d)
        return SQ_ENOMEM;
    ta->dirs[ta->n++] = d;
    return 0;
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* A word is a results directory, or a directory whose subdirectories are (one level). */
static int take_path(const cli_cmd_t *cmd, const char *v, trend_args_t *ta, out_t *o)
{
    if (has_results(v))
        return add_dir(ta, v) ? SQ_EXIT_FAILURE : -1;
    DIR *d = opendir(v);
    if (!d)
        return cli_usage_error(cmd, o,
                               "'%s' is neither a results directory nor a directory of "
                               "them",
                               v);
    size_t before = ta->n;
    struct dirent *e;
    char path[4096];
    int rc = -1;
    while (rc < 0 && (e = readdir(d))) {
        if (e->d_name[0] == '.')
            continue;
        snprintf(path, sizeof path, "%s/%s", v, e->d_name);
        if (has_results(path) && add_dir(ta, path))
            rc = SQ_EXIT_FAILURE;
    }
    closedir(d);
    qsort(ta->dirs + before, ta->n - before, sizeof(char *), by_name);
    if (rc < 0 && ta->n == before)
        return cli_usage_error(cmd, o, "no results.json in '%s' nor in its subdirectories", v);
    return rc;
}

static int take_word(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    trend_args_t *ta = ctx;
    if (k == CLI_POSITIONAL)
        return take_path(cmd, v, ta, o);
    if (k == OPT_JSON)
        ta->json = true;
    else if (k == OPT_STRICT)
        ta->strict = true;
    else if (k == OPT_HTML)
        ta->html = v;
    else if (k == OPT_FALSE_ALARM && (value_parse_percent(v, &ta->opts.false_alarm) ||
                                      ta->opts.false_alarm <= 0 || ta->opts.false_alarm > 0.5))
        return cli_usage_error(cmd, o, "--false-alarm needs %s above 0 and at most 50%%, got '%s'",
                               VALUE_PERCENT_EXPECTS, v);
    return -1;
}

static int report(const cli_cmd_t *cmd, trend_args_t *ta, trend_t *t, out_t *o)
{
    if (ta->strict && trend_group_count(t) > 1)
        return cli_usage_error(cmd, o,
                               "--strict: the runs differ in plan, overrides or squall version "
                               "(%zu groups; drop --strict to see each group apart)",
                               trend_group_count(t));
    if (ta->json) {
        json_t *j = trend_json(t);
        char *text = j ? json_dumps(j, JSON_INDENT(2)) : NULL;
        if (text)
            out_print(o, "%s\n", text);
        free(text);
        json_decref(j);
        if (!text)
            return SQ_EXIT_FAILURE;
    } else {
        trend_print(t, o);
    }
    if (ta->html && trend_html(t, ta->html, o))
        return SQ_EXIT_FAILURE;
    return trend_newest_worse(t) ? SQ_EXIT_OBJECTIVES : SQ_EXIT_OK;
}

static int trend_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    trend_args_t ta = {.dirs = calloc(TREND_MAX_RUNS, sizeof(char *))};
    results_t **res = calloc(TREND_MAX_RUNS, sizeof(*res));
    trend_t *t = NULL;
    int code = SQ_EXIT_FAILURE;
    report_cmp_opts_default(&ta.opts);
    if (!ta.dirs || !res)
        goto out;
    code = cli_parse(cmd, argc, argv, o, take_word, &ta);
    if (code >= 0)
        goto out;
    code = SQ_EXIT_USAGE;
    if (ta.n < 2) {
        cli_usage_error(cmd, o, "needs at least two runs (results directories)");
        goto out;
    }
    code = SQ_EXIT_FAILURE;
    for (size_t i = 0; i < ta.n; i++)
        if (results_read(ta.dirs[i], &res[i], o))
            goto out;
    if (trend_new(res, (const char *const *)ta.dirs, ta.n, &ta.opts, &t))
        goto out;
    code = report(cmd, &ta, t, o);
out:
    trend_free(t);
    for (size_t i = 0; i < ta.n; i++) {
        results_free(res[i]);
        free(ta.dirs[i]);
    }
    free(res);
    free(ta.dirs);
    return code;
}

const cli_cmd_t cli_cmd_trend = {
    .name = "trend",
    .summary = "find change points across many runs (PELT)",
    .usage = "RUNS... | DIR [--json] [--html FILE] [--strict] [--false-alarm PERCENT]",
    .description =
        "RUNS are results directories; a DIR without results.json stands for its subdirectories\n"
        "that have one. Runs are ordered by start time and grouped by plan (the file's SHA-256),\n"
        "--set overrides and squall version; each group is analysed apart (--strict refuses more\n"
        "than one). For every phase and class: p50, p99 and p99.9 of response time and the error\n"
        "rate of each run, and their change points by PELT (Killick, Fearnhead & Eckley, JASA\n"
        "2012) with a normal mean-change cost and the penalty 2 ln n. Each change is reported\n"
        "with the first run after it, its size (difference of the segment means) and its\n"
        "confidence (1 - p of the Mann-Whitney U test between the segments before and after).\n"
        "It is significant when p is below --false-alarm and the size passes compare's floors\n"
        "(1 ms at p50, 3 ms at p99 and p99.9, 1 point of error rate, and 10% of the value\n"
        "before), also when no objective broke. Six runs on each side of a change are enough\n"
        "for the default 1% (values tied at the histograms' resolution need the normal\n"
        "approximation); watch classes are left out.\n"
        "Exit 0: no series ends in a significant change for the worse; 1: the newest segment of\n"
        "a series is one (slower or more errors); 2: usage mistake (or --strict and several\n"
        "groups); 6: a file could not be read or written.",
    .opts = trend_opts,
    .main = trend_main,
};
