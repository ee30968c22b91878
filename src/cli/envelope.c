/* `squall envelope PLAN --vary PATH=FROM..TO...`: where the plan's objectives still hold. Each
 * run is `squall run` of this same binary (/proc/self/exe) as a child process, with --set for
 * the point's values: a run keeps its own loop, signals, brakes, teardown and exit code exactly
 * as a user's `squall run` would, and a crash of one run cannot take the search down. */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <signal.h>
#include <spawn.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "squall/cli.h"
#include "squall/envelope.h"
#include "squall/err.h"
#include "squall/plan.h"
#include "squall/results.h"
#include "squall/scrape.h"
#include "squall/source.h"
#include "squall/value.h"

extern char **environ;

enum {
    OPT_VARY,
    OPT_MAX_RUNS,
    OPT_RESOLUTION,
    OPT_REPEATS,
    OPT_STEPS,
    OPT_COOL,
    OPT_OUT,
    OPT_SET,
    OPT_CONFIRM,
};

static const cli_opt_t envelope_opts[] = {
    [OPT_VARY] = {"vary", 0, "PATH=FROM..TO",
                  "a plan value to grow, e.g. phases.steady.rate=50/s..800/s (once or twice)"},
    [OPT_MAX_RUNS] = {"max-runs", 0, "N", "runs in the whole search at most (required)"},
    [OPT_RESOLUTION] = {"resolution", 0, "R",
                        "stop bisecting when holding and failing values are R apart (default "
                        "(TO - FROM) / 32)"},
    [OPT_REPEATS] = {"repeats", 0, "N", "runs per point; it holds only if all pass (default 3)"},
    [OPT_STEPS] = {"steps", 0, "N", "values of the first of two dimensions (default 4)"},
    [OPT_COOL] = {"cool-down", 0, "DURATION|idle[:MAX]",
                  "pause between runs (default 5s), or until the plan's observe.metrics gauges "
                  "are back to idle, for MAX at most (default 60s)"},
    [OPT_OUT] = {"out", 'o', "DIR",
                 "where the search and its runs go (default results/envelope-<UTC time>)"},
    [OPT_SET] = {"set", 0, "KEY=VALUE", "override a plan value in every run"},
    [OPT_CONFIRM] = {"confirm-target", 0, NULL, "allow a target that is not loopback"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    const char *plan, *out, *resolution;
    const char **sets;
    size_t n_sets;
    bool confirm;
    int64_t cool_ns;
    bool idle;              /* --cool-down idle[:MAX]: cool_ns is MAX */
    plan_t *loaded;         /* the plan at FROM, for its observe.metrics (idle only) */
    src_target_t target;    /* its target's engine settings (idle only) */
    scrape_gauges_t before; /* the idle baseline, scraped before the first run */
    envelope_cfg_t cfg;
    char dir[960];
    out_t *o;
} env_args_t;

static volatile sig_atomic_t stop_signal;
static volatile pid_t child_pid;

/* A signal stops the search after the current run. A terminal's SIGINT reaches the run too (one
 * process group), so it is not passed on: a second SIGINT would stop the run at once, without
 * its grace. SIGTERM is passed on. */
static void on_signal(int sig)
{
    stop_signal = sig;
    if (child_pid > 0 && sig == SIGTERM)
        kill(child_pid, sig);
}

static int take_int(const cli_cmd_t *cmd, const char *v, const char *name, int64_t lo, int64_t hi,
                    int *dst, out_t *o)
{
    int64_t n;
    if (value_parse_int(v, lo, hi, &n))
        return cli_usage_error(cmd, o, "--%s needs a whole number from %lld to %lld, got '%s'",
                               name, (long long)lo, (long long)hi, v);
    *dst = (int)n;
    return -1;
}

static int take_word(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    env_args_t *ea = ctx;
    char err[256];
    switch (k) {
    case CLI_POSITIONAL:
        return cli_take_one(cmd, &ea->plan, v, "plan", o);
    case OPT_VARY:
        if (ea->cfg.n_dims == ENVELOPE_MAX_DIMS)
            return cli_usage_error(cmd, o, "--vary: at most %d dimensions", ENVELOPE_MAX_DIMS);
        if (envelope_dim_parse(v, &ea->cfg.dims[ea->cfg.n_dims], err, sizeof err))
            return cli_usage_error(cmd, o, "--vary: %s", err);
        ea->cfg.n_dims++;
        return -1;
    case OPT_MAX_RUNS:
        return take_int(cmd, v, "max-runs", 1, 10000, &ea->cfg.max_runs, o);
    case OPT_REPEATS:
        return take_int(cmd, v, "repeats", 1, 100, &ea->cfg.repeats, o);
    case OPT_STEPS:
        return take_int(cmd, v, "steps", 2, ENVELOPE_MAX_COLUMNS, &ea->cfg.steps, o);
    case OPT_RESOLUTION:
        ea->resolution = v;
        return -1;
    case OPT_COOL:
        ea->idle = strncmp(v, "idle", 4) == 0 && (v[4] == '\0' || v[4] == ':');
        if (ea->idle && v[4] == '\0')
            ea->cool_ns = INT64_C(60000000000);
        else if (value_parse_duration(ea->idle ? v + 5 : v, &ea->cool_ns) ||
                 (ea->idle && ea->cool_ns < INT64_C(1000000000)))
            return cli_usage_error(cmd, o,
                                   "--cool-down needs %s, or idle[:MAX] with MAX at least 1s, got "
                                   "'%s'",
                                   VALUE_DURATION_EXPECTS, v);
        return -1;
    case OPT_OUT:
        ea->out = v;
        return -1;
    case OPT_SET:
        if (!strchr(v, '='))
            return cli_usage_error(cmd, o, "--set needs KEY=VALUE, got '%s'", v);
        ea->sets[ea->n_sets++] = v;
        return -1;
    case OPT_CONFIRM:
        ea->confirm = true;
        return -1;
    }
    return -1;
}

/* The resolution of the searched (last) dimension: a number, with or without its unit. */
static int check_args(const cli_cmd_t *cmd, env_args_t *ea, out_t *o)
{
    if (!ea->plan)
        return cli_usage_error(cmd, o, "which plan? (expected PLAN.yaml)");
    if (!ea->cfg.n_dims)
        return cli_usage_error(cmd, o, "needs --vary PATH=FROM..TO");
    if (!ea->cfg.max_runs)
        return cli_usage_error(cmd, o, "needs --max-runs N (the search's budget)");
    envelope_dim_t *d = &ea->cfg.dims[ea->cfg.n_dims - 1];
    if (ea->resolution) {
        char *end;
        double r = strtod(ea->resolution, &end);
        if (end == ea->resolution || !(r > 0) || (*end && strcmp(end, d->suffix)))
            return cli_usage_error(cmd, o,
                                   "--resolution needs a number above 0 (unit '%s'), "
                                   "got '%s'",
                                   d->suffix, ea->resolution);
        d->resolution = r;
    }
    return -1;
}

static int make_dirs(env_args_t *ea, out_t *o)
{
    if (ea->out && strlen(ea->out) > 900) {
        out_error(o, "-o: a directory name of at most 900 bytes, please");
        return SQ_EINVAL;
    }
    if (ea->out) {
        snprintf(ea->dir, sizeof ea->dir, "%s", ea->out);
    } else {
        char stamp[32];
        time_t now = time(NULL);
        strftime(stamp, sizeof stamp, "%Y%m%dT%H%M%SZ", gmtime(&now));
        mkdir("results", 0755);
        snprintf(ea->dir, sizeof ea->dir, "results/envelope-%s", stamp);
    }
    char path[1100], probe[1100];
    snprintf(probe, sizeof probe, "%s/envelope.json", ea->dir);
    if (access(probe, F_OK) == 0) {
        out_error(o, "%s already holds an envelope search: choose another -o", ea->dir);
        return SQ_EEXISTS;
    }
    snprintf(path, sizeof path, "%s/points", ea->dir);
    if ((mkdir(ea->dir, 0755) && errno != EEXIST) || (mkdir(path, 0755) && errno != EEXIST)) {
        out_error(o, "cannot create %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    return 0;
}

/* The first failed check ("p99 of response <= 70 ms in steady: observed 812 ms") and the first
 * reason against a pass, from the run's results.json. */
static void read_point(envelope_run_t *r, out_t *o)
{
    results_t *res = NULL;
    out_t *quiet = out_new_capture();
    if (results_read(r->dir, &res, quiet ? quiet : o)) {
        out_free(quiet);
        return;
    }
    out_free(quiet);
    const json_t *c, *why;
    size_t i;
    json_array_foreach(json_object_get(results_section(res, "objectives"), "checks"), i, c)
    {
        const char *v = json_string_value(json_object_get(c, "verdict"));
        if (!v || strcmp(v, "fail") || r->broke[0])
            continue;
        snprintf(r->broke, sizeof r->broke, "%s %s in %s: observed %g %s",
                 json_string_value(json_object_get(c, "class")),
                 json_string_value(json_object_get(c, "text")),
                 json_string_value(json_object_get(c, "scope")),
                 json_number_value(json_object_get(c, "observed")),
                 json_string_value(json_object_get(c, "unit")));
    }
    const json_t *td = json_object_get(results_section(res, "lifecycle"), "teardown");
    if (json_is_object(td) && !json_is_true(json_object_get(td, "kept")))
        r->left = (long long)(json_integer_value(json_object_get(td, "left")) +
                              json_integer_value(json_object_get(td, "failed")) +
                              json_integer_value(json_object_get(td, "not_tried")));
    why = json_array_get(json_object_get(results_section(res, "run"), "reasons"), 0);
    if (r->verdict == ENVELOPE_INCONCLUSIVE && json_string_value(why))
        snprintf(r->limited, sizeof r->limited, "%s", json_string_value(why));
    results_free(res);
}

static void pause_ns(int64_t left)
{
    while (left > 0 && !stop_signal) {
        int64_t step = left < 100000000 ? left : 100000000;
        nanosleep(&(struct timespec){.tv_sec = step / 1000000000, .tv_nsec = step % 1000000000},
                  NULL);
        left -= step;
    }
}

static int64_t now_ns(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (int64_t)ts.tv_sec * 1000000000 + ts.tv_nsec;
}

/* Which baseline gauges are not back to idle in `now`, one a line into r->not_idle; true when
 * none. A series gone since the baseline counts as back; an endpoint that failed, as not. */
static bool idle_check(const env_args_t *ea, const scrape_gauges_t *now, envelope_run_t *r)
{
    size_t len = 0;
    bool back = true;
    r->not_idle[0] = '\0';
    for (size_t e = 0; e < now->n_ep; e++)
        if (now->failed[e]) {
            back = false;
            len += (size_t)snprintf(r->not_idle + len, sizeof r->not_idle - len, "%s\n",
                                    now->error);
            break;
        }
    for (size_t i = 0; i < ea->before.n && len < sizeof r->not_idle; i++) {
        const scrape_gauge_t *b = &ea->before.g[i];
        for (size_t k = 0; k < now->n; k++) {
            const scrape_gauge_t *g = &now->g[k];
            if (g->endpoint != b->endpoint || strcmp(g->series, b->series) ||
                envelope_back_to_idle(b->value, g->value))
                continue;
            back = false;
            len += (size_t)snprintf(r->not_idle + len, sizeof r->not_idle - len,
                                    "%s: now %g (idle %g)\n", b->series, g->value, b->value);
        }
    }
    return back;
}

/* The cool-down before run r: a fixed pause, or a scrape every second until every baseline
 * gauge is back to idle, for ea->cool_ns at most (then r says which were not). */
static int cool_down(env_args_t *ea, envelope_run_t *r)
{
    int64_t t0 = now_ns();
    r->cool_mode = ea->idle ? 2 : 1;
    if (!ea->idle) {
        pause_ns(ea->cool_ns);
        r->cool_s = (double)(now_ns() - t0) / 1e9;
        return 0;
    }
    for (int64_t tick = t0;; tick += 1000000000) {
        scrape_gauges_t now;
        int rc = scrape_once(ea->loaded, &ea->target.eng, ea->o, &now);
        if (rc)
            return rc;
        r->cool_idle = idle_check(ea, &now, r);
        scrape_gauges_free(&now);
        if (r->cool_idle || stop_signal || tick + 1000000000 - t0 > ea->cool_ns)
            break;
        pause_ns(tick + 1000000000 - now_ns());
    }
    r->cool_s = (double)(now_ns() - t0) / 1e9;
    if (!r->cool_idle)
        out_info(ea->o, "envelope: not back to idle after %.1f s, running on: %s", r->cool_s,
                 r->not_idle);
    return 0;
}

/* envelope_run_fn: `squall run PLAN -o DIR/points/NNN -q --set PATH=V... [user --set]`. */
static int run_point(void *ctx, envelope_run_t *r)
{
    env_args_t *ea = ctx;
    static int made;
    if (made++ && cool_down(ea, r))
        return SQ_EIO;
    if (stop_signal)
        return SQ_ESTOPPED;
    char sets[ENVELOPE_MAX_DIMS][512], log[1200];
    snprintf(r->dir, sizeof r->dir, "%s/points/%03d", ea->dir, made);
    snprintf(log, sizeof log, "%s.log", r->dir);
    size_t n = 0;
    char **argv = calloc(16 + 2 * ea->n_sets, sizeof(char *));
    if (!argv)
        return SQ_ENOMEM;
    argv[n++] = "squall";
    argv[n++] = "run";
    argv[n++] = (char *)ea->plan;
    argv[n++] = "-o";
    argv[n++] = r->dir;
    argv[n++] = "-q";
    for (int d = 0; d < ea->cfg.n_dims; d++) {
        char v[64];
        envelope_value_text(&ea->cfg.dims[d], r->v[d], v, sizeof v);
        snprintf(sets[d], sizeof sets[d], "%s=%s", ea->cfg.dims[d].path, v);
        argv[n++] = "--set";
        argv[n++] = sets[d];
    }
    for (size_t i = 0; i < ea->n_sets; i++) {
        argv[n++] = "--set";
        argv[n++] = (char *)ea->sets[i];
    }
    if (ea->confirm)
        argv[n++] = "--confirm-target";
    posix_spawn_file_actions_t fa;
    posix_spawn_file_actions_init(&fa);
    posix_spawn_file_actions_addopen(&fa, 1, log, O_WRONLY | O_CREAT | O_TRUNC, 0644);
    posix_spawn_file_actions_adddup2(&fa, 1, 2);
    pid_t pid;
    int rc = posix_spawn(&pid, "/proc/self/exe", &fa, NULL, argv, environ);
    posix_spawn_file_actions_destroy(&fa);
    free(argv);
    if (rc) {
        out_error(ea->o, "cannot start squall run: %s", strerror(rc));
        return SQ_EIO;
    }
    child_pid = pid;
    int status = 0;
    while (waitpid(pid, &status, 0) < 0 && errno == EINTR)
        ;
    child_pid = 0;
    r->exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : 128 + WTERMSIG(status);
    r->verdict = r->exit_code == SQ_EXIT_OK             ? ENVELOPE_PASS
                 : r->exit_code == SQ_EXIT_OBJECTIVES   ? ENVELOPE_FAIL
                 : r->exit_code == SQ_EXIT_INCONCLUSIVE ? ENVELOPE_INCONCLUSIVE
                 : r->exit_code == SQ_EXIT_BRAKE        ? ENVELOPE_BRAKE
                                                        : ENVELOPE_ERROR;
    if (r->verdict == ENVELOPE_ERROR)
        snprintf(r->limited, sizeof r->limited, "squall run exited %d (see %.400s)", r->exit_code,
                 log);
    read_point(r, ea->o);
    out_info(ea->o, "envelope: run %d: %s %s%s%s -> %s", made, sets[0],
             ea->cfg.n_dims == 2 ? sets[1] : "", r->broke[0] ? ": " : "", r->broke,
             r->verdict == ENVELOPE_PASS           ? "pass"
             : r->verdict == ENVELOPE_FAIL         ? "fail"
             : r->verdict == ENVELOPE_INCONCLUSIVE ? "inconclusive"
             : r->verdict == ENVELOPE_BRAKE        ? "brake"
                                                   : "error");
    return 0;
}

/* Loads the plan with every --set and each dimension at `at` (FROM, then TO), exactly as each
 * run will: a plan error stops the search before anything is sent. */
static int check_plan(env_args_t *ea, out_t *o)
{
    size_t n = ea->n_sets + (size_t)ea->cfg.n_dims;
    plan_override_t *ov = calloc(n, sizeof(*ov));
    char **copies = calloc(n, sizeof(*copies)), text[ENVELOPE_MAX_DIMS][600];
    int rc = ov && copies ? 0 : SQ_ENOMEM;
    for (int at = 0; rc == 0 && at < 2; at++) {
        size_t k = 0;
        for (int d = 0; d < ea->cfg.n_dims; d++) {
            const envelope_dim_t *dim = &ea->cfg.dims[d];
            char v[64];
            envelope_value_text(dim, at ? dim->to : dim->from, v, sizeof v);
            snprintf(text[d], sizeof text[d], "%s=%s", dim->path, v);
            if (!rc)
                rc = plan_override_split(text[d], &ov[k], &copies[k]);
            k++;
        }
        for (size_t i = 0; i < ea->n_sets && !rc; i++, k++)
            rc = plan_override_split(ea->sets[i], &ov[k], &copies[k]);
        plan_t *p = NULL;
        if (!rc)
            rc = plan_load(ea->plan, ov, n, &p, o);
        if (at == 0 && ea->idle && !rc)
            ea->loaded = p;
        else
            plan_free(p);
        for (size_t i = 0; i < n; i++) {
            free(copies[i]);
            copies[i] = NULL;
        }
    }
    free(ov);
    free(copies);
    return rc;
}

/* --cool-down idle: the target's engine settings and the baseline of every kept gauge, every
 * endpoint answering (without one, "idle" means nothing). */
static int idle_baseline(env_args_t *ea, out_t *o)
{
    if (!ea->idle)
        return 0;
    int rc = src_target_init(&ea->target, ea->loaded, false, o);
    if (rc == 0)
        rc = scrape_once(ea->loaded, &ea->target.eng, o, &ea->before);
    for (size_t i = 0; rc == 0 && i < ea->before.n_ep; i++)
        if (ea->before.failed[i]) {
            out_error(o, "--cool-down idle: cannot read the idle values: %s", ea->before.error);
            rc = SQ_EIO;
        }
    if (rc == 0)
        out_info(o, "envelope: idle baseline of %zu gauge series", ea->before.n);
    return rc;
}

/* 0 when every column was resolved; 3 stopped by brakes; a failed run's own exit code (2, 4,
 * 5, 6); 7 when the budget or an INCONCLUSIVE point left the answer unresolved. */
static int exit_code(const envelope_t *e, int rc)
{
    if (stop_signal || rc == SQ_ESTOPPED)
        return SQ_EXIT_INTERRUPTED;
    if (rc)
        return SQ_EXIT_FAILURE;
    const char *why = envelope_stopped(e);
    if (why && strstr(why, "brakes"))
        return SQ_EXIT_BRAKE;
    size_t n = envelope_run_count(e);
    if (why && n && envelope_run_at(e, n - 1)->verdict == ENVELOPE_ERROR)
        return envelope_run_at(e, n - 1)->exit_code;
    return envelope_complete(e) ? SQ_EXIT_OK : SQ_EXIT_INCONCLUSIVE;
}

static int envelope_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    env_args_t ea = {.sets = calloc((size_t)argc + 1, sizeof(char *)),
                     .cool_ns = INT64_C(5000000000),
                     .cfg = {.repeats = 3, .steps = 4},
                     .o = o};
    envelope_t *e = NULL;
    int code = SQ_EXIT_FAILURE;
    if (!ea.sets)
        return code;
    code = cli_parse(cmd, argc, argv, o, take_word, &ea);
    if (code < 0)
        code = check_args(cmd, &ea, o);
    if (code >= 0)
        goto out;
    int err = check_plan(&ea, o);
    code = err == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    if (err)
        goto out;
    if (ea.idle && ea.loaded->n_scrapes == 0) {
        code = cli_usage_error(cmd, o, "--cool-down idle needs observe.metrics in the plan");
        goto out;
    }
    code = SQ_EXIT_FAILURE;
    if (make_dirs(&ea, o) || envelope_new(&ea.cfg, &e) || idle_baseline(&ea, o))
        goto out;
    struct sigaction sa = {.sa_handler = on_signal}, old_int, old_term;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, &old_int);
    sigaction(SIGTERM, &sa, &old_term);
    int rc = envelope_search(e, run_point, &ea);
    sigaction(SIGINT, &old_int, NULL);
    sigaction(SIGTERM, &old_term, NULL);
    envelope_print(e, o);
    if (envelope_write(e, ea.plan, ea.dir, o))
        goto out;
    out_print(o, "written: %s/envelope.json, envelope.csv, envelope.html\n", ea.dir);
    code = exit_code(e, rc);
out:
    envelope_free(e);
    scrape_gauges_free(&ea.before);
    if (ea.loaded)
        src_target_close(&ea.target);
    plan_free(ea.loaded);
    for (int d = 0; d < ea.cfg.n_dims; d++)
        free((char *)ea.cfg.dims[d].path);
    free(ea.sets);
    return code;
}

const cli_cmd_t cli_cmd_envelope = {
    .name = "envelope",
    .summary = "search one or two plan values for where the objectives still hold",
    .usage = "PLAN.yaml --vary PATH=FROM..TO [--vary PATH2=FROM..TO] --max-runs N [options]",
    .description =
        "Each point is a whole `squall run` of the plan (this binary, as a child process) with\n"
        "--set PATH=VALUE, brakes on, its teardown done before it ends, and --cool-down between\n"
        "runs: a fixed pause, or `idle[:MAX]` (the plan needs observe.metrics): every kept gauge\n"
        "series is scraped once before the first run (its idle value) and every second after\n"
        "each run until |now - idle| <= max(10% of |idle|, 0.5) for all, for MAX at most\n"
        "(default 60s); the next run then starts anyway (envelope.json: each run's cool_down).\n"
        "A point holds only if every one of its --repeats runs passes (a run that does not\n"
        "pass ends the point's repeats); an INCONCLUSIVE run is run again once, and a point that\n"
        "stays INCONCLUSIVE never holds: the answer says what limited it. One --vary: doubling "
        "from FROM until a point does not hold (never beyond\n"
        "TO), then bisection between the last holding and the first non-holding value until they\n"
        "are --resolution apart. Two --vary: the first takes --steps values from FROM to TO; for\n"
        "each, the second is searched as above, first up to the first non-holding value of the\n"
        "column before (more of the first is taken to leave no more room for the second; a\n"
        "column that holds there goes on towards TO): the safe zone is a staircase. The search "
        "stops after --max-runs runs, at the run whose\n"
        "brakes fired for the second time in the search, or at a run that left objects on the\n"
        "target (`squall cleanup` its directory).\n"
        "Writes DIR/envelope.json (format squall-envelope, version 1: every run with its verdict,\n"
        "the first objective that broke and its observed value, and its results directory),\n"
        "DIR/envelope.csv, DIR/envelope.html (the safe zone drawn, every run linked to its\n"
        "report.html) and each run's results in DIR/points/NNN.\n"
        "Exit 0: every column resolved; 3: stopped by brakes; 5: interrupted; 7: not resolved\n"
        "(--max-runs, or an INCONCLUSIVE point at the boundary); 2, 4, 6: a run's usage error,\n"
        "unreachable target or failure.",
    .opts = envelope_opts,
    .main = envelope_main,
};
