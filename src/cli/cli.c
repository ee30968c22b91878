/* The subcommand table's lookups, help text, option parsing (with "did you mean" answers) and
 * the command line a command records in its results. */
#include "squall/cli.h"

#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/suggest.h"

static const cli_cmd_t *const *table;

void cli_use_table(const cli_cmd_t *const *t)
{
    table = t;
}

const cli_cmd_t *const *cli_table(void)
{
    static const cli_cmd_t *const none[] = {NULL};
    return table ? table : none;
}

const cli_cmd_t *cli_find(const char *name)
{
    const cli_cmd_t *const *t = cli_table();
    for (int i = 0; t[i]; i++)
        if (strcmp(t[i]->name, name) == 0)
            return t[i];
    return NULL;
}

void cli_print_overview(out_t *o)
{
    out_print(o, "squall %s: synthetic control-plane load from a YAML plan\n\n", SQUALL_VERSION);
    out_print(o, "usage: squall COMMAND [options]\n       squall help COMMAND\n"
                 "       squall --version\n\ncommands:\n");
    for (const cli_cmd_t *const *t = cli_table(); *t; t++)
        out_print(o, "  %-10s %s\n", (*t)->name, (*t)->summary);
    out_print(o, "\nexit codes:\n");
#define SQ_EXIT_HELP(name, value, text) out_print(o, "  %d  %s\n", value, text);
    SQ_EXIT_MAP(SQ_EXIT_HELP)
#undef SQ_EXIT_HELP
    out_print(o, "\nLoad can hurt: point squall at staging first, tell the owners of the target,\n"
                 "start small. Brakes are on by default; targets other than loopback need\n"
                 "--confirm-target.\n");
}

void cli_print_help(const cli_cmd_t *cmd, out_t *o)
{
    out_print(o, "usage: squall %s %s\n\n%s\n", cmd->name, cmd->usage, cmd->summary);
    if (cmd->description)
        out_print(o, "\n%s\n", cmd->description);
    out_print(o, "\noptions:\n");
    for (const cli_opt_t *op = cmd->opts; op && op->name; op++) {
        char left[64];
        if (op->short_name)
            snprintf(left, sizeof left, "-%c, --%s%s%s", op->short_name, op->name,
                     op->value ? " " : "", op->value ? op->value : "");
        else
            snprintf(left, sizeof left, "    --%s%s%s", op->name, op->value ? " " : "",
                     op->value ? op->value : "");
        out_print(o, "  %-28s %s\n", left, op->help);
    }
    out_print(o, "  %-28s %s\n", "-h, --help", "show this help");
}

void cli_args_init(cli_args_t *a, const cli_cmd_t *cmd, int argc, char **argv)
{
    a->cmd = cmd;
    a->argc = argc;
    a->argv = argv;
    a->i = 0;
    a->only_positional = 0;
}

int cli_usage_error(const cli_cmd_t *cmd, out_t *o, const char *fmt, ...)
{
    char msg[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    if (cmd)
        out_error(o, "%s: %s (see 'squall help %s')", cmd->name, msg, cmd->name);
    else
        out_error(o, "%s (see 'squall --help')", msg);
    return SQ_EXIT_USAGE;
}

static int unknown_option(cli_args_t *a, out_t *o, const char *word)
{
    char bare[64];
    snprintf(bare, sizeof bare, "%s", word);
    char *eq = strchr(bare, '=');
    if (eq)
        *eq = '\0';
    suggest_t s;
    suggest_init(&s, bare);
    for (const cli_opt_t *op = a->cmd->opts; op && op->name; op++)
        suggest_offer(&s, "--", op->name);
    suggest_offer(&s, "--", "help");
    const char *near = suggest_best(&s);
    if (near)
        cli_usage_error(a->cmd, o, "unknown option '%s'; did you mean '--%s'?", bare, near);
    else
        cli_usage_error(a->cmd, o, "unknown option '%s'", bare);
    return CLI_ERROR;
}

int cli_next(cli_args_t *a, out_t *o, const char **value)
{
    *value = NULL;
    if (a->i >= a->argc)
        return CLI_END;
    char *w = a->argv[a->i++];
    if (a->only_positional || w[0] != '-' || w[1] == '\0') {
        *value = w;
        return CLI_POSITIONAL;
    }
    if (strcmp(w, "--") == 0) {
        a->only_positional = 1;
        return cli_next(a, o, value);
    }
    if (strcmp(w, "--help") == 0 || strcmp(w, "-h") == 0)
        return CLI_HELP;
    const cli_opt_t *opts = a->cmd->opts;
    for (int k = 0; opts && opts[k].name; k++) {
        const cli_opt_t *op = &opts[k];
        const char *inline_val = NULL;
        if (w[1] == '-') {
            size_t n = strlen(op->name);
            if (strncmp(w + 2, op->name, n) != 0 || (w[2 + n] != '\0' && w[2 + n] != '='))
                continue;
            if (w[2 + n] == '=')
                inline_val = w + 3 + n;
        } else {
            if (!op->short_name || w[1] != op->short_name || w[2] != '\0')
                continue;
        }
        if (!op->value) {
            if (inline_val)
                return cli_usage_error(a->cmd, o, "option '--%s' takes no value", op->name),
                       CLI_ERROR;
            return k;
        }
        if (inline_val) {
            *value = inline_val;
            return k;
        }
        if (a->i >= a->argc)
            return cli_usage_error(a->cmd, o, "option '--%s' needs a value (%s)", op->name,
                                   op->value),
                   CLI_ERROR;
        *value = a->argv[a->i++];
        return k;
    }
    return unknown_option(a, o, w);
}

int cli_parse(const cli_cmd_t *cmd, int argc, char **argv, out_t *o, cli_take_fn take, void *ctx)
{
    cli_args_t a;
    const char *v;
    int k, rc;
    cli_args_init(&a, cmd, argc, argv);
    while ((k = cli_next(&a, o, &v)) != CLI_END) {
        if (k == CLI_ERROR)
            return SQ_EXIT_USAGE;
        if (k == CLI_HELP) {
            cli_print_help(cmd, o);
            return SQ_EXIT_OK;
        }
        if ((rc = take(cmd, k, v, o, ctx)) >= 0)
            return rc;
    }
    return -1;
}

int cli_take_one(const cli_cmd_t *cmd, const char **slot, const char *v, const char *what, out_t *o)
{
    if (*slot)
        return cli_usage_error(cmd, o, "one %s at a time, got '%s' after '%s'", what, v, *slot);
    *slot = v;
    return -1;
}

char *cli_command_line(const char *name, int argc, char **argv)
{
    size_t len = strlen(name) + 8;
    for (int i = 0; i < argc; i++)
        len += 4 * strlen(argv[i]) + 3;
    char *s = malloc(len);
    if (!s)
        return NULL;
    size_t n = (size_t)snprintf(s, len, "squall %s", name);
    for (int i = 0; i < argc; i++) {
        const char *a = argv[i];
        bool plain = a[0] && strspn(a, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
                                       "0123456789-_./=:,@%+") == strlen(a);
        s[n++] = ' ';
        if (plain) {
            n += (size_t)snprintf(s + n, len - n, "%s", a);
            continue;
        }
        s[n++] = '\'';
        for (; *a; a++)
            n += (size_t)snprintf(s + n, len - n, *a == '\'' ? "'\\''" : "%c", *a);
        s[n++] = '\'';
        s[n] = '\0';
    }
    return s;
}

void cli_lines_to_diag(const char *text, enum out_level level, out_t *o)
{
    while (*text) {
        const char *nl = strchr(text, '\n');
        int len = nl ? (int)(nl - text) : (int)strlen(text);
        out_raw(o, level, "%.*s", len, text);
        text += len + (nl != NULL);
    }
}
