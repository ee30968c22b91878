/* Unit tests for fleet timing: aligned ticks on exact wall-clock multiples, spread phases
 * uniform by chi-square, jitter bounds and uniformity, drift, joins, and the heap's order. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/sched.h"
#include "test_stats.h"

#define S INT64_C(1000000000)

typedef struct {
    int64_t *t;
    int *agent;
    size_t n;
} run_t;

/* Every action of a fleet, checked to come out in (time, agent) order. */
static run_t run_fleet(const sched_fleet_cfg_t *cfg)
{
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(cfg, &f), 0);
    size_t cap = 4096;
    run_t r = {malloc(cap * sizeof(int64_t)), malloc(cap * sizeof(int)), 0};
    int64_t t;
    int a;
    while (sched_fleet_next(f, &t, &a)) {
        if (r.n == cap) {
            cap *= 2;
            r.t = realloc(r.t, cap * sizeof(int64_t));
            r.agent = realloc(r.agent, cap * sizeof(int));
        }
        if (r.n)
            assert_true(t > r.t[r.n - 1] || (t == r.t[r.n - 1] && a > r.agent[r.n - 1]));
        assert_true(t >= 0 && t < cfg->duration_ns && a >= 0 && a < cfg->agents);
        r.t[r.n] = t;
        r.agent[r.n++] = a;
    }
    sched_fleet_free(f);
    assert_int_equal(sched_fleet_count(cfg), (int64_t)r.n);
    return r;
}

static void run_free(run_t *r)
{
    free(r->t);
    free(r->agent);
}

/* The offset to the next multiple of P (arithmetic by hand: 1000 → 1200 for P = 300). */
static void test_align_offset(void **state)
{
    (void)state;
    assert_int_equal(sched_align_offset(1000, 300), 200);
    assert_int_equal(sched_align_offset(900, 300), 0);
    assert_int_equal(sched_align_offset(-100, 300), 100);
}

/* Aligned: 2,000 agents every 10 s over 60 s, phase starting at a wall-clock instant 3.45 s
 * past a multiple of 10 s. Every action lands where realtime0 + t is an exact multiple of P,
 * 2,000 of them per tick, on 6 ticks. Two processes with different phase starts (and so
 * different realtime0) agree on the wall-clock instants. */
static void test_aligned(void **state)
{
    (void)state;
    int64_t rt0 = INT64_C(1764633603450000000) + 123; /* some December 2025 instant */
    sched_fleet_cfg_t cfg = {.agents = 2000,
                             .period_ns = 10 * S,
                             .timing = SCHED_ALIGNED,
                             .duration_ns = 60 * S,
                             .realtime0_ns = rt0,
                             .seed = 1};
    run_t r = run_fleet(&cfg);
    assert_int_equal(r.n, 6 * 2000);
    for (size_t i = 0; i < r.n; i++) {
        assert_int_equal((rt0 + r.t[i]) % cfg.period_ns, 0);
        assert_int_equal(r.agent[i], (int)(i % 2000));
    }
    /* A second process whose phase began 1.7 s later fires at the same wall-clock instants. */
    sched_fleet_cfg_t other = cfg;
    other.realtime0_ns = rt0 + 1700000000;
    run_t q = run_fleet(&other);
    assert_int_equal(q.t[0] + other.realtime0_ns, r.t[0] + rt0);
    printf("aligned: %zu actions, all on wall-clock multiples of 10 s, first at +%.3f s\n", r.n,
           (double)r.t[0] / 1e9);
    run_free(&q);
    run_free(&r);
}

/* Spread: each agent keeps a fixed random phase in [0, P), so one period's actions fall
 * uniformly: chi-square over 10 equal bins, df 9, critical 21.666 at .01 (NIST/SEMATECH). Each
 * agent then repeats exactly every P. An aligned fleet's bins fail the same test. */
static void test_spread(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 2000,
                             .period_ns = 10 * S,
                             .timing = SCHED_SPREAD,
                             .duration_ns = 30 * S,
                             .seed = 5};
    run_t r = run_fleet(&cfg);
    assert_int_equal(r.n, 3 * 2000);
    double obs[10] = {0}, exp_[10];
    int64_t *last = calloc(2000, sizeof(int64_t));
    for (size_t i = 0; i < r.n; i++) {
        if (r.t[i] < cfg.period_ns)
            obs[r.t[i] / S]++; /* one bin per second of the first period */
        else
            assert_int_equal(r.t[i] - last[r.agent[i]], cfg.period_ns);
        last[r.agent[i]] = r.t[i];
    }
    for (int b = 0; b < 10; b++)
        exp_[b] = 200;
    double chi = chi_square(obs, exp_, 10);
    printf("spread: per-second counts of one period X2 %.3f (critical 21.666)\n", chi);
    assert_true(chi < CHI2_9_01);

    cfg.timing = SCHED_ALIGNED;
    run_t a = run_fleet(&cfg);
    double aobs[10] = {0};
    for (size_t i = 0; i < a.n; i++)
        aobs[(a.t[i] % cfg.period_ns) / S]++;
    for (int b = 0; b < 10; b++)
        exp_[b] = (double)a.n / 10;
    assert_true(chi_square(aobs, exp_, 10) > CHI2_9_01);
    free(last);
    run_free(&a);
    run_free(&r);
}

/* Jitter ±20 %: every agent starts at its join time (t = 0 here), and each period lies in
 * [0.8 P, 1.2 P], uniformly: chi-square over 10 bins of the interval, df 9, 21.666. */
static void test_jitter(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 500,
                             .period_ns = S,
                             .timing = SCHED_JITTER,
                             .jitter = 0.2,
                             .duration_ns = 20 * S,
                             .seed = 9};
    run_t r = run_fleet(&cfg);
    int64_t *last = malloc(500 * sizeof(int64_t));
    double obs[10] = {0}, exp_[10], n = 0;
    for (size_t i = 0; i < r.n; i++) {
        int a = r.agent[i];
        if (i < 500) {
            assert_int_equal(r.t[i], 0);
        } else {
            double g = (double)(r.t[i] - last[a]) / (double)cfg.period_ns;
            assert_true(g >= 0.8 - 1e-9 && g <= 1.2 + 1e-9);
            int b = (int)((g - 0.8) / 0.04);
            obs[b > 9 ? 9 : b]++;
            n++;
        }
        last[a] = r.t[i];
    }
    for (int b = 0; b < 10; b++)
        exp_[b] = n / 10;
    double chi = chi_square(obs, exp_, 10);
    printf("jitter 20%%: %zu actions, period ratios in [0.8, 1.2], X2 %.3f (critical 21.666)\n",
           r.n, chi);
    assert_true(chi < CHI2_9_01);
    free(last);
    run_free(&r);
}

/* Drift 1 %: each agent's own period is constant and within P·(1 ± 0.01), and they differ. */
static void test_drift(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 50,
                             .period_ns = S,
                             .timing = SCHED_SPREAD,
                             .drift = 0.01,
                             .duration_ns = 50 * S,
                             .seed = 4};
    run_t r = run_fleet(&cfg);
    int64_t first[50], last[50], count[50] = {0};
    for (size_t i = 0; i < r.n; i++) {
        int a = r.agent[i];
        if (!count[a])
            first[a] = r.t[i];
        last[a] = r.t[i];
        count[a]++;
    }
    double lo = 2, hi = 0;
    for (int a = 0; a < 50; a++) {
        double p = (double)(last[a] - first[a]) / (double)(count[a] - 1) / (double)S;
        assert_true(p >= 0.99 - 1e-9 && p <= 1.01 + 1e-9);
        lo = fmin(lo, p);
        hi = fmax(hi, p);
    }
    printf("drift 1%%: agent periods from %.5f to %.5f s\n", lo, hi);
    assert_true(hi - lo > 0.005); /* 50 draws of U(-1 %, +1 %) spread out (from their range) */
    run_free(&r);
}

/* Joins over 10 s: agent k's first action is at or after k · 10 s / N; for jitter exactly at
 * it, for aligned on the first multiple of P after it. */
static void test_join(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 100,
                             .period_ns = 2 * S,
                             .timing = SCHED_JITTER,
                             .jitter = 0.1,
                             .join_ns = 10 * S,
                             .duration_ns = 30 * S,
                             .seed = 2};
    run_t r = run_fleet(&cfg);
    bool seen[100] = {false};
    for (size_t i = 0; i < r.n; i++) {
        int a = r.agent[i];
        if (!seen[a])
            assert_int_equal(r.t[i], (int64_t)a * 100000000);
        seen[a] = true;
    }
    run_free(&r);
    cfg.timing = SCHED_ALIGNED;
    cfg.realtime0_ns = 500000000; /* multiples of 2 s fall at t = 1.5 s, 3.5 s, ... */
    r = run_fleet(&cfg);
    memset(seen, 0, sizeof(seen));
    for (size_t i = 0; i < r.n; i++) {
        int a = r.agent[i];
        int64_t join = (int64_t)a * 100000000;
        if (!seen[a])
            assert_true(r.t[i] >= join && r.t[i] - join < cfg.period_ns);
        assert_int_equal((r.t[i] + cfg.realtime0_ns) % cfg.period_ns, 0);
        seen[a] = true;
    }
    run_free(&r);
}

/* Leaves over the last 10 s of 30: agent k's last action is before 20 s + k · 10 s / N (first
 * in, first out), and an aligned agent acts on every tick before it leaves, so its count is
 * the number of 2 s multiples below its leave time (the definition; no outside source). */
static void test_leave(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 50,
                             .period_ns = 2 * S,
                             .timing = SCHED_ALIGNED,
                             .leave_ns = 10 * S,
                             .duration_ns = 30 * S,
                             .realtime0_ns = 0,
                             .seed = 3};
    run_t r = run_fleet(&cfg);
    int64_t last[50], count[50] = {0};
    for (int a = 0; a < 50; a++)
        last[a] = -1;
    for (size_t i = 0; i < r.n; i++) {
        last[r.agent[i]] = r.t[i];
        count[r.agent[i]]++;
    }
    for (int a = 0; a < 50; a++) {
        int64_t leave = 20 * S + (int64_t)a * 10 * S / 50;
        assert_true(last[a] < leave);
        assert_int_equal(count[a], (leave + 2 * S - 1) / (2 * S)); /* ticks at 0, 2 s, ... */
    }
    assert_int_equal((int64_t)r.n, sched_fleet_count(&cfg));
    run_free(&r);
    cfg.leave_ns = 31 * S; /* longer than the phase */
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(&cfg, &f), SQ_EINVAL);
}

/* The same seed replays the same fleet; another seed moves the spread phases. */
static void test_fleet_determinism(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {.agents = 200,
                             .period_ns = S,
                             .timing = SCHED_JITTER,
                             .jitter = 0.3,
                             .drift = 0.02,
                             .duration_ns = 5 * S,
                             .seed = 77};
    run_t a = run_fleet(&cfg), b = run_fleet(&cfg);
    assert_int_equal(a.n, b.n);
    assert_memory_equal(a.t, b.t, a.n * sizeof(int64_t));
    assert_memory_equal(a.agent, b.agent, a.n * sizeof(int));
    cfg.seed = 78;
    run_t c = run_fleet(&cfg);
    assert_true(c.n != a.n || memcmp(a.t, c.t, a.n * sizeof(int64_t)) != 0);
    run_free(&a), run_free(&b), run_free(&c);
}

/* due() hands out what is due, bounded by max, and nothing is lost between calls. */
static void test_fleet_due(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = {
        .agents = 300, .period_ns = S, .timing = SCHED_ALIGNED, .duration_ns = 3 * S};
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    int64_t t[128];
    int a[128];
    size_t total = 0, n;
    assert_int_equal(sched_fleet_due(f, -1, t, a, 128), 0);
    while ((n = sched_fleet_due(f, S, t, a, 128)) > 0)
        total += n;
    assert_int_equal(total, 600); /* the ticks at 0 and 1 s */
    int64_t pt;
    int pa;
    assert_true(sched_fleet_peek(f, &pt, &pa));
    assert_int_equal(pt, 2 * S);
    assert_int_equal(pa, 0);
    sched_fleet_free(f);
    sched_fleet_cfg_t bad = cfg;
    bad.jitter = 1.0;
    assert_int_equal(sched_fleet_new(&bad, &f), SQ_EINVAL);
    bad = cfg;
    bad.agents = 0;
    assert_int_equal(sched_fleet_new(&bad, &f), SQ_EINVAL);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_align_offset),
        cmocka_unit_test(test_aligned),
        cmocka_unit_test(test_spread),
        cmocka_unit_test(test_jitter),
        cmocka_unit_test(test_drift),
        cmocka_unit_test(test_join),
        cmocka_unit_test(test_leave),
        cmocka_unit_test(test_fleet_due),
        cmocka_unit_test(test_fleet_determinism),
        cmocka_unit_test(test_critical_values_match_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
