/* `squall report`: regenerates DIR/report.html from DIR/results.json and DIR/series.csv. */
#include "squall/cli.h"
#include "squall/err.h"
#include "squall/report.h"
#include "squall/results.h"

static const cli_opt_t report_opts[] = {
    {NULL, 0, NULL, NULL},
};

/* The one positional word, RESULTS_DIR (report takes no options). */
static int take_dir(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    const char **dir = ctx;
    (void)k;
    if (*dir)
        return cli_usage_error(cmd, o, "one RESULTS_DIR only (got '%s' and '%s')", *dir, v);
    *dir = v;
    return -1;
}

static int report_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    const char *dir = NULL;
    int code = cli_parse(cmd, argc, argv, o, take_dir, &dir);
    if (code >= 0)
        return code;
    if (!dir)
        return cli_usage_error(cmd, o, "missing RESULTS_DIR");
    results_t *res = NULL;
    if (results_read(dir, &res, o) != 0)
        return SQ_EXIT_FAILURE;
    int rc = report_html_write_dir(dir, res, o);
    results_free(res);
    if (rc)
        return SQ_EXIT_FAILURE;
    out_print(o, "%s/%s\n", dir, REPORT_HTML_FILE);
    return SQ_EXIT_OK;
}

const cli_cmd_t cli_cmd_report = {
    .name = "report",
    .summary = "write report.html of a results directory again",
    .usage = "RESULTS_DIR",
    .description =
        "Reads RESULTS_DIR/results.json and RESULTS_DIR/series.csv and writes\n"
        "RESULTS_DIR/report.html: one self-contained page (inline SVG and CSS, no scripts,\n"
        "nothing fetched) with the run header, objective verdicts, generator health, per phase\n"
        "and class tables, plots over time (offered vs achieved, queue wait and in flight,\n"
        "errors, latency per class, heat maps, watches, storm ticks; in seconds since the start,\n"
        "the wall-clock start on the axis, dropped watch streams marked) and per phase the\n"
        "share of requests slower than x. squall run writes the same file at the end of every\n"
        "run. Numbers have no thousands separators. Without series.csv the plots over time are\n"
        "left out. Exit 0 when written, 2 on a usage mistake, 6 when a file cannot be read or\n"
        "written.",
    .opts = report_opts,
    .main = report_main,
};
