/* The command line: a table of subcommands and a small option parser that answers mistakes with
 * the closest valid word (squall/suggest.h).
 *
 * Each subcommand lives in its own src/cli/<name>.c and exports one cli_cmd_t; the table in
 * src/cli/commands.c lists them. A command's main receives argv after the command name and
 * returns a process exit code (enum sq_exit).
 * Glossary: "option" = --name or -x, with or without a value (--name=V or --name V);
 * "positional" = any other word; "--" ends options. */
#ifndef SQUALL_CLI_H
#define SQUALL_CLI_H

#include "squall/out.h"

typedef struct {
    const char *name;  /* long name without dashes, e.g. "set" */
    char short_name;   /* 0 if none */
    const char *value; /* NULL for a flag, else the metavariable shown in help, e.g. "KEY=VALUE" */
    const char *help;  /* one line */
} cli_opt_t;

typedef struct cli_cmd {
    const char *name;
    const char *summary;     /* one line for `squall --help` */
    const char *usage;       /* after "squall NAME ", e.g. "PLAN.yaml [--set KEY=VALUE]..." */
    const char *description; /* paragraphs for `squall help NAME`; may be NULL */
    const cli_opt_t *opts;   /* terminated by an entry with name == NULL; --help is implicit */
    int (*main)(const struct cli_cmd *cmd, int argc, char **argv, out_t *o);
} cli_cmd_t;

/* The table, terminated by an entry with name == NULL (src/cli/commands.c). main hands it to
 * cli_use_table before anything else, so that the lookups below (and `help`) read it without
 * calling up into the file that lists every command. */
extern const cli_cmd_t *const cli_commands[];
void cli_use_table(const cli_cmd_t *const *table);
const cli_cmd_t *const *cli_table(void);

const cli_cmd_t *cli_find(const char *name);
/* Writes `squall help NAME` text to the results stream. */
void cli_print_help(const cli_cmd_t *cmd, out_t *o);
void cli_print_overview(out_t *o);

/* Option iteration over argv (argv[0] is the first word after the command name). */
typedef struct {
    const cli_cmd_t *cmd;
    int argc;
    char **argv;
    int i;
    int only_positional; /* after "--" */
} cli_args_t;

enum { CLI_END = -1, CLI_POSITIONAL = -2, CLI_ERROR = -3, CLI_HELP = -4 };

void cli_args_init(cli_args_t *a, const cli_cmd_t *cmd, int argc, char **argv);
/* Returns the index of the next option in cmd->opts and sets *value to its value (NULL for a
 * flag); CLI_POSITIONAL with *value = the word; CLI_HELP for --help/-h; CLI_END when done;
 * CLI_ERROR after printing one line naming the mistake and the closest valid option. */
int cli_next(cli_args_t *a, out_t *o, const char **value);

/* The option loop every command shares. --help prints the command's help and returns
 * SQ_EXIT_OK; a mistake has been reported and returns SQ_EXIT_USAGE; every option (k = its index
 * in cmd->opts) and positional word (k = CLI_POSITIONAL) goes to take(), which returns -1 to go on
 * or an exit code to stop with. Returns -1 once every word was taken. */
typedef int (*cli_take_fn)(const struct cli_cmd *cmd, int k, const char *v, out_t *o, void *ctx);
int cli_parse(const cli_cmd_t *cmd, int argc, char **argv, out_t *o, cli_take_fn take, void *ctx);
/* For take(): keeps a command's single positional word in *slot; a second one is a usage error
 * naming `what` ("plan", "journal"). Returns -1 or SQ_EXIT_USAGE. */
int cli_take_one(const cli_cmd_t *cmd, const char **slot, const char *v, const char *what,
                 out_t *o);

/* "squall NAME ARGS...", each word quoted for a POSIX shell when it needs to be (malloc'd; NULL
 * when out of memory): how to run a command again, for the results it writes. */
char *cli_command_line(const char *name, int argc, char **argv);
/* Writes text (lines, each with or without its newline) to o's diagnostics, one out_raw line at
 * level each: the lines of a capture, already prefixed ("squall: warning: ", "FILE:L:C: "). */
void cli_lines_to_diag(const char *text, enum out_level level, out_t *o);

/* Common helper: report a usage mistake (one line) and return SQ_EXIT_USAGE. */
int cli_usage_error(const cli_cmd_t *cmd, out_t *o, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

#endif
