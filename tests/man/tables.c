/* Prints the code's own tables that the manual pages must match, one item a line:
 *   command NAME
 *   option COMMAND --LONG [-S] [VALUE]
 *   key PATH          (a plan key as squall-plan(5) names it, e.g. phases[].fleet.agents)
 *   exit CODE         (an exit code of SQ_EXIT_MAP)
 * tests/man/drift.py compares them with doc/squall.1.scd and doc/squall-plan.5.scd. */
#include <stdio.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/plan.h"

int main(void)
{
    cli_use_table(cli_commands);
    for (const cli_cmd_t *const *t = cli_table(); *t; t++) {
        printf("command %s\n", (*t)->name);
        for (const cli_opt_t *op = (*t)->opts; op && op->name; op++) {
            printf("option %s --%s", (*t)->name, op->name);
            if (op->short_name)
                printf(" -%c", op->short_name);
            printf("%s%s\n", op->value ? " " : "", op->value ? op->value : "");
        }
    }
    for (int s = 0; s < PLAN_KEYS_N; s++)
        for (const char *const *k = plan_keysets[s].keys; *k; k++)
            printf("key %s%s%s\n", plan_keysets[s].where, plan_keysets[s].where[0] ? "." : "", *k);
#define SQ_EXIT_LINE(name, value, text) printf("exit %d\n", value);
    SQ_EXIT_MAP(SQ_EXIT_LINE)
#undef SQ_EXIT_LINE
    return 0;
}
