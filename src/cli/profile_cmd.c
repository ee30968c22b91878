/* `squall profile LOG [-o PLAN.yaml]`: a recorded traffic log turned into a plan an engineer
 * can edit and keep, checked by the same loader as `squall check` before it is handed over. */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/plan.h"
#include "squall/profile.h"
#include "squall/value.h"

enum {
    OPT_OUT,
    OPT_FORCE,
    OPT_FORMAT,
    OPT_FIELD,
    OPT_TIME_UNIT,
    OPT_DURATION_UNIT,
    OPT_TIME_AT,
    OPT_TARGET,
    OPT_WATCH_PARAM,
    OPT_STEP,
    OPT_TOLERANCE,
};

static const cli_opt_t profile_opts[] = {
    [OPT_OUT] = {"out", 'o', "PLAN.yaml", "write the plan there (default: standard output)"},
    [OPT_FORCE] = {"force", 0, NULL, "replace PLAN.yaml if it exists"},
    [OPT_FORMAT] = {"format", 0, "FORMAT", "auto (default), common, combined or ndjson"},
    [OPT_FIELD] = {"field", 0, "NAME=KEY",
                   "NDJSON: which JSON key holds time, method, path, status, duration, ..."},
    [OPT_TIME_UNIT] = {"time-unit", 0, "UNIT",
                       "NDJSON time: auto (default), rfc3339, s, ms, us, ns"},
    [OPT_DURATION_UNIT] = {"duration-unit", 0, "UNIT", "NDJSON duration: s (default), ms, us, ns"},
    [OPT_TIME_AT] = {"time-at", 0, "start|end",
                     "the logged time is the request's start (default) or end (nginx)"},
    [OPT_TARGET] = {"target", 0, "URL", "target.url of the plan (default http://127.0.0.1:7070)"},
    [OPT_WATCH_PARAM] = {"watch-param", 0, "NAME", "query parameter marking a watch (watch)"},
    [OPT_STEP] = {"step", 0, "DURATION", "width of the bins rate steps are made of (10s)"},
    [OPT_TOLERANCE] = {"tolerance", 0, "PERCENT",
                       "adjacent bins closer than this merge into one step (10%)"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    const char *log, *out;
    bool force;
    prof_config_t cfg;
} profile_args_t;

/* The options the log reader owns, by its own names. */
static int take_log_option(const cli_cmd_t *cmd, int k, const char *v, out_t *o, profile_args_t *pa)
{
    static const char *const keys[] = {[OPT_FORMAT] = "format",
                                       [OPT_FIELD] = "field",
                                       [OPT_TIME_UNIT] = "time-unit",
                                       [OPT_DURATION_UNIT] = "duration-unit",
                                       [OPT_TIME_AT] = "time-at"};
    char err[256];
    if (alog_config_set(&pa->cfg.log, keys[k], v, err, sizeof err))
        return cli_usage_error(cmd, o, "--%s", err);
    return -1;
}

static int take_word(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    profile_args_t *pa = ctx;
    double pct;
    switch (k) {
    case CLI_POSITIONAL:
        return cli_take_one(cmd, &pa->log, v, "log", o);
    case OPT_OUT:
        pa->out = v;
        return -1;
    case OPT_FORCE:
        pa->force = true;
        return -1;
    case OPT_TARGET:
        pa->cfg.target_url = v;
        return -1;
    case OPT_WATCH_PARAM:
        pa->cfg.watch_param = v;
        return v[0] && !strpbrk(v, "&=?#/ ")
                   ? -1
                   : cli_usage_error(cmd, o,
                                     "--watch-param: expected a query parameter name, "
                                     "got '%s'",
                                     v);
    case OPT_STEP:
        if (value_parse_duration(v, &pa->cfg.bin_ns) || pa->cfg.bin_ns < INT64_C(1000000000))
            return cli_usage_error(cmd, o, "--step: expected a duration of at least 1s, got '%s'",
                                   v);
        return -1;
    case OPT_TOLERANCE:
        if (value_parse_percent(v, &pct))
            return cli_usage_error(cmd, o, "--tolerance: expected %s, got '%s'",
                                   VALUE_PERCENT_EXPECTS, v);
        pa->cfg.tolerance = pct;
        return -1;
    default:
        return take_log_option(cmd, k, v, o, pa);
    }
}

/* Writes the plan to a temporary file beside its destination (or in /tmp for standard output)
 * and loads it as `squall check` would. Returns the temporary path (malloc'd) or NULL. */
static char *write_checked(const prof_t *p, const char *out, out_t *o)
{
    char *tmp = malloc(strlen(out ? out : "/tmp/squall-profile") + 16);
    if (!tmp)
        return NULL;
    sprintf(tmp, "%s.XXXXXX", out ? out : "/tmp/squall-profile");
    int fd = mkstemp(tmp);
    FILE *f = fd >= 0 ? fdopen(fd, "w") : NULL;
    if (!f) {
        out_error(o, "%s: cannot write: %s", out ? out : tmp, strerror(errno));
        if (fd >= 0)
            close(fd), unlink(tmp);
        free(tmp);
        return NULL;
    }
    int rc = prof_write_plan(p, f);
    if (fclose(f) != 0 || rc) {
        out_error(o, "%s: cannot write: %s", out ? out : tmp, strerror(errno));
        unlink(tmp);
        free(tmp);
        return NULL;
    }
    plan_t *plan;
    if (plan_load(tmp, NULL, 0, &plan, o) != 0) {
        out_error(o, "the derived plan does not validate (kept in %s): please report it", tmp);
        free(tmp);
        return NULL;
    }
    plan_free(plan);
    return tmp;
}

/* Moves the checked plan to -o, or copies it to standard output. */
static int deliver(const char *tmp, const char *out, out_t *o)
{
    if (out) {
        if (rename(tmp, out) == 0)
            return 0;
        out_error(o, "%s: %s", out, strerror(errno));
        unlink(tmp);
        return -1;
    }
    FILE *f = fopen(tmp, "r");
    char buf[8192];
    size_t n;
    while (f && (n = fread(buf, 1, sizeof buf, f)) > 0)
        out_print(o, "%.*s", (int)n, buf);
    if (f)
        fclose(f);
    unlink(tmp);
    return f ? 0 : -1;
}

static int run_profile(profile_args_t *pa, out_t *o)
{
    prof_t *p;
    int rc = prof_analyze(pa->log, &pa->cfg, &p, o);
    if (rc)
        return rc == SQ_EIO || rc == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    char *tmp = write_checked(p, pa->out, o);
    prof_free(p);
    int exit_code = tmp && deliver(tmp, pa->out, o) == 0 ? SQ_EXIT_OK : SQ_EXIT_FAILURE;
    if (exit_code == SQ_EXIT_OK && pa->out)
        out_info(o,
                 "squall profile: wrote %s (it validates: `squall check %s` shows what it sends)",
                 pa->out, pa->out);
    free(tmp);
    return exit_code;
}

static int profile_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    profile_args_t pa = {0};
    prof_config_init(&pa.cfg);
    int rc = cli_parse(cmd, argc, argv, o, take_word, &pa);
    if (rc >= 0)
        return rc;
    if (!pa.log)
        return cli_usage_error(cmd, o, "which log? (expected LOG: an access log file)");
    if (strncmp(pa.cfg.target_url, "http://", 7) != 0 &&
        strncmp(pa.cfg.target_url, "https://", 8) != 0)
        return cli_usage_error(cmd, o, "--target: expected an http:// or https:// URL, got '%s'",
                               pa.cfg.target_url);
    if (pa.out && !pa.force && access(pa.out, F_OK) == 0)
        return cli_usage_error(cmd, o, "%s exists; pass --force to replace it", pa.out);
    return run_profile(&pa, o);
}

const cli_cmd_t cli_cmd_profile = {
    .name = "profile",
    .summary = "turn a recorded access log into an editable plan",
    .usage = "LOG [-o PLAN.yaml] [--format F] [--field NAME=KEY]... [options]",
    .description =
        "Reads LOG (Common or Combined Log Format, or NDJSON; gzip-compressed or not; the\n"
        "format is detected unless --format says it) three times and writes a plan that\n"
        "`squall check` accepts, with comments saying what was measured:\n"
        "  - request classes by path shape: varying segments become picks or word lists;\n"
        "    object paths become gets, collections lists (page size and continuation seen),\n"
        "    requests with ?watch= watches, writes keep their method;\n"
        "  - the open-loop rate as steps and its mix; arrivals even or poisson by the index\n"
        "    of dispersion of counts (Cox & Lewis 1966);\n"
        "  - clients repeating a path at one period become a fleet (agents, every), aligned\n"
        "    or spread by a Rayleigh test of their phases (Mardia & Jupp 2000, 6.3);\n"
        "  - watches with how many are open at once; objectives from common practice.\n"
        "NDJSON fields (--field NAME=KEY, dotted keys reach into objects): time, method,\n"
        "path (a path or a full URI), status, duration, client, bytes, body; defaults are\n"
        "the NAMEs themselves.\n"
        "The log is refused (exit 2) when most of its first 1000 lines do not parse. Exit 0\n"
        "plan written, 2 usage or a log it cannot use, 6 input/output failure.",
    .opts = profile_opts,
    .main = profile_main,
};
