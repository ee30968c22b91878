/* A run: a loaded plan turned into timed traffic, measured, and written to a results directory.
 *
 * The runner is the one place where the modules meet: it reads the plan, builds the schedules
 * (sched) and templates (tmpl) of each phase, hands requests to the engine at their intended
 * start times, records every completion into the results (response time from the intended
 * start, service time from the actual send, schedule lag, libcurl's connect/TLS/first-byte
 * split), keeps the per-second series, watches its own health (generator_limited) and the
 * brakes, draws the live line, and at the end writes results.json and series.csv and prints a
 * summary. Glossary: "draining" = no new starts, waiting for in-flight requests to finish. */
#ifndef SQUALL_RUN_H
#define SQUALL_RUN_H

#include <stdbool.h>
#include <stdint.h>

#include "squall/out.h"
#include "squall/plan.h"

typedef struct {
    const char *results_dir; /* NULL: results/<UTC time>-<plan name> */
    bool confirm_target;     /* required for targets other than loopback */
    bool insecure;           /* skip TLS verification (also target.tls.insecure); warns */
    bool no_brakes;          /* turn the default brakes off (plan brakes still apply) */
    bool quiet;              /* no live line, no summary table */
    bool has_seed;
    uint64_t seed;    /* overrides the plan's seed */
    int64_t grace_ns; /* after a signal or a brake: how long in-flight requests may take */
    int shard_index, shard_count; /* 1/1 unless given */
    bool keep; /* life: no teardown; the journal lists what was left */
} run_opts_t;

/* Runs `plan` to the end (or until a signal, a brake or an unreachable target stops it),
 * writes the results and returns the process exit code (enum sq_exit). */
int run_plan(const plan_t *plan, const run_opts_t *opts, out_t *o);

#endif
