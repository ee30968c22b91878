/* `squall help [COMMAND]`: the overview, or one command's usage and options. */
#include <string.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/suggest.h"

static int help_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cli_args_t a;
    const char *v, *topic = NULL;
    int k;
    cli_args_init(&a, cmd, argc, argv);
    while ((k = cli_next(&a, o, &v)) != CLI_END) {
        if (k == CLI_ERROR)
            return SQ_EXIT_USAGE;
        if (k == CLI_HELP) {
            cli_print_help(cmd, o);
            return SQ_EXIT_OK;
        }
        if (topic)
            return cli_usage_error(cmd, o, "one command at a time, got '%s' after '%s'", v, topic);
        topic = v;
    }
    if (!topic) {
        cli_print_overview(o);
        return SQ_EXIT_OK;
    }
    const cli_cmd_t *c = cli_find(topic);
    if (!c) {
        suggest_t s;
        suggest_init(&s, topic);
        for (const cli_cmd_t *const *t = cli_table(); *t; t++)
            suggest_offer(&s, NULL, (*t)->name);
        const char *near = suggest_best(&s);
        if (near)
            return cli_usage_error(NULL, o, "unknown command '%s'; did you mean '%s'?", topic,
                                   near);
        return cli_usage_error(NULL, o, "unknown command '%s'", topic);
    }
    cli_print_help(c, o);
    return SQ_EXIT_OK;
}

const cli_cmd_t cli_cmd_help = {
    .name = "help",
    .summary = "show the overview, or one command's usage and options",
    .usage = "[COMMAND]",
    .description = NULL,
    .opts = NULL,
    .main = help_main,
};
