/* Unit tests for src/launch/launch.c: the shard read from fake launcher environments (the variable
 * names and values each launcher sets, with where each comes from beside it), and --start-at. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/launch.h"

/* A fake environment: NULL-terminated "NAME=VALUE" strings. */
static const char *fake_env(const char *name, void *ctx)
{
    size_t n = strlen(name);
    for (const char *const *e = ctx; *e; e++)
        if (!strncmp(*e, name, n) && (*e)[n] == '=')
            return *e + n + 1;
    return NULL;
}

static char err[512];

static int shard(const launch_in_t *in, const char *const *env, launch_shard_t *out)
{
    return launch_shard(in, fake_env, (void *)env, out, err, sizeof err);
}

static void expect(const launch_in_t *in, const char *const *env, int index, int count,
                   const char *from)
{
    launch_shard_t s;
    int rc = shard(in, env, &s);
    if (rc)
        fail_msg("refused: %s", err);
    assert_int_equal(s.index, index);
    assert_int_equal(s.count, count);
    assert_string_equal(s.from, from);
}

static void refuse(const launch_in_t *in, const char *const *env, const char *needle)
{
    launch_shard_t s;
    assert_int_equal(shard(in, env, &s), SQ_EINVAL);
    if (!strstr(err, needle))
        fail_msg("'%s' does not say '%s'", err, needle);
    assert_null(strchr(err, '\n')); /* one line */
}

/* Nothing said: shard 1/1; --shard alone as given. */
static void test_none(void **state)
{
    (void)state;
    const char *empty[] = {NULL};
    expect(&(launch_in_t){0}, empty, 1, 1, "");
    expect(&(launch_in_t){.flag_index = 3, .flag_count = 4}, empty, 3, 4, "flag");
}

/* Open MPI: the environment of Debian 12's `mpirun --oversubscribe -np 2 env` (Open MPI 4.1.4),
 * copied from this machine: rank 1 of 2 sets these (and PMIX_RANK, no PMIx size). */
static void test_open_mpi(void **state)
{
    (void)state;
    const char *env[] = {"OMPI_COMM_WORLD_LOCAL_RANK=1",
                         "OMPI_COMM_WORLD_LOCAL_SIZE=2",
                         "OMPI_COMM_WORLD_NODE_RANK=1",
                         "OMPI_COMM_WORLD_RANK=1",
                         "OMPI_COMM_WORLD_SIZE=2",
                         "PMIX_RANK=1",
                         NULL};
    launch_shard_t s;
    assert_int_equal(shard(&(launch_in_t){0}, env, &s), 0);
    assert_int_equal(s.index, 2);
    assert_int_equal(s.count, 2);
    assert_string_equal(s.from, "open-mpi");
    assert_non_null(strstr(s.vars, "OMPI_COMM_WORLD_RANK=1"));
    assert_non_null(strstr(s.vars, "PMIX_RANK=1"));
    /* --shard that agrees is fine; one that does not is refused with both stories. */
    expect(&(launch_in_t){.flag_index = 2, .flag_count = 2}, env, 2, 2, "open-mpi");
    refuse(&(launch_in_t){.flag_index = 1, .flag_count = 2}, env, "--shard 1/2 disagrees");
    /* --launcher none ignores the environment; --launcher pmix reads only PMIX_RANK. */
    expect(&(launch_in_t){.flag_index = 1, .flag_count = 2, .launcher = "none"}, env, 1, 2, "flag");
    refuse(&(launch_in_t){.launcher = "pmix"}, env, "--shard-count");
    expect(&(launch_in_t){.launcher = "pmix", .count = 2}, env, 2, 2, "pmix");
}

/* PMIx alone gives the rank; the count comes from --shard-count. */
static void test_pmix(void **state)
{
    (void)state;
    const char *env[] = {"PMIX_RANK=3", NULL};
    refuse(&(launch_in_t){0}, env, "pass --shard-count N");
    expect(&(launch_in_t){.count = 8}, env, 4, 8, "pmix");
    refuse(&(launch_in_t){.count = 3}, env, "not below");
}

/* PMI (MPICH's Hydra: PMI_RANK, PMI_SIZE). */
static void test_pmi(void **state)
{
    (void)state;
    const char *env[] = {"PMI_RANK=0", "PMI_SIZE=16", NULL};
    expect(&(launch_in_t){0}, env, 1, 16, "pmi");
    refuse(&(launch_in_t){.count = 8}, env, "--shard-count 8 disagrees");
    const char *bad[] = {"PMI_RANK=16", "PMI_SIZE=16", NULL};
    refuse(&(launch_in_t){0}, bad, "above the rank");
    const char *word[] = {"PMI_RANK=two", NULL};
    refuse(&(launch_in_t){0}, word, "PMI_RANK=two");
}

/* Slurm's srun: SLURM_PROCID with the step's task count (SLURM_STEP_NUM_TASKS) before the job's
 * (SLURM_NTASKS). Debian 12's `srun -n 2 env` (Slurm 22.05) here set SLURM_PROCID=0/1,
 * SLURM_NTASKS=2 and SLURM_STEP_NUM_TASKS=2. */
static void test_slurm(void **state)
{
    (void)state;
    const char *env[] = {"SLURM_PROCID=5", "SLURM_NTASKS=8", "SLURM_JOB_ID=200", NULL};
    expect(&(launch_in_t){0}, env, 6, 8, "slurm");
    const char *step[] = {"SLURM_PROCID=1", "SLURM_NTASKS=8", "SLURM_STEP_NUM_TASKS=2", NULL};
    expect(&(launch_in_t){0}, step, 2, 2, "slurm");
    /* mpirun inside a Slurm allocation: its daemons' Slurm ranks are not the MPI ranks. */
    const char *both[] = {"SLURM_PROCID=0", "SLURM_NTASKS=2", "OMPI_COMM_WORLD_RANK=3",
                          "OMPI_COMM_WORLD_SIZE=4", NULL};
    refuse(&(launch_in_t){0}, both, "launcher variables disagree");
    expect(&(launch_in_t){.launcher = "open-mpi"}, both, 4, 4, "open-mpi");
    expect(&(launch_in_t){.launcher = "slurm"}, both, 1, 2, "slurm");
    /* Launchers that tell the same story are read together. */
    const char *same[] = {"SLURM_PROCID=3", "SLURM_NTASKS=4", "PMI_RANK=3", "PMI_SIZE=4", NULL};
    expect(&(launch_in_t){0}, same, 4, 4, "pmi");
}

/* An indexed batch job: JOB_COMPLETION_INDEX (0-based) and the count by --shard-count. */
static void test_indexed_job(void **state)
{
    (void)state;
    const char *env[] = {"JOB_COMPLETION_INDEX=0", NULL};
    refuse(&(launch_in_t){0}, env, "pass --shard-count N");
    expect(&(launch_in_t){.count = 5}, env, 1, 5, "indexed-job");
    expect(&(launch_in_t){.flag_index = 1, .flag_count = 5}, env, 1, 5, "indexed-job");
    refuse(&(launch_in_t){.flag_index = 1, .flag_count = 5, .count = 4}, env,
           "--shard 1/5 disagrees with --shard-count 4");
    const char *empty[] = {NULL};
    refuse(&(launch_in_t){.count = 5}, empty, "no launcher variable");
    refuse(&(launch_in_t){.launcher = "slurm"}, empty, "SLURM_PROCID is not set");
    refuse(&(launch_in_t){.launcher = "lsf"}, empty, "--launcher lsf");
}

/* --start-at. RFC 3339 section 5.8's examples: 1996-12-19T16:39:57-08:00 is
 * 1996-12-20T00:39:57Z; the epoch value of the latter comes from glibc's timegm. */
static void test_start_at(void **state)
{
    (void)state;
    struct tm tm = {
        .tm_year = 96, .tm_mon = 11, .tm_mday = 20, .tm_hour = 0, .tm_min = 39, .tm_sec = 57};
    int64_t t = (int64_t)timegm(&tm) * 1000000000, at;
    assert_int_equal(launch_start_at("1996-12-20T00:39:57Z", t, &at, err, sizeof err), 0);
    assert_int_equal(at, t);
    assert_int_equal(launch_start_at("1996-12-19T16:39:57-08:00", t, &at, err, sizeof err), 0);
    assert_int_equal(at, t);
    assert_int_equal(launch_start_at("1996-12-20T00:40:07.25Z", t, &at, err, sizeof err), 0);
    assert_int_equal(at, t + INT64_C(10250000000));
    assert_int_equal(launch_start_at("+30s", t, &at, err, sizeof err), 0);
    assert_int_equal(at, t + INT64_C(30000000000));
    /* Past: within the 1 s tolerance runs, beyond it is refused; more than a day ahead too. */
    assert_int_equal(launch_start_at("1996-12-20T00:39:56.5Z", t, &at, err, sizeof err), 0);
    assert_int_equal(launch_start_at("1996-12-20T00:39:55.9Z", t, &at, err, sizeof err), SQ_EINVAL);
    assert_non_null(strstr(err, "in the past"));
    assert_int_equal(launch_start_at("+24h", t, &at, err, sizeof err), 0);
    assert_int_equal(launch_start_at("+25h", t, &at, err, sizeof err), SQ_EINVAL);
    assert_non_null(strstr(err, "more than a day"));
    /* No offset, or not a time at all. */
    assert_int_equal(launch_start_at("1996-12-20T00:39:57", t, &at, err, sizeof err), SQ_EINVAL);
    assert_int_equal(launch_start_at("soon", t, &at, err, sizeof err), SQ_EINVAL);
    assert_int_equal(launch_start_at("+-3s", t, &at, err, sizeof err), SQ_EINVAL);
    char buf[64];
    launch_format_instant(t + 250000000, buf, sizeof buf);
    assert_string_equal(buf, "1996-12-20T00:39:57.250000000Z");
    assert_int_equal(launch_start_at(buf, t, &at, err, sizeof err), 0);
    assert_int_equal(at, t + 250000000);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_none),     cmocka_unit_test(test_open_mpi),
        cmocka_unit_test(test_pmix),     cmocka_unit_test(test_pmi),
        cmocka_unit_test(test_slurm),    cmocka_unit_test(test_indexed_job),
        cmocka_unit_test(test_start_at),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
