/* The shard a process is, from --shard or its launcher's environment, and the instant every
 * shard starts at (--start-at). Pure functions over an environment reader, so that the unit
 * tests can hand them fake environments. */
#include "squall/launch.h"

#include <inttypes.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "squall/alog.h"
#include "squall/err.h"
#include "squall/value.h"

/* Each launcher's variables: the process's 0-based rank, and the count (the first one set).
 * Where each name comes from:
 *   open-mpi     OMPI_COMM_WORLD_RANK / OMPI_COMM_WORLD_SIZE: read from the environment of
 *                Debian 12's mpirun (Open MPI 4.1.4, `mpirun -np 2 env`), which also sets
 *                PMIX_RANK and no PMIx size variable.
 *   pmix         PMIX_RANK: the same mpirun; the count comes from another launcher's variable or
 *                --shard-count.
 *   pmi          PMI_RANK / PMI_SIZE: set by MPICH's Hydra mpiexec (seen in public launch
 *                scripts and in Flux's Hydra tests; not run here).
 *   slurm        SLURM_PROCID / SLURM_STEP_NUM_TASKS, else SLURM_NTASKS: srun's task environment,
 *                read from Debian 12's `srun -n 2 env` (Slurm 22.05, one node here:
 *                tests/integration/launch_slurm.sh).
 *   indexed-job  JOB_COMPLETION_INDEX: an indexed Job's completion index, 0-based (the
 *                Kubernetes documentation, "Indexed Job for Parallel Processing with Static Work
 *                Assignment"); the count (the Job's completions) is not in the environment and
 *                comes from --shard-count. */
typedef struct {
    const char *name;
    const char *rank;
    const char *size[2];
} launcher_t;

static const launcher_t launchers[] = {
    {"open-mpi", "OMPI_COMM_WORLD_RANK", {"OMPI_COMM_WORLD_SIZE", NULL}},
    {"pmix", "PMIX_RANK", {NULL, NULL}},
    {"pmi", "PMI_RANK", {"PMI_SIZE", NULL}},
    {"slurm", "SLURM_PROCID", {"SLURM_STEP_NUM_TASKS", "SLURM_NTASKS"}},
    {"indexed-job", "JOB_COMPLETION_INDEX", {NULL, NULL}},
};
#define N_LAUNCHERS (sizeof launchers / sizeof launchers[0])
#define MAX_COUNT   100000 /* as --shard */

const char *launch_getenv(const char *name, void *ctx)
{
    (void)ctx;
    return getenv(name);
}

const char *const *launch_names(void)
{
    static const char *const names[] = {"open-mpi", "pmix", "pmi", "slurm", "indexed-job", NULL};
    return names;
}

/* What one launcher's variables say. */
typedef struct {
    const launcher_t *l;
    int64_t rank, size; /* size 0: not given by this launcher */
    char vars[128];
} seen_t;

static void add_var(char *buf, size_t cap, const char *name, const char *value)
{
    size_t n = strlen(buf);
    snprintf(buf + n, cap - n, "%s%s=%.24s", n ? " " : "", name, value);
}

/* Reads launcher l; 1 when its rank variable is set, 0 when not, SQ_EINVAL when a variable is
 * not a number in range. */
static int read_launcher(const launcher_t *l, launch_env_fn env, void *ctx, seen_t *s, char *err,
                         size_t cap)
{
    const char *rank = env(l->rank, ctx);
    if (!rank)
        return 0;
    memset(s, 0, sizeof *s);
    s->l = l;
    add_var(s->vars, sizeof s->vars, l->rank, rank);
    if (value_parse_int(rank, 0, MAX_COUNT - 1, &s->rank)) {
        snprintf(err, cap, "%s=%.40s (%s): expected an integer 0..%d", l->rank, rank, l->name,
                 MAX_COUNT - 1);
        return SQ_EINVAL;
    }
    for (int k = 0; k < 2 && l->size[k]; k++) {
        const char *size = env(l->size[k], ctx);
        if (!size)
            continue;
        add_var(s->vars, sizeof s->vars, l->size[k], size);
        if (value_parse_int(size, 1, MAX_COUNT, &s->size) || s->rank >= s->size) {
            snprintf(err, cap, "%s=%.40s with %s=%.40s (%s): expected a count 1..%d above the rank",
                     l->size[k], size, l->rank, rank, l->name, MAX_COUNT);
            return SQ_EINVAL;
        }
        break;
    }
    return 1;
}

static int find_launcher(const char *name)
{
    for (size_t i = 0; i < N_LAUNCHERS; i++)
        if (!strcmp(launchers[i].name, name))
            return (int)i;
    return -1;
}

/* Every launcher whose rank variable is set (only `only` when >= 0); their number, or
 * SQ_EINVAL. */
static int read_all(int only, launch_env_fn env, void *ctx, seen_t *seen, char *err, size_t cap)
{
    int n = 0;
    for (size_t i = 0; i < N_LAUNCHERS; i++) {
        if (only >= 0 && (int)i != only)
            continue;
        int rc = read_launcher(&launchers[i], env, ctx, &seen[n], err, cap);
        if (rc < 0)
            return rc;
        n += rc;
    }
    return n;
}

/* The launchers must tell one story: the same rank, and the same count where both give one. */
static int agree(const seen_t *seen, int n, char *err, size_t cap)
{
    for (int i = 1; i < n; i++)
        for (int j = 0; j < i; j++) {
            const seen_t *a = &seen[j], *b = &seen[i];
            if (a->rank == b->rank && (!a->size || !b->size || a->size == b->size))
                continue;
            snprintf(err, cap,
                     "launcher variables disagree: %s (%s) and %s (%s); pick one with "
                     "--launcher NAME",
                     a->vars, a->l->name, b->vars, b->l->name);
            return SQ_EINVAL;
        }
    return 0;
}

/* The environment's shard into out (from = the first launcher that gives a count), or an error
 * when it gives an index and nothing gives the count. */
static int from_env(const launch_in_t *in, const seen_t *seen, int n, launch_shard_t *out,
                    char *err, size_t cap)
{
    int64_t size = 0;
    const seen_t *by = &seen[0];
    for (int i = 0; i < n && !size; i++)
        if (seen[i].size) {
            size = seen[i].size;
            by = &seen[i];
        }
    if (in->count && size && in->count != size) {
        snprintf(err, cap, "--shard-count %d disagrees with %s (%s gives %" PRId64 " shards)",
                 in->count, by->vars, by->l->name, size);
        return SQ_EINVAL;
    }
    if (!size)
        size = in->count;
    if (!size) {
        snprintf(err, cap,
                 "%s (%s) gives this process's index but not how many there are: pass "
                 "--shard-count N",
                 by->vars, by->l->name);
        return SQ_EINVAL;
    }
    if (by->rank >= size) {
        snprintf(err, cap, "%s (%s) is not below --shard-count %" PRId64, by->vars, by->l->name,
                 size);
        return SQ_EINVAL;
    }
    out->index = (int)by->rank + 1;
    out->count = (int)size;
    snprintf(out->from, sizeof out->from, "%s", by->l->name);
    for (int i = 0; i < n; i++) {
        size_t len = strlen(out->vars);
        snprintf(out->vars + len, sizeof out->vars - len, "%s%s", len ? " " : "", seen[i].vars);
    }
    return 0;
}

int launch_shard(const launch_in_t *in, launch_env_fn env, void *ctx, launch_shard_t *out,
                 char *err, size_t cap)
{
    memset(out, 0, sizeof *out);
    out->index = out->count = 1;
    err[0] = '\0';
    int only = -1;
    bool none = in->launcher && !strcmp(in->launcher, "none");
    if (in->launcher && !none && strcmp(in->launcher, "auto")) {
        if ((only = find_launcher(in->launcher)) < 0) {
            snprintf(err, cap,
                     "--launcher %.40s: expected auto, none, open-mpi, pmix, pmi, slurm or "
                     "indexed-job",
                     in->launcher);
            return SQ_EINVAL;
        }
    }
    seen_t seen[N_LAUNCHERS];
    int n = none ? 0 : read_all(only, env, ctx, seen, err, cap);
    if (n < 0 || (n > 0 && agree(seen, n, err, cap)))
        return SQ_EINVAL;
    if (in->flag_count && in->count && in->count != in->flag_count) {
        snprintf(err, cap, "--shard %d/%d disagrees with --shard-count %d", in->flag_index,
                 in->flag_count, in->count);
        return SQ_EINVAL;
    }
    if (n == 0) {
        if (in->count && !in->flag_count) {
            snprintf(err, cap,
                     "--shard-count %d: no launcher variable gives this process's index (%s); "
                     "pass --shard I/N instead",
                     in->count, only >= 0 ? launchers[only].rank : "e.g. JOB_COMPLETION_INDEX");
            return SQ_EINVAL;
        }
        if (only >= 0) {
            snprintf(err, cap, "--launcher %s: %s is not set", launchers[only].name,
                     launchers[only].rank);
            return SQ_EINVAL;
        }
        if (in->flag_count) {
            out->index = in->flag_index;
            out->count = in->flag_count;
            snprintf(out->from, sizeof out->from, "flag");
        }
        return 0;
    }
    launch_in_t e = *in;
    if (!e.count)
        e.count = in->flag_count;
    if (from_env(&e, seen, n, out, err, cap))
        return SQ_EINVAL;
    if (in->flag_count && (in->flag_index != out->index || in->flag_count != out->count)) {
        snprintf(err, cap,
                 "--shard %d/%d disagrees with the launcher's %s (shard %d/%d); drop --shard, or "
                 "--launcher none to ignore the environment",
                 in->flag_index, in->flag_count, out->vars, out->index, out->count);
        return SQ_EINVAL;
    }
    return 0;
}

/* ---- the start instant -------------------------------------------------------------------- */

int launch_start_at(const char *s, int64_t now_ns, int64_t *at_ns, char *err, size_t cap)
{
    int64_t at;
    if (s[0] == '+') {
        int64_t d;
        if (value_parse_duration(s + 1, &d) || d < 0) {
            snprintf(err, cap, "--start-at %.60s: expected +%s", s, VALUE_DURATION_EXPECTS);
            return SQ_EINVAL;
        }
        at = now_ns + d;
    } else if (alog_rfc3339_ns(s, strlen(s), &at)) {
        snprintf(err, cap,
                 "--start-at %.60s: expected an RFC 3339 instant with an offset, like "
                 "2026-12-02T15:04:05Z or 2026-12-02T16:04:05.250+01:00, or +30s",
                 s);
        return SQ_EINVAL;
    }
    if (at < now_ns - LAUNCH_PAST_TOLERANCE_NS) {
        snprintf(err, cap, "--start-at %.60s is %.3f s in the past (at most %.0f s is allowed)", s,
                 (double)(now_ns - at) / 1e9, (double)LAUNCH_PAST_TOLERANCE_NS / 1e9);
        return SQ_EINVAL;
    }
    if (at > now_ns + LAUNCH_AHEAD_MAX_NS) {
        snprintf(err, cap, "--start-at %.60s is %.0f s ahead: more than a day", s,
                 (double)(at - now_ns) / 1e9);
        return SQ_EINVAL;
    }
    *at_ns = at;
    return 0;
}

void launch_format_instant(int64_t ns, char *buf, size_t cap)
{
    time_t sec = (time_t)(ns / 1000000000);
    long frac = (long)(ns % 1000000000);
    if (frac < 0) {
        frac += 1000000000;
        sec--;
    }
    struct tm tm;
    gmtime_r(&sec, &tm);
    char day[32];
    strftime(day, sizeof day, "%Y-%m-%dT%H:%M:%S", &tm);
    snprintf(buf, cap, "%s.%09ldZ", day, frac);
}
