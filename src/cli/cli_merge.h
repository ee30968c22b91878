/* What `squall merge` lends `squall run --procs`: merging results directories into one, judged
 * as one run. */
#ifndef SQUALL_CLI_MERGE_H
#define SQUALL_CLI_MERGE_H

#include <stdbool.h>

#include "squall/cli.h"

/* Merges the n results directories (or results.json files) into dir, judges the merge, writes
 * results.json, series.csv, storms.csv and report.html, and prints the summary (json: the
 * "squall-merge" document). `line` is the command line recorded; cmd names the command in usage
 * errors; quiet prints no summary (json still prints its document). Returns the exit code (`squall
 * merge`'s: 0, 1, 7 by the verdict; 2, 6). */
int cli_merge_run(const cli_cmd_t *cmd, char **inputs, int n, const char *dir, bool force,
                  bool json, bool quiet, const char *line, out_t *o);

#endif
