/* `squall version` (also `squall --version` and `squall -V`, which main hands here): one line,
 * "squall X.Y.Z", on stdout. */
#include "squall/cli.h"
#include "squall/err.h"

/* No words besides --help (cli_take_fn). */
static int take_none(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    (void)k;
    (void)ctx;
    return cli_usage_error(cmd, o, "takes no arguments, got '%s'", v);
}

static int version_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    int rc = cli_parse(cmd, argc, argv, o, take_none, NULL);
    if (rc >= 0)
        return rc;
    out_print(o, "squall %s\n", SQUALL_VERSION);
    return SQ_EXIT_OK;
}

const cli_cmd_t cli_cmd_version = {
    .name = "version",
    .summary = "print squall's version (also --version, -V)",
    .usage = "",
    .description = NULL,
    .opts = NULL,
    .main = version_main,
};
