/* squall's entry point: argv -> the subcommand table, nothing else. */
#include <stdio.h>
#include <string.h>

#include "squall/cli.h"
#include "squall/err.h"

int main(int argc, char **argv)
{
    out_t *o = out_new_file(stdout, stderr);
    if (!o) {
        fputs("squall: error: out of memory\n", stderr);
        return SQ_EXIT_FAILURE;
    }
    cli_use_table(cli_commands);
    int rc;
    if (argc < 2) {
        /* A usage mistake: the overview is talk then, on stderr, and stdout stays empty. */
        out_t *e = out_new_file(stderr, stderr);
        if (e)
            cli_print_overview(e);
        out_free(e);
        rc = SQ_EXIT_USAGE;
    } else if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0) {
        cli_print_overview(o);
        rc = SQ_EXIT_OK;
    } else if (strcmp(argv[1], "--version") == 0 || strcmp(argv[1], "-V") == 0) {
        /* The same words as `squall version`: one command answers all three. */
        rc = cli_find("version")->main(cli_find("version"), 0, argv + 2, o);
    } else {
        const cli_cmd_t *cmd = cli_find(argv[1]);
        if (cmd) {
            rc = cmd->main(cmd, argc - 2, argv + 2, o);
        } else {
            /* Reuse help's suggestion logic: `squall chek` says what `squall help chek` says. */
            char *args[] = {argv[1], NULL};
            rc = cli_find("help")->main(cli_find("help"), 1, args, o);
        }
    }
    fflush(stdout);
    out_free(o);
    return rc;
}
