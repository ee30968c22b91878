/* A run: a loaded plan turned into timed traffic, measured, judged and written.
 *
 * The conductor holds only the phase sequence, signals and the shutdown order. Each phase's
 * traffic comes from its sources (source.h), built when the phase starts and asked, on one
 * libuv loop, for every start that is due; every completion goes through the observers
 * (observe.h) into the results. After the plan's last phase the run drains what is in flight,
 * tears down what it created (a teardown phase, the plan's or its own), writes results.json,
 * series.csv and report.html, judges the objectives and prints a summary.
 * Glossary: "draining" = no new starts, waiting for in-flight requests to finish. The library
 * returns error codes only; the command line turns a run's outcome into an exit code. */
#ifndef SQUALL_RUN_H
#define SQUALL_RUN_H

#include <stdbool.h>
#include <stdint.h>

#include "squall/verdict.h"
#include "squall/out.h"
#include "squall/plan.h"
#include "squall/sched.h"

struct run_result;

typedef struct {
    const char *results_dir; /* NULL: results/<UTC time>-<plan name> */
    bool confirm_target;     /* required for targets other than loopback */
    bool insecure;           /* skip TLS verification (also target.tls.insecure); warns */
    bool no_brakes;          /* turn the default brakes off (plan brakes still apply) */
    bool quiet;              /* no live line, no summary table */
    bool no_summary;         /* no summary table (the command line prints its own: --json) */
    bool has_seed;
    uint64_t seed;    /* overrides the plan's seed */
    int64_t grace_ns; /* after a signal or a brake: how long in-flight requests may take */
    /* This process's share: shard_index of shard_count (1-based; 0/0 or 1/1 is the whole run).
     * The one place the share is set (`--shard I/N`, or whatever a launcher read); every
     * source sends only its share of the plan (run_shard). */
    int shard_index, shard_count;
    const char *shard_from; /* who said which shard this is: "flag" (--shard), a launcher's name
                               (squall/launch.h); NULL: nobody */
    const char *shard_vars; /* the launcher variables read, "NAME=VALUE ..."; NULL when none */
    int64_t start_at_ns;    /* the wall-clock instant (ns since the epoch) the first phase begins
                               at; 0: at once. The run sleeps until it, then starts its phase
                               clock at that instant, also when it wakes late (recorded, and the
                               late seconds count as generator-bound). */
    bool keep;                    /* no teardown; the journal lists what was left */
    bool force;                   /* write into a results directory that already holds results */
    bool allow_exec;              /* let the plan's exec actions run programs (refused otherwise) */
    const char *metrics_host; /* serve squall's own metrics there while the run goes (NULL:
                                 no); the command line checks that it is loopback */
    int metrics_port;
    /* For the record (results.json's "run" section and the report): the --set overrides as
     * given, and the command line. */
    const char *const *overrides;
    size_t n_overrides;
    const char *command_line;
    /* The exit code the command line will give this outcome (exit codes are chosen there; the
     * results record it); NULL records none. */
    int (*exit_code)(int rc, const struct run_result *res);
} run_opts_t;

/* Why a run ended. */
enum run_end {
    RUN_END_DONE,        /* every phase ran to its end */
    RUN_END_SIGNAL,      /* SIGINT or SIGTERM */
    RUN_END_BRAKE,       /* a brake's condition held */
    RUN_END_UNREACHABLE, /* the target refused connections or did not resolve */
    RUN_END_FAILED,      /* an internal failure (out of memory, a phase that could not start) */
};

typedef struct run_result {
    enum run_end end;
    enum judge_outcome outcome; /* pass; fail (an objective failed or had no data); inconclusive
                                   (the evidence cannot support a pass) */
    bool write_failed;          /* results.json, series.csv or report.html could not be written */
    char dir[4096];             /* the results directory written ("" when none was made) */
} run_result_t;

/* Everything a run checks before it sends anything, and nothing more: the target's safety
 * (non-loopback targets need confirm_target: refused otherwise), engine settings (token, TLS),
 * every template compiled against the plan's vars and pools, every phase's sources built and
 * validated (open files, teardown position, shapes). Problems are reported on o.
 * `check` calls it too, so a plan `check` accepts is one `run` accepts. Returns 0, or SQ_EINVAL /
 * SQ_EPARSE / SQ_ELIMIT / SQ_EIO for a plan or environment problem, SQ_ENOMEM. */
int run_check(const plan_t *plan, const run_opts_t *opts, out_t *o);

/* Runs `plan` to the end (or until a signal, a brake, an unreachable target or a failure stops
 * it), writes the results, and fills *result. Returns 0 when it ran (whatever its outcome), or
 * run_check's codes when nothing was sent, SQ_EIO when the results directory cannot be made. */
int run_plan(const plan_t *plan, const run_opts_t *opts, out_t *o, run_result_t *result);

/* The results directory a run writes without results_dir: results/<UTC time>-<plan name>. */
void run_default_dir(const plan_t *plan, char *dir, size_t cap);

/* The run's seed: the option's, else the plan's, else the clock's. */
uint64_t run_seed(const plan_t *plan, const run_opts_t *opts);
/* The share opts set, as the schedulers take it ({0, 0}: the whole run). */
sched_shard_t run_shard(const run_opts_t *opts);

#endif
