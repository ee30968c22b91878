/* How a run learns where it stands among its peers, without a coordinator of our own: the shard
 * index and count from `--shard I/N` or from the environment a launcher gives each process it
 * starts (MPI, Slurm's srun, indexed batch jobs), and the common start instant (`--start-at`).
 *
 * Glossary: "launcher" = the program that started this process among N (mpirun, srun, an
 * orchestrator's indexed job); "rank" = its 0-based number of this process, shown to users as the
 * 1-based shard index I of I/N. */
#ifndef SQUALL_LAUNCH_H
#define SQUALL_LAUNCH_H

#include <stddef.h>
#include <stdint.h>

/* An instant --start-at may name: at most this far in the past (it is then started at once and
 * counted late), at most this far ahead. */
#define LAUNCH_PAST_TOLERANCE_NS INT64_C(1000000000)
#define LAUNCH_AHEAD_MAX_NS      (INT64_C(86400) * 1000000000)

/* Reads one environment variable (NULL when unset); getenv in the program, a table in tests. */
typedef const char *(*launch_env_fn)(const char *name, void *ctx);
const char *launch_getenv(const char *name, void *ctx); /* getenv(name) */

typedef struct {
    int flag_index, flag_count; /* --shard I/N; 0/0 when not given */
    int count;                  /* --shard-count N; 0 when not given */
    const char *launcher;       /* --launcher: NULL or "auto" (every launcher), "none" (ignore the
                                   environment), or one name of launch_names() */
} launch_in_t;

typedef struct {
    int index, count; /* 1 <= index <= count; 1/1 when nothing says otherwise */
    char from[16];    /* "" (nothing said), "flag" (--shard), or the launcher's name */
    char vars[256];   /* the variables read, "NAME=VALUE ..." ("" when none) */
} launch_shard_t;

/* The launcher names --launcher accepts besides auto and none, NULL-terminated:
 * open-mpi, pmix, pmi, slurm, indexed-job. */
const char *const *launch_names(void);

/* Decides this process's shard from the options and the environment. Returns 0, or SQ_EINVAL
 * with one line in err: a variable that is not a number in range, launchers that disagree with
 * each other, --shard or --shard-count that disagree with them, an index without a count, an
 * unknown --launcher. */
int launch_shard(const launch_in_t *in, launch_env_fn env, void *ctx, launch_shard_t *out,
                 char *err, size_t cap);

/* --start-at: an RFC 3339 date-time with an offset or Z (fraction allowed), or "+DURATION" from
 * now_ns (both on the wall clock, ns since the Unix epoch). Refuses an instant more than
 * LAUNCH_PAST_TOLERANCE_NS past or more than LAUNCH_AHEAD_MAX_NS ahead. Returns 0, or SQ_EINVAL
 * with one line in err. */
int launch_start_at(const char *s, int64_t now_ns, int64_t *at_ns, char *err, size_t cap);

/* An instant as RFC 3339 UTC with nanoseconds ("2026-12-02T15:04:05.123456789Z"). */
void launch_format_instant(int64_t ns, char *buf, size_t cap);

#endif
