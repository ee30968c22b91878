/* `squall run --procs N`: N shards of the plan as child processes of this same binary on this
 * machine (`run --shard i/N` with one common --start-at, each into DIR/shard-i), waited for,
 * then merged into DIR by `squall merge`'s code and judged as one run. Signals reach every child;
 * the live line sums what the children write to their series.csv each second. */
#include <errno.h>
#include <inttypes.h>
#include <signal.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/prctl.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include "cli_merge.h"
#include "cli_run.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/file.h"
#include "squall/results.h"
#include "squall/source.h"

/* Without --start-at the shards start this long after the parent decided, plus a little per
 * shard: a child loads and checks the plan in tens of milliseconds here; one that is not ready
 * starts late, says so, and counts the late seconds as generator-bound. */
#define LEAD_NS      (2 * INT64_C(1000000000))
#define LEAD_EACH_NS (20 * INT64_C(1000000))
#define PARENT_FILES 64 /* the parent's own files besides each child's series.csv */
#define FIXED_ARGS   24 /* the child's words besides the --set pairs, with room to spare */

typedef struct {
    pid_t pid;  /* 0 once reaped */
    int status; /* waitpid's */
    char dir[4200];
    FILE *series; /* its series.csv, read as it grows (NULL until it exists) */
    int64_t sec;  /* the wall-clock second (unix s) of the rows being summed */
    int64_t done, errors;
    double planned;
    int64_t last_sec; /* the last complete second, and its figures */
    int64_t last_done, last_errors;
    double last_planned;
} child_t;

/* For the signal handler: the children to forward a signal to. */
static child_t *kids;
static int n_kids;
static volatile sig_atomic_t signalled;

static void forward(int sig)
{
    signalled = sig;
    for (int i = 0; i < n_kids; i++)
        if (kids[i].pid > 0)
            kill(kids[i].pid, sig);
}

static int count_procs(int procs)
{
    if (procs > 0)
        return procs;
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n > 0 ? (int)(n > 1024 ? 1024 : n) : 1;
}

/* Open files: each shard needs the plan's connections and its share of the watches
 * (src_files_needed, checked against its own RLIMIT_NOFILE, which it inherits from here); this
 * process reads one series.csv per shard; and all of them together must fit what the whole
 * system can still allocate (fs.file-max). */
static int budget(const cli_cmd_t *cmd, const plan_t *p, int n, out_t *o)
{
    uint64_t limit = file_raise_limit();
    int64_t child = src_files_needed(p, n), parent = n + PARENT_FILES;
    if (limit && (uint64_t)child > limit)
        return cli_usage_error(cmd, o,
                               "--procs %d: each shard needs about %" PRId64 " open files (%d "
                               "connections, its share of the watches, a reserve), but a process "
                               "may open at most %" PRIu64 " (RLIMIT_NOFILE)",
                               n, child, p->target.connections, limit);
    if (limit && (uint64_t)parent > limit)
        return cli_usage_error(cmd, o,
                               "--procs %d: the parent reads one file per shard and needs about "
                               "%" PRId64 " open files, but may open at most %" PRIu64
                               " (RLIMIT_NOFILE); use fewer processes",
                               n, parent, limit);
    uint64_t left = file_system_free();
    uint64_t all = (uint64_t)n * (uint64_t)child + (uint64_t)parent;
    if (left != UINT64_MAX && all > left)
        return cli_usage_error(cmd, o,
                               "--procs %d: the shards and the parent need about %" PRIu64
                               " open files, but the system can allocate only %" PRIu64
                               " more (fs.file-max, /proc/sys/fs/file-nr); use fewer processes or "
                               "fewer connections",
                               n, all, left);
    return -1;
}

/* The child's words: the plan and the options that shape its traffic, then its shard, the
 * common start, its directory; no live line or summary of its own. */
typedef struct {
    char **argv; /* FIXED_ARGS + 2 per --set */
    char buf[5][4200];
} args_t;

static int child_args(const cli_run_args_t *ra, int i, int n, const char *start, const char *dir,
                      uint64_t seed, args_t *a)
{
    int k = 0;
    if (!(a->argv = calloc(FIXED_ARGS + 2 * ra->n, sizeof(*a->argv))))
        return SQ_ENOMEM;
    a->argv[k++] = "squall";
    a->argv[k++] = "run";
    a->argv[k++] = (char *)ra->path;
    for (size_t s = 0; s < ra->n; s++) {
        a->argv[k++] = "--set";
        a->argv[k++] = (char *)ra->texts[s];
    }
    static const struct {
        size_t at;
        const char *flag;
    } flags[] = {
        {offsetof(run_opts_t, confirm_target), "--confirm-target"},
        {offsetof(run_opts_t, insecure), "--insecure"},
        {offsetof(run_opts_t, no_brakes), "--no-brakes"},
        {offsetof(run_opts_t, keep), "--keep"},
        {offsetof(run_opts_t, force), "--force"},
        {offsetof(run_opts_t, allow_exec), "--allow-exec"},
    };
    for (size_t f = 0; f < sizeof flags / sizeof flags[0]; f++)
        if (*(const bool *)((const char *)&ra->ro + flags[f].at))
            a->argv[k++] = (char *)flags[f].flag;
    snprintf(a->buf[0], sizeof a->buf[0], "%" PRIu64, seed);
    snprintf(a->buf[1], sizeof a->buf[1], "%" PRId64 "ns", ra->ro.grace_ns);
    snprintf(a->buf[2], sizeof a->buf[2], "%d/%d", i, n);
    snprintf(a->buf[3], sizeof a->buf[3], "%s", start);
    snprintf(a->buf[4], sizeof a->buf[4], "%s", dir);
    const char *rest[] = {"--seed",  a->buf[0],    "--grace", a->buf[1],    "--shard",
                          a->buf[2], "--launcher", "none",    "--start-at", a->buf[3],
                          "-o",      a->buf[4],    "--quiet"};
    for (size_t r = 0; r < sizeof rest / sizeof rest[0]; r++)
        a->argv[k++] = (char *)rest[r];
    a->argv[k] = NULL;
    return 0;
}

static pid_t spawn(char **argv, pid_t parent)
{
    pid_t pid = fork();
    if (pid != 0)
        return pid;
    /* Its own process group: a terminal's ^C reaches the parent, which forwards it once (a
     * second copy would stop the child at once). It is told to stop if the parent dies. */
    setpgid(0, 0);
    prctl(PR_SET_PDEATHSIG, SIGTERM);
    if (getppid() != parent)
        _exit(SQ_EXIT_FAILURE);
    sigset_t none;
    sigemptyset(&none);
    sigprocmask(SIG_SETMASK, &none, NULL);
    execv("/proc/self/exe", argv);
    fprintf(stderr, "squall run --procs: cannot run /proc/self/exe: %s\n", strerror(errno));
    _exit(SQ_EXIT_FAILURE);
}

/* ---- the live line ------------------------------------------------------------------------ */

/* One series.csv row (RESULTS_SERIES_HEADER): second, phase, class, started, completed, rate,
 * errors, p50, p90, p99, max, planned, unix_ms, ...: into the child's current second. */
static void row(child_t *c, char *line)
{
    char *f[14];
    int n = 0;
    for (char *s = strtok(line, ","); s && n < 14; s = strtok(NULL, ","))
        f[n++] = s;
    if (n < 13 || !strcmp(f[0], "second"))
        return;
    int64_t sec = strtoll(f[12], NULL, 10) / 1000;
    if (sec != c->sec) {
        if (c->sec) {
            c->last_sec = c->sec;
            c->last_done = c->done;
            c->last_errors = c->errors;
            c->last_planned = c->planned;
        }
        c->sec = sec;
        c->done = c->errors = 0;
        c->planned = 0;
    }
    c->done += strtoll(f[4], NULL, 10);
    c->errors += strtoll(f[6], NULL, 10);
    c->planned += strtod(f[11], NULL);
}

/* Reads what the child wrote since the last look (whole lines only). */
static void read_series(child_t *c)
{
    if (!c->series) {
        char path[4400];
        snprintf(path, sizeof path, "%s/%s", c->dir, RESULTS_SERIES_FILE);
        if (!(c->series = fopen(path, "r")))
            return;
    }
    char line[1024];
    for (;;) {
        long at = ftell(c->series);
        if (!fgets(line, sizeof line, c->series))
            break;
        if (!strchr(line, '\n')) { /* half written: read it again next time */
            fseek(c->series, at, SEEK_SET);
            break;
        }
        row(c, line);
    }
    clearerr(c->series);
}

/* The sum over the shards of the latest second every running shard has finished. */
static void live(child_t *c, int n, int running, out_t *o)
{
    int64_t sec = INT64_MAX, done = 0, errors = 0;
    double planned = 0;
    for (int i = 0; i < n; i++) {
        read_series(&c[i]);
        if (c[i].pid > 0)
            sec = c[i].last_sec < sec ? c[i].last_sec : sec;
    }
    if (sec == INT64_MAX || sec == 0) {
        out_live(o, "--procs %d: %d shards running, waiting for their first second", n, running);
        return;
    }
    int reported = 0;
    for (int i = 0; i < n; i++)
        if (c[i].last_sec == sec) {
            reported++;
            done += c[i].last_done;
            errors += c[i].last_errors;
            planned += c[i].last_planned;
        }
    out_live(o,
             "--procs %d: %d running | %d shards' second: %" PRId64 " done (planned %.0f), %" PRId64
             " errors",
             n, running, reported, done, planned, errors);
}

/* ---- waiting ------------------------------------------------------------------------------ */

static void reap(child_t *c, int n, int *running)
{
    sigset_t set, old;
    sigemptyset(&set);
    sigaddset(&set, SIGINT);
    sigaddset(&set, SIGTERM);
    /* With the signals held, a reaped pid is cleared before the handler could signal it again
     * (a reused pid must never be signalled). */
    sigprocmask(SIG_BLOCK, &set, &old);
    for (int i = 0; i < n; i++) {
        if (c[i].pid <= 0)
            continue;
        pid_t w = waitpid(c[i].pid, &c[i].status, WNOHANG);
        if (w == c[i].pid || (w < 0 && errno == ECHILD)) {
            c[i].pid = 0;
            (*running)--;
        }
    }
    sigprocmask(SIG_SETMASK, &old, NULL);
}

static void wait_all(child_t *c, int n, out_t *o)
{
    int running = n;
    int64_t next_live = clock_mono_ns() + 1000000000;
    while (running > 0) {
        struct timespec ts = {0, 100000000};
        nanosleep(&ts, NULL);
        reap(c, n, &running);
        if (running > 0 && clock_mono_ns() >= next_live) {
            live(c, n, running, o);
            next_live += 1000000000;
        }
    }
    out_live_end(o);
}

/* A child's exit as an exit code; one line for a child that failed. */
static int child_exit(const child_t *c, int i, int n, out_t *o)
{
    if (WIFSIGNALED(c->status)) {
        out_error(o, "shard %d/%d was killed by signal %d (%s)", i + 1, n, WTERMSIG(c->status),
                  strsignal(WTERMSIG(c->status)));
        return SQ_EXIT_FAILURE;
    }
    int code = WIFEXITED(c->status) ? WEXITSTATUS(c->status) : SQ_EXIT_FAILURE;
    if (code == SQ_EXIT_FAILURE || code == SQ_EXIT_USAGE)
        out_error(o,
                  "shard %d/%d failed (exit %d): its lines above say why; its results, if any, "
                  "are in %s",
                  i + 1, n, code, c->dir);
    return code;
}

/* The exit code as the shards' codes say: a failed shard (6, or 2: it sent nothing while others
 * did) first; then how the run ended early (a brake 3, an unreachable target 4, a signal 5);
 * else -1: the merged verdict's. (A signal to the parent makes it 5 unless a shard failed.) */
static int outcome(const int *codes, int n, bool *merge)
{
    static const int order[] = {SQ_EXIT_FAILURE, SQ_EXIT_USAGE, SQ_EXIT_BRAKE, SQ_EXIT_UNREACHABLE,
                                SQ_EXIT_INTERRUPTED};
    *merge = true;
    for (size_t k = 0; k < sizeof order / sizeof order[0]; k++)
        for (int i = 0; i < n; i++)
            if (codes[i] == order[k]) {
                *merge = k >= 2; /* a failed shard's results are missing or partial: no merge */
                return order[k];
            }
    return -1;
}

static int run_children(const cli_cmd_t *cmd, cli_run_args_t *ra, int n, const char *dir,
                        const char *start, uint64_t seed, out_t *o)
{
    child_t *c = calloc((size_t)n, sizeof(*c));
    int *codes = calloc((size_t)n, sizeof(*codes));
    char **inputs = calloc((size_t)n, sizeof(*inputs));
    if (!c || !codes || !inputs) {
        free(c), free(codes), free(inputs);
        return SQ_EXIT_FAILURE;
    }
    kids = c;
    struct sigaction sa = {.sa_handler = forward}, old_int, old_term;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, &old_int);
    sigaction(SIGTERM, &sa, &old_term);
    pid_t self = getpid();
    int started = 0;
    for (int i = 0; i < n && !signalled; i++) {
        args_t a;
        snprintf(c[i].dir, sizeof c[i].dir, "%s/shard-%d", dir, i + 1);
        if (child_args(ra, i + 1, n, start, c[i].dir, seed, &a)) {
            out_error(o, "--procs: out of memory");
            forward(SIGTERM);
            break;
        }
        sigset_t set, old;
        sigemptyset(&set);
        sigaddset(&set, SIGINT);
        sigaddset(&set, SIGTERM);
        sigprocmask(SIG_BLOCK, &set, &old); /* n_kids and the pid change together */
        c[i].pid = spawn(a.argv, self);
        free(a.argv);
        if (c[i].pid > 0)
            n_kids = ++started;
        sigprocmask(SIG_SETMASK, &old, NULL);
        if (c[i].pid < 0) {
            out_error(o, "--procs: cannot start shard %d/%d: %s", i + 1, n, strerror(errno));
            forward(SIGTERM);
            break;
        }
    }
    wait_all(c, started, o);
    n_kids = 0;
    sigaction(SIGINT, &old_int, NULL);
    sigaction(SIGTERM, &old_term, NULL);
    for (int i = 0; i < n; i++) {
        codes[i] = i < started ? child_exit(&c[i], i, n, o) : SQ_EXIT_FAILURE;
        inputs[i] = c[i].dir;
        if (c[i].series)
            fclose(c[i].series);
    }
    bool merge;
    int code = outcome(codes, n, &merge);
    if (merge) {
        int m = cli_merge_run(cmd, inputs, n, dir, true, ra->json, ra->ro.quiet, ra->line, o);
        code = code >= 0 ? code : m;
        if (m == SQ_EXIT_FAILURE || m == SQ_EXIT_USAGE)
            code = m;
    } else {
        out_error(o, "--procs: not merged (a shard failed); the shards' results are in %s/shard-*",
                  dir);
    }
    if (signalled && code != SQ_EXIT_FAILURE)
        code = SQ_EXIT_INTERRUPTED;
    free(c);
    free(codes);
    free(inputs);
    return code;
}

int cli_procs_run(const cli_cmd_t *cmd, cli_run_args_t *ra, const plan_t *p, out_t *o)
{
    int n = count_procs(ra->procs);
    if (ra->ro.quiet)
        out_set_level(o, OUT_WARN); /* as a run: no live line, no summary */
    if (ra->ro.metrics_host)
        return cli_usage_error(cmd, o,
                               "--metrics serves one process's figures: not with --procs (each "
                               "shard's series.csv and the merge have them)");
    int rc = budget(cmd, p, n, o);
    if (rc >= 0)
        return rc;
    /* One seed for every shard, drawn here when neither --seed nor the plan gives one (the
     * check below then does not warn of shards without a common seed). */
    uint64_t seed = run_seed(p, &ra->ro);
    ra->ro.has_seed = true;
    ra->ro.seed = seed;
    run_opts_t check = ra->ro;
    check.shard_index = 1;
    check.shard_count = n;
    if ((rc = run_check(p, &check, o)) != 0) /* a plan every shard would refuse: nothing starts */
        return rc == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    char dir[4096], old[4200];
    if (ra->ro.results_dir)
        snprintf(dir, sizeof dir, "%s", ra->ro.results_dir);
    else
        run_default_dir(p, dir, sizeof dir);
    snprintf(old, sizeof old, "%s/%s", dir, RESULTS_FILE);
    if (!ra->ro.force && access(old, F_OK) == 0)
        return cli_usage_error(cmd, o,
                               "%s already holds the results of a run: choose another -o, or "
                               "--force to replace them",
                               dir);
    int64_t at =
        ra->ro.start_at_ns ? ra->ro.start_at_ns : clock_real_ns() + LEAD_NS + n * LEAD_EACH_NS;
    char start[64];
    launch_format_instant(at, start, sizeof start);
    out_info(o, "--procs %d: shards start at %s; results in %s/shard-1..%d, merged into %s", n,
             start, dir, n, dir);
    return run_children(cmd, ra, n, dir, start, seed, o);
}
