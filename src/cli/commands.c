/* The subcommand table. Each command is defined in its own file under src/cli/. */
#include "squall/cli.h"

extern const cli_cmd_t cli_cmd_help;
extern const cli_cmd_t cli_cmd_check;
extern const cli_cmd_t cli_cmd_run;
extern const cli_cmd_t cli_cmd_demo;
extern const cli_cmd_t cli_cmd_serve;
extern const cli_cmd_t cli_cmd_merge;
extern const cli_cmd_t cli_cmd_cleanup;
extern const cli_cmd_t cli_cmd_report;
extern const cli_cmd_t cli_cmd_compare;
extern const cli_cmd_t cli_cmd_profile;
extern const cli_cmd_t cli_cmd_completion;
extern const cli_cmd_t cli_cmd_version;

const cli_cmd_t *const cli_commands[] = {
    &cli_cmd_help,
    &cli_cmd_check,
    &cli_cmd_run,
    &cli_cmd_demo,
    &cli_cmd_serve,
    &cli_cmd_merge,
    &cli_cmd_cleanup,
    &cli_cmd_report,
    &cli_cmd_compare,
    &cli_cmd_profile,
    &cli_cmd_completion,
    &cli_cmd_version,
    NULL,
};
