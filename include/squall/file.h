/* Files written whole or not at all: results, reports and comparisons are replaced in one step,
 * so a reader (or a crash) never finds half a file. */
#ifndef SQUALL_FILE_H
#define SQUALL_FILE_H

#include <stdint.h>
#include <stdio.h>

#include "squall/out.h"

/* Writes `path` through a temporary file in the same directory (PATH.tmp-XXXXXX): fill(f, ctx)
 * writes the contents and returns 0 or a negative code (squall/err.h); then the file is flushed,
 * synced to disk (fsync), closed, given mode 0644 and renamed over `path`. POSIX rename()
 * replaces the name in one step, so readers see the old file or the whole new one. On any failure
 * the temporary file is removed, `path` is left as it was, one line naming the file and the
 * reason goes to `o` ("cannot write PATH: REASON"), and SQ_EIO is returned. */
int file_write_atomic(const char *path, int (*fill)(FILE *f, void *ctx), void *ctx, out_t *o);

/* Raises this process's soft open-files limit (RLIMIT_NOFILE) to its hard limit, as `run` and
 * `serve` do at start (a server holding thousands of streams, a run opening thousands of
 * watches). Returns the soft limit now, UINT64_MAX when unlimited, 0 when it cannot be read. */
uint64_t file_raise_limit(void);

/* Open files the whole system may still allocate, from the text of /proc/sys/fs/file-nr: three
 * numbers, "allocated  free-allocated  maximum" (proc(5), "/proc/sys/fs/file-nr"); the answer is
 * maximum − allocated + free-allocated. 0 when the text is not three numbers. */
uint64_t file_system_free_parse(const char *text);
/* The same, read from /proc/sys/fs/file-nr now; UINT64_MAX when it cannot be read (no limit
 * known). */
uint64_t file_system_free(void);

#endif
