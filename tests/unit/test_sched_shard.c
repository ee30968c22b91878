/* Unit tests for shards' arithmetic: round-robin ownership against a brute-force count, even
 * schedules (constant, ramp, steps) whose N shards' union is the single schedule exactly,
 * Poisson shards whose superposition is the planned process (count within 4 sigma, gaps
 * against Exp(λ) by KS, cross-checked with scipy), closed-loop clients and fleet agents dealt
 * by index, and the FNV-1a hash against the published test vectors. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/sched.h"
#include "test_stats.h"

#define S INT64_C(1000000000)

static int cmp_i64(const void *a, const void *b)
{
    int64_t x = *(const int64_t *)a, y = *(const int64_t *)b;
    return (x > y) - (x < y);
}

/* Every start of cfg as shard sh, appended to *t (grown as needed). */
static void collect(sched_open_cfg_t cfg, sched_shard_t sh, int64_t **t, size_t *n, size_t *cap)
{
    cfg.shard = sh;
    sched_open_t *s;
    assert_int_equal(sched_open_new(&cfg, &s), 0);
    int64_t v;
    size_t before = *n;
    while (sched_open_next(s, &v)) {
        if (*n == *cap)
            *t = realloc(*t, (*cap = *cap * 2 + 1024) * sizeof(int64_t));
        (*t)[(*n)++] = v;
    }
    assert_int_equal(sched_open_count(s), *n - before);
    sched_open_free(s);
}

/* Ownership and shares against counting one by one. */
static void test_share_brute_force(void **state)
{
    (void)state;
    for (int n = 1; n <= 7; n++)
        for (int i = 1; i <= n; i++) {
            sched_shard_t sh = {i, n};
            for (uint64_t lo = 0; lo < 20; lo++)
                for (uint64_t hi = lo; hi < 40; hi++) {
                    uint64_t c = 0;
                    for (uint64_t k = lo; k < hi; k++)
                        c += k % (uint64_t)n == (uint64_t)(i - 1);
                    assert_int_equal(sched_shard_share(sh, lo, hi), c);
                }
        }
    /* The whole run owns everything; malformed shards are refused by the schedulers. */
    assert_int_equal(sched_shard_share((sched_shard_t){0, 0}, 3, 10), 7);
    assert_true(sched_shard_owns((sched_shard_t){1, 1}, 5));
    assert_false(sched_shard_valid((sched_shard_t){0, 4}));
    assert_false(sched_shard_valid((sched_shard_t){5, 4}));
    assert_false(sched_shard_valid((sched_shard_t){1, 0}));
    sched_open_cfg_t bad = {.shape = SCHED_CONSTANT, .rate = 10, .duration_ns = S, .shard = {3, 2}};
    sched_open_t *s;
    assert_int_equal(sched_open_new(&bad, &s), SQ_EINVAL);
}

/* For N = 1..6: the N shards' even starts, merged, are the single schedule start for start;
 * each shard's count is what even_count and expected say, and per-interval expected counts add
 * up to the single schedule's. */
static void check_union(sched_open_cfg_t cfg, const char *what)
{
    int64_t *one = NULL;
    size_t n1 = 0, cap1 = 0;
    collect(cfg, (sched_shard_t){0, 0}, &one, &n1, &cap1);
    assert_int_equal(sched_open_even_count(&cfg), n1);
    for (int n = 1; n <= 6; n++) {
        int64_t *all = NULL;
        size_t na = 0, capa = 0;
        for (int i = 1; i <= n; i++) {
            size_t before = na;
            sched_open_cfg_t c = cfg;
            c.shard = (sched_shard_t){i, n};
            collect(cfg, c.shard, &all, &na, &capa);
            assert_int_equal(sched_open_even_count(&c), na - before);
            assert_true(fabs(sched_open_expected(&c, 0, cfg.duration_ns) - (double)(na - before)) <
                        1e-9);
        }
        assert_int_equal(na, n1);
        qsort(all, na, sizeof(int64_t), cmp_i64);
        for (size_t k = 0; k < n1; k++)
            assert_int_equal(all[k], one[k]);
        /* The model second by second: the shards' shares sum to the single schedule's. */
        for (int64_t t = 0; t < cfg.duration_ns; t += S / 3) {
            double sum = 0, whole = sched_open_expected(&cfg, t, t + S / 3);
            for (int i = 1; i <= n; i++) {
                sched_open_cfg_t c = cfg;
                c.shard = (sched_shard_t){i, n};
                sum += sched_open_expected(&c, t, t + S / 3);
            }
            assert_true(fabs(sum - whole) < 1e-9);
        }
        free(all);
    }
    printf("even %s: %zu starts; the union of N = 1..6 shards is the single schedule\n", what, n1);
    free(one);
}

static void test_even_union(void **state)
{
    (void)state;
    check_union((sched_open_cfg_t){.shape = SCHED_CONSTANT, .rate = 333.3, .duration_ns = 7 * S},
                "constant 333.3/s x 7 s");
    check_union((sched_open_cfg_t){.shape = SCHED_RAMP, .from = 5, .to = 400, .duration_ns = 9 * S},
                "ramp 5 -> 400/s x 9 s");
    sched_step_t steps[] = {
        {.rate = 50, .for_ns = 2 * S}, {.rate = 0, .for_ns = S}, {.rate = 210.5, .for_ns = S}};
    check_union(
        (sched_open_cfg_t){
            .shape = SCHED_STEPS, .steps = steps, .n_steps = 3, .duration_ns = 6 * S},
        "steps 50, 0, 210.5/s");
}

/* Four Poisson shards of 1000/s (each its own seed, as the run derives them) superposed: the
 * total is Poisson(20000) (within 4 sigma, common practice), and the gaps of the merged
 * process are Exp(1000) by one-sample KS at α = .01 (critical value KS_C_01/√n), D
 * cross-checked with scipy.stats.kstest. One shard alone is a rate-250 process, which the
 * same test must reject at 1000/s: it bites. */
static void test_poisson_superposition(void **state)
{
    (void)state;
    double rate = 1000;
    int64_t dur = 20 * S;
    sched_open_cfg_t cfg = {
        .shape = SCHED_CONSTANT, .rate = rate, .duration_ns = dur, .arrivals = SCHED_POISSON};
    int64_t *t = NULL;
    size_t n = 0, cap = 0, first = 0;
    for (int i = 1; i <= 4; i++) {
        sched_shard_t sh = {i, 4};
        cfg.seed = sched_seed(sched_shard_seed(42, sh), 0, 1);
        collect(cfg, sh, &t, &n, &cap);
        if (i == 1)
            first = n;
        sched_open_cfg_t c = cfg;
        c.shard = sh;
        assert_true(fabs(sched_open_expected(&c, 0, dur) - rate * 20 / 4) < 1e-6);
    }
    assert_true(fabs((double)n - 20000) < 4 * sqrt(20000));
    qsort(t, n, sizeof(int64_t), cmp_i64);
    double *g = malloc(n * sizeof(double)), *g1 = malloc(first * sizeof(double));
    for (size_t k = 0; k < n; k++)
        g[k] = (double)(t[k] - (k ? t[k - 1] : 0)) / 1e9;
    const char *path = write_samples(g, n, "%.17g\n");
    assert_non_null(path);
    double d = ks_distance(g, n, exp_cdf, rate), crit = KS_C_01 / sqrt((double)n);
    char args[512];
    snprintf(args, sizeof(args), "ks %s %.17g", path, rate);
    double d_py, p_py;
    assert_int_equal(run_ref(args, &d_py, &p_py), 0);
    unlink(path);
    /* Shard 1 alone (its starts are the first `first` before sorting: collect again). */
    int64_t *t1 = NULL;
    size_t n1 = 0, cap1 = 0;
    cfg.seed = sched_seed(sched_shard_seed(42, (sched_shard_t){1, 4}), 0, 1);
    collect(cfg, (sched_shard_t){1, 4}, &t1, &n1, &cap1);
    assert_int_equal(n1, first);
    for (size_t k = 0; k < n1; k++)
        g1[k] = (double)(t1[k] - (k ? t1[k - 1] : 0)) / 1e9;
    double d1 = ks_distance(g1, n1, exp_cdf, rate);
    printf("poisson 4 x 1000/4 shards: n %zu (4 sigma of 20000: %.0f), KS D %.6f (scipy %.6f, p "
           "%.4f), critical %.6f; one shard alone D %.4f\n",
           n, 4 * sqrt(20000), d, d_py, p_py, crit, d1);
    assert_true(d < crit);
    assert_true(fabs(d - d_py) < 1e-9);
    assert_true(p_py > 0.01);
    assert_true(d1 > KS_C_01 / sqrt((double)n1));
    free(g);
    free(g1);
    free(t);
    free(t1);
}

/* Closed-loop clients: shard i of 3 runs the clients k with k mod 3 = i - 1, each at its global
 * first start; the union is every client once. */
static void test_closed_clients(void **state)
{
    (void)state;
    int seen[10] = {0};
    double sum = 0;
    sched_closed_cfg_t cfg = {
        .clients = 10, .think_ns = S, .spread_ns = 10 * S, .duration_ns = 30 * S, .seed = 1};
    for (int i = 1; i <= 3; i++) {
        cfg.shard = (sched_shard_t){i, 3};
        sched_closed_t *c;
        assert_int_equal(sched_closed_new(&cfg, &c), 0);
        int client;
        int64_t t;
        while (sched_closed_due(c, INT64_MAX, &client, &t)) {
            assert_int_equal(client % 3, i - 1);
            assert_int_equal(t, client * S); /* its first start at k · spread / clients */
            seen[client]++;
        }
        for (int k = 0; k < 10; k++)
            if (k % 3 == i - 1)
                assert_false(sched_closed_complete(c, k, 29 * S, NULL));
        assert_true(sched_closed_finished(c));
        sum += sched_closed_expected(&cfg, 0);
        sched_closed_free(c);
    }
    for (int k = 0; k < 10; k++)
        assert_int_equal(seen[k], 1);
    cfg.shard = (sched_shard_t){0, 0};
    assert_true(fabs(sum - sched_closed_expected(&cfg, 0)) < 1e-9);
}

/* Fleet agents: for spread and aligned timing (drift on), the shards' actions merged are the
 * single fleet's (time, agent) pairs exactly, agent k only in shard k mod N + 1, and the counts
 * add up. */
static void test_fleet_agents(void **state)
{
    (void)state;
    enum sched_timing timing[] = {SCHED_SPREAD, SCHED_ALIGNED};
    for (size_t w = 0; w < 2; w++) {
        sched_fleet_cfg_t cfg = {.agents = 37,
                                 .period_ns = 2 * S,
                                 .timing = timing[w],
                                 .drift = 0.1,
                                 .join_ns = 3 * S,
                                 .duration_ns = 20 * S,
                                 .realtime0_ns = 1700000000123456789,
                                 .seed = 9};
        sched_fleet_t *f;
        assert_int_equal(sched_fleet_new(&cfg, &f), 0);
        int64_t t, *one = malloc(4096 * sizeof(int64_t));
        int a;
        size_t n1 = 0;
        while (sched_fleet_next(f, &t, &a))
            one[n1++] = t * 64 + a; /* (time, agent) in one sortable number */
        sched_fleet_free(f);
        for (int n = 2; n <= 5; n++) {
            int64_t *all = malloc(4096 * sizeof(int64_t));
            size_t na = 0;
            int64_t count = 0;
            for (int i = 1; i <= n; i++) {
                sched_fleet_cfg_t c = cfg;
                c.shard = (sched_shard_t){i, n};
                assert_int_equal(sched_fleet_new(&c, &f), 0);
                double e = sched_fleet_expected(f, 0, cfg.duration_ns);
                size_t before = na;
                while (sched_fleet_next(f, &t, &a)) {
                    assert_int_equal(a % n, i - 1);
                    all[na++] = t * 64 + a;
                }
                assert_true(fabs(e - (double)(na - before)) < 1e-9);
                count += sched_fleet_count(&c);
                sched_fleet_free(f);
            }
            assert_int_equal(na, n1);
            assert_int_equal(count, (int64_t)n1);
            qsort(all, na, sizeof(int64_t), cmp_i64);
            qsort(one, n1, sizeof(int64_t), cmp_i64);
            for (size_t k = 0; k < n1; k++)
                assert_int_equal(all[k], one[k]);
            free(all);
        }
        free(one);
    }
}

/* FNV-1a 64 test vectors as published with the algorithm (Fowler/Noll/Vo, "FNV test vectors",
 * isthe.com/chongo/tech/comp/fnv; quoted from memory, and recomputed by the python3 one-liner
 * in tests/unit/sched_ref.py's spirit below). */
static void test_hash_vectors(void **state)
{
    (void)state;
    assert_true(sched_shard_hash("") == UINT64_C(0xcbf29ce484222325));
    assert_true(sched_shard_hash("a") == UINT64_C(0xaf63dc4c8601ec8c));
    assert_true(sched_shard_hash("foobar") == UINT64_C(0x85944171f73967e8));
    FILE *p = popen("/usr/bin/python3 -c 'h=0xcbf29ce484222325\n"
                    "for b in b\"gw-0042.site-7\": h=((h^b)*0x100000001b3)%(1<<64)\n"
                    "print(h)'",
                    "r");
    assert_non_null(p);
    unsigned long long want = 0;
    assert_int_equal(fscanf(p, "%llu", &want), 1);
    assert_int_equal(pclose(p), 0);
    assert_true(sched_shard_hash("gw-0042.site-7") == want);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_share_brute_force),     cmocka_unit_test(test_even_union),
        cmocka_unit_test(test_poisson_superposition), cmocka_unit_test(test_closed_clients),
        cmocka_unit_test(test_fleet_agents),          cmocka_unit_test(test_hash_vectors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
