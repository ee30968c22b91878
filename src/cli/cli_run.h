/* What `squall run` and `squall demo` share: the run's options, their parsing, and the one
 * place where a run's outcome becomes an exit code. */
#ifndef SQUALL_CLI_RUN_H
#define SQUALL_CLI_RUN_H

#include "squall/cli.h"
#include "squall/launch.h"
#include "squall/plan.h"
#include "squall/run.h"

typedef struct {
    const char *path; /* the plan */
    plan_override_t *sets;
    char **copies; /* KEY=VALUE copies split at '=' */
    size_t n;
    const char **texts; /* the --set arguments as given, for the record */
    char *line;         /* the command line, for the record */
    run_opts_t ro;
    char metrics_host[64]; /* --metrics ADDR:PORT */
    bool metrics_public;
    bool json; /* --json: the summary as JSON on stdout instead of the table */
    launch_in_t launch;     /* --shard, --shard-count, --launcher */
    launch_shard_t shard;   /* what they and the environment decided (cli_run_args_check) */
    const char *start_at;   /* --start-at as given */
    int procs;              /* --procs N (-1: auto, one per online core; 0: not given) */
    int argc;               /* the words after the command name, for --procs' children */
    char **argv;
} cli_run_args_t;

/* Reads --shard's I/N (1 <= I <= N <= 100000): 0, or SQ_EINVAL with *why saying what is wrong
 * (malformed, N out of range, I outside 1..N) in one phrase. */
int cli_shard_parse(const char *v, int *index, int *count, const char **why);

/* The options of `run` (and `demo`), terminated by an entry with name == NULL. */
extern const cli_opt_t cli_run_opts[];

/* Sizes the argument holders for argc words and records the command line; SQ_ENOMEM. Close it
 * in any case. */
int cli_run_args_init(cli_run_args_t *ra, const cli_cmd_t *cmd, int argc, char **argv);
void cli_run_args_close(cli_run_args_t *ra);
/* A cli_take_fn over cli_run_opts into a cli_run_args_t (the positional word is the plan). */
int cli_run_take(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx);
/* After parsing: the checks across options (--metrics off loopback needs --metrics-public), the
 * shard from --shard and the launcher's environment (squall/launch.h), --start-at's instant.
 * Returns -1 when all is well, else the exit code of a usage error. */
int cli_run_args_check(const cli_cmd_t *cmd, cli_run_args_t *ra, out_t *o);
/* The exit code of run_plan's return code and result (enum sq_exit). */
int cli_run_exit(int rc, const run_result_t *res);
/* Runs the plan with the options and returns the exit code. With json, the summary on the
 * results stream is one JSON document (format "squall-run", version 1): the results directory,
 * the exit code, and results.json's "run" section (verdict, reasons, accepted) and "objectives"
 * (every check). */
int cli_run_plan(const plan_t *p, const run_opts_t *ro, bool json, out_t *o);
/* procs.c, `run --procs`: runs the plan's shards as children of this binary (each `run --shard
 * i/N` into DIR/shard-i from one --start-at), waits for them, merges their results into DIR and
 * returns the exit code (a failed shard's, else how the run ended early, else the merged
 * verdict's). Refuses, sending nothing, a plan `check` refuses and more processes than the open
 * files allow. */
int cli_procs_run(const cli_cmd_t *cmd, cli_run_args_t *ra, const plan_t *p, out_t *o);

#endif
