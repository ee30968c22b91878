/* `squall run PLAN`: load a plan, refuse unsafe targets, send its traffic, write the results.
 * Its options and its exit codes are shared with `squall demo` (cli_run.h). */
#include <stdlib.h>
#include <string.h>

#include "cli_run.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/results.h"
#include "squall/value.h"

enum {
    OPT_OUT,
    OPT_SET,
    OPT_CONFIRM,
    OPT_INSECURE,
    OPT_NO_BRAKES,
    OPT_QUIET,
    OPT_SEED,
    OPT_GRACE,
    OPT_SHARD,
    OPT_SHARD_COUNT,
    OPT_LAUNCHER,
    OPT_START_AT,
    OPT_PROCS,
    OPT_KEEP,
    OPT_FORCE,
    OPT_ALLOW_EXEC,
    OPT_METRICS,
    OPT_METRICS_PUBLIC,
    OPT_JSON
};

const cli_opt_t cli_run_opts[] = {
    [OPT_OUT] = {"out", 'o', "DIR", "results directory (default results/<UTC time>-<plan name>)"},
    [OPT_SET] = {"set", 0, "KEY=VALUE", "override a plan value, e.g. phases.steady.rate=100/s"},
    [OPT_CONFIRM] = {"confirm-target", 0, NULL,
                     "allow a target that is not loopback (tell its owners first)"},
    [OPT_INSECURE] = {"insecure", 0, NULL, "do not verify the target's TLS certificate (warns)"},
    [OPT_NO_BRAKES] = {"no-brakes", 0, NULL,
                       "drop the default brakes (the plan's own brakes still apply)"},
    [OPT_QUIET] = {"quiet", 'q', NULL, "no live line and no summary table"},
    [OPT_SEED] = {"seed", 0, "N", "seed for every random choice (default: the plan's, else time)"},
    [OPT_GRACE] = {"grace", 0, "DURATION",
                   "after a signal or brake, how long in-flight requests may take (2s)"},
    [OPT_SHARD] = {"shard", 0, "I/N",
                   "send only shard I's share of the plan, of N processes that together send it "
                   "(default: from the launcher)"},
    [OPT_SHARD_COUNT] = {"shard-count", 0, "N",
                         "how many shards, when the launcher gives only the index (indexed jobs)"},
    [OPT_LAUNCHER] = {"launcher", 0, "NAME",
                      "read the shard from: auto (default), none, open-mpi, pmix, pmi, slurm, "
                      "indexed-job"},
    [OPT_START_AT] = {"start-at", 0, "TIME",
                      "begin the first phase at an RFC 3339 instant, or +DURATION from now"},
    [OPT_PROCS] = {"procs", 0, "N|auto",
                   "run N shards of the plan on this machine and merge them (auto: one per core)"},
    [OPT_KEEP] = {"keep", 0, NULL, "no teardown: leave the objects this run created"},
    [OPT_FORCE] = {"force", 0, NULL, "write into a results directory that already holds results"},
    [OPT_ALLOW_EXEC] = {"allow-exec", 0, NULL,
                        "let the plan's exec actions run programs on this machine"},
    [OPT_METRICS] = {"metrics", 0, "ADDR:PORT",
                     "serve squall's own metrics (OpenMetrics) at http://ADDR:PORT/metrics"},
    [OPT_METRICS_PUBLIC] = {"metrics-public", 0, NULL,
                            "allow --metrics on an address that is not loopback"},
    [OPT_JSON] = {"json", 0, NULL, "print the summary (verdict, judgement) as JSON, not a table"},
    {NULL, 0, NULL, NULL},
};

int cli_shard_parse(const char *v, int *index, int *count, const char **why)
{
    int64_t i, n;
    char a[32], b[32];
    const char *slash = strchr(v, '/');
    *why = "I/N is two whole numbers, e.g. 2/4";
    if (!slash || slash - v >= 32 || strlen(slash + 1) >= 32)
        return SQ_EINVAL;
    snprintf(a, sizeof a, "%.*s", (int)(slash - v), v);
    snprintf(b, sizeof b, "%s", slash + 1);
    if (value_parse_int(b, INT64_MIN, INT64_MAX, &n) ||
        value_parse_int(a, INT64_MIN, INT64_MAX, &i))
        return SQ_EINVAL;
    *why = "N (the number of shards) must be within 1..100000";
    if (n < 1 || n > 100000)
        return SQ_EINVAL;
    *why = "I must be within 1..N (shards count from 1)";
    if (i < 1 || i > n)
        return SQ_EINVAL;
    *index = (int)i;
    *count = (int)n;
    return 0;
}

int cli_run_take(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    cli_run_args_t *ra = ctx;
    int64_t ns;
    const char *why;
    switch (k) {
    case CLI_POSITIONAL:
        return cli_take_one(cmd, &ra->path, v, "plan", o);
    case OPT_OUT:
        ra->ro.results_dir = v;
        break;
    case OPT_SET:
        if (plan_override_split(v, &ra->sets[ra->n], &ra->copies[ra->n]))
            return cli_usage_error(cmd, o, "--set needs KEY=VALUE, got '%s'", v);
        ra->texts[ra->n] = v;
        ra->ro.n_overrides = ++ra->n;
        break;
    case OPT_CONFIRM:
        ra->ro.confirm_target = true;
        break;
    case OPT_INSECURE:
        ra->ro.insecure = true;
        break;
    case OPT_NO_BRAKES:
        ra->ro.no_brakes = true;
        break;
    case OPT_QUIET:
        ra->ro.quiet = true;
        break;
    case OPT_SEED: {
        int64_t s;
        if (value_parse_int(v, 0, INT64_MAX, &s))
            return cli_usage_error(cmd, o, "--seed needs a non-negative integer, got '%s'", v);
        ra->ro.has_seed = true;
        ra->ro.seed = (uint64_t)s;
        break;
    }
    case OPT_GRACE:
        if (value_parse_duration(v, &ns))
            return cli_usage_error(cmd, o, "--grace needs %s, got '%s'", VALUE_DURATION_EXPECTS, v);
        ra->ro.grace_ns = ns;
        break;
    case OPT_SHARD:
        if (cli_shard_parse(v, &ra->launch.flag_index, &ra->launch.flag_count, &why))
            return cli_usage_error(cmd, o, "--shard %s: %s", v, why);
        break;
    case OPT_SHARD_COUNT: {
        int64_t n;
        if (value_parse_int(v, 1, 100000, &n))
            return cli_usage_error(cmd, o, "--shard-count needs an integer 1..100000, got '%s'", v);
        ra->launch.count = (int)n;
        break;
    }
    case OPT_LAUNCHER:
        ra->launch.launcher = v;
        break;
    case OPT_START_AT:
        ra->start_at = v;
        break;
    case OPT_PROCS: {
        int64_t n;
        if (!strcmp(v, "auto"))
            ra->procs = -1;
        else if (value_parse_int(v, 1, 1024, &n))
            return cli_usage_error(cmd, o, "--procs needs N (1..1024) or auto, got '%s'", v);
        else
            ra->procs = (int)n;
        break;
    }
    case OPT_KEEP:
        ra->ro.keep = true;
        break;
    case OPT_FORCE:
        ra->ro.force = true;
        break;
    case OPT_ALLOW_EXEC:
        ra->ro.allow_exec = true;
        break;
    case OPT_METRICS:
        if (value_parse_listen(v, ra->metrics_host, sizeof ra->metrics_host, &ra->ro.metrics_port))
            return cli_usage_error(cmd, o,
                                   "--metrics needs ADDR:PORT like 127.0.0.1:9464, got '%s'", v);
        ra->ro.metrics_host = ra->metrics_host;
        break;
    case OPT_METRICS_PUBLIC:
        ra->metrics_public = true;
        break;
    case OPT_JSON:
        ra->json = true;
        ra->ro.no_summary = true;
        break;
    }
    return -1;
}

/* The shard: with --procs this process is the parent of every shard, so neither --shard nor a
 * launcher may also make it one of them. */
static int check_shard(const cli_cmd_t *cmd, cli_run_args_t *ra, out_t *o)
{
    char err[512];
    if (ra->procs && (ra->launch.flag_count || ra->launch.count))
        return cli_usage_error(cmd, o,
                               "--procs runs every shard of the plan here; it does not go with "
                               "--shard or --shard-count");
    if (launch_shard(&ra->launch, launch_getenv, NULL, &ra->shard, err, sizeof err))
        return cli_usage_error(cmd, o, "%s", err);
    if (ra->procs && ra->shard.from[0])
        return cli_usage_error(cmd, o,
                               "--procs runs every shard of the plan here, but this process is "
                               "already shard %d/%d of %s (%s); drop --procs, or --launcher none",
                               ra->shard.index, ra->shard.count, ra->shard.from, ra->shard.vars);
    ra->ro.shard_index = ra->shard.index;
    ra->ro.shard_count = ra->shard.count;
    ra->ro.shard_from = ra->shard.from[0] ? ra->shard.from : NULL;
    ra->ro.shard_vars = ra->shard.vars[0] ? ra->shard.vars : NULL;
    return -1;
}

int cli_run_args_check(const cli_cmd_t *cmd, cli_run_args_t *ra, out_t *o)
{
    int rc = check_shard(cmd, ra, o);
    if (rc >= 0)
        return rc;
    if (ra->start_at) {
        char err[512];
        if (launch_start_at(ra->start_at, clock_real_ns(), &ra->ro.start_at_ns, err, sizeof err))
            return cli_usage_error(cmd, o, "%s", err);
    }
    if (ra->ro.metrics_host && !value_is_loopback(ra->ro.metrics_host)) {
        if (!ra->metrics_public)
            return cli_usage_error(
                cmd, o,
                "--metrics: '%s' is not a loopback address; add --metrics-public to "
                "serve squall's metrics there",
                ra->ro.metrics_host);
        out_warn(o, "--metrics on %s: anyone who can reach it can read the run's figures",
                 ra->ro.metrics_host);
    }
    return -1;
}

int cli_run_args_init(cli_run_args_t *ra, const cli_cmd_t *cmd, int argc, char **argv)
{
    memset(ra, 0, sizeof(*ra));
    ra->sets = calloc((size_t)argc + 1, sizeof(*ra->sets));
    ra->copies = calloc((size_t)argc + 1, sizeof(*ra->copies));
    ra->texts = calloc((size_t)argc + 1, sizeof(*ra->texts));
    ra->line = cli_command_line(cmd->name, argc, argv);
    ra->argc = argc;
    ra->argv = argv;
    ra->ro.grace_ns = INT64_C(2000000000);
    ra->ro.overrides = ra->texts;
    ra->ro.command_line = ra->line;
    ra->ro.exit_code = cli_run_exit;
    return ra->sets && ra->copies && ra->texts && ra->line ? 0 : SQ_ENOMEM;
}

void cli_run_args_close(cli_run_args_t *ra)
{
    for (size_t i = 0; ra->copies && i < ra->n; i++)
        free(ra->copies[i]);
    free(ra->copies);
    free(ra->sets);
    free(ra->texts);
    free(ra->line);
}

int cli_run_exit(int rc, const run_result_t *res)
{
    if (rc)
        return rc == SQ_ENOMEM || rc == SQ_EIO || rc == SQ_ELIBUV ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    if (res->write_failed || res->end == RUN_END_FAILED)
        return SQ_EXIT_FAILURE;
    switch (res->end) {
    case RUN_END_SIGNAL:
        return SQ_EXIT_INTERRUPTED;
    case RUN_END_BRAKE:
        return SQ_EXIT_BRAKE;
    case RUN_END_UNREACHABLE:
        return SQ_EXIT_UNREACHABLE;
    default:
        return res->outcome == JUDGE_OUTCOME_FAIL           ? SQ_EXIT_OBJECTIVES
               : res->outcome == JUDGE_OUTCOME_INCONCLUSIVE ? SQ_EXIT_INCONCLUSIVE
                                                            : SQ_EXIT_OK;
    }
}

/* --json: what results.json says of the run's outcome, read back from the file written. */
static void print_json(const run_result_t *res, int code, out_t *o)
{
    results_t *r = NULL;
    if (!res->dir[0] || results_read(res->dir, &r, o))
        return;
    json_t *run = results_section(r, "run"), *checks = results_section(r, "objectives");
    json_t *doc =
        json_pack("{s:s, s:i, s:s, s:i, s:O?, s:O?}", "format", "squall-run", "version", 1,
                  "results", res->dir, "exit_code", code, "run", run, "objectives", checks);
    char *text = doc ? json_dumps(doc, JSON_INDENT(2)) : NULL;
    if (text)
        out_print(o, "%s\n", text);
    free(text);
    json_decref(doc);
    results_free(r);
}

int cli_run_plan(const plan_t *p, const run_opts_t *ro, bool json, out_t *o)
{
    run_result_t res = {0};
    if (ro->quiet)
        out_set_level(o, OUT_WARN);
    int rc = run_plan(p, ro, o, &res);
    int code = cli_run_exit(rc, &res);
    if (json && rc == 0)
        print_json(&res, code, o);
    return code;
}

static int run_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cli_run_args_t ra;
    if (cli_run_args_init(&ra, cmd, argc, argv)) {
        cli_run_args_close(&ra);
        return SQ_EXIT_FAILURE;
    }
    int rc = cli_parse(cmd, argc, argv, o, cli_run_take, &ra);
    if (rc < 0)
        rc = cli_run_args_check(cmd, &ra, o);
    if (rc < 0 && !ra.path)
        rc = cli_usage_error(cmd, o, "which plan? (expected PLAN.yaml)");
    if (rc < 0) {
        plan_t *p;
        int err = plan_load(ra.path, ra.sets, ra.n, &p, o);
        if (err) {
            rc = err == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
        } else {
            rc = ra.procs ? cli_procs_run(cmd, &ra, p, o) : cli_run_plan(p, &ra.ro, ra.json, o);
            plan_free(p);
        }
    }
    cli_run_args_close(&ra);
    return rc;
}

const cli_cmd_t cli_cmd_run = {
    .name = "run",
    .summary = "send a plan's traffic and write its results",
    .usage = "PLAN.yaml [-o DIR] [--set KEY=VALUE]... [--confirm-target] [options]",
    .description =
        "Runs the plan's phases in order against its target. Every request is timed from its\n"
        "intended start, so a target that stalls shows its stall in response time instead of\n"
        "hiding it behind a stalled generator. Writes DIR/results.json (every histogram) and\n"
        "DIR/series.csv (one row per class per second) and prints a summary. A phase with\n"
        "replay: sends a recorded access log again at its recorded instants (speed, copies,\n"
        "rewrite and classify rules; see the README).\n"
        "\n"
        "A live line on stderr shows, once a second: phase, elapsed/total time, achieved and\n"
        "planned rate, the second's peaks of requests in flight and queued, errors, and\n"
        "p50/p99 of the last second. series.csv has one row per phase, class and second, with\n"
        "the starts the plan meant for that second (planned), then the whole run's figures of\n"
        "the second on each of its rows (run_watch_*: streams open, dropped, reconnects, events,\n"
        "propagation p99; run_queue_wait_max_ms, run_in_flight_peak, run_queued_peak).\n"
        "GENERATOR-BOUND on the live line (generator_bound in results.json) means squall\n"
        "itself could not keep the schedule: the target was not offered the planned load, and\n"
        "the run is INCONCLUSIVE (exit 7). CONNECTION-BOUND means every connection was busy\n"
        "with slow answers: a fair verdict on the target; raise target.connections to offer more.\n"
        "\n"
        "SIGINT or SIGTERM stops new requests and lets in-flight ones finish within --grace;\n"
        "a second signal stops at once. Results are written either way.\n"
        "\n"
        "--shard I/N sends only shard I's share (every N-th even start from the (I-1)-th, a\n"
        "Poisson process of rate/N, clients, agents and watchers k with k mod N = I-1,\n"
        "{{seq}} values I-1, I-1+N, ..., replayed clients by a hash of their identity): N\n"
        "shards with the same plan and seed send what one process would; `squall merge`\n"
        "pools their results. `squall check --shard I/N` shows the share.\n"
        "\n"
        "Objects answered 201 by a class with creates: true are recorded in DIR/journal.ndjson\n"
        "and deleted after the last phase (also after a signal, a brake or an unreachable\n"
        "target, within 30 s) unless --keep; `squall cleanup DIR` deletes what is left.\n"
        "\n"
        "Shards: --shard I/N, or the shard the launcher's environment gives (mpirun, srun,\n"
        "an indexed job with --shard-count); --start-at TIME begins the first phase at one\n"
        "wall-clock instant on every shard (synchronise the machines' clocks); --procs N runs\n"
        "N shards here as children and merges them into DIR (see the README).\n"
        "\n"
        "Objectives in the plan are judged per phase and for the run; a failure exits 1.\n"
        "DIR/report.html is written at the end (`squall report DIR` rewrites it).\n"
        "\n"
        "Safety: targets other than loopback are refused without --confirm-target. Default\n"
        "brakes (exit 3): on loopback, more than 10% errors over 10 s or no answer for 10 s;\n"
        "on other targets, more than 5% errors over 10 s, no answer for 5 s, or p99 above 5 s\n"
        "for 10 s. A plan brake replaces the default of its kind; --no-brakes drops them.",
    .opts = cli_run_opts,
    .main = run_main,
};
