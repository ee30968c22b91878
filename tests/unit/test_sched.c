/* Unit tests for the open-loop scheduler, the class mix and closed-loop clients: counts against
 * the rate integral, Poisson gaps against Exp(λ) (KS, chi-square, scipy), ramps against scipy's
 * root finder, steps, determinism, and think-time sequencing. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/sched.h"
#include "test_stats.h"

#define S INT64_C(1000000000)

/* Collects every start of an open-loop config into a fresh array (*n set). */
static int64_t *collect(const sched_open_cfg_t *cfg, size_t *n)
{
    sched_open_t *s;
    assert_int_equal(sched_open_new(cfg, &s), 0);
    size_t cap = 1024, len = 0;
    int64_t *t = malloc(cap * sizeof(*t));
    int64_t v;
    while (sched_open_next(s, &v)) {
        if (len == cap)
            t = realloc(t, (cap *= 2) * sizeof(*t));
        t[len++] = v;
    }
    assert_int_equal(sched_open_count(s), len);
    sched_open_free(s);
    *n = len;
    return t;
}

static void assert_sorted_in_phase(const int64_t *t, size_t n, int64_t dur)
{
    for (size_t i = 0; i < n; i++) {
        assert_true(t[i] >= 0 && t[i] < dur);
        if (i)
            assert_true(t[i] >= t[i - 1]);
    }
}

/* Even spacing at a constant rate: exactly rate·T starts (±1 when rate·T is fractional), spaced
 * 1/rate apart (within the 1 ns rounding). The expected count is the definition of the rate. */
static void test_constant_even(void **state)
{
    (void)state;
    sched_open_cfg_t cfg = {.shape = SCHED_CONSTANT, .rate = 1000, .duration_ns = 10 * S};
    size_t n;
    int64_t *t = collect(&cfg, &n);
    assert_int_equal(n, 10000);
    assert_int_equal(sched_open_even_count(&cfg), n);
    assert_int_equal(t[0], 0);
    for (size_t i = 1; i < n; i++)
        assert_true(llabs(t[i] - t[i - 1] - 1000000) <= 1);
    free(t);

    cfg.rate = 333.3; /* 333.3 · 7 s = 2333.1 starts */
    cfg.duration_ns = 7 * S;
    t = collect(&cfg, &n);
    assert_true(fabs((double)n - 2333.1) <= 1);
    assert_int_equal(sched_open_even_count(&cfg), n);
    assert_sorted_in_phase(t, n, cfg.duration_ns);
    printf("constant even: 1000/s x 10 s -> 10000 starts; 333.3/s x 7 s -> %zu\n", n);
    free(t);
}

/* Gaps of a constant-rate Poisson schedule, in seconds. */
static double *poisson_gaps(double rate, int64_t dur, uint64_t seed, size_t *n)
{
    sched_open_cfg_t cfg = {.shape = SCHED_CONSTANT,
                            .rate = rate,
                            .duration_ns = dur,
                            .arrivals = SCHED_POISSON,
                            .seed = seed};
    size_t m;
    int64_t *t = collect(&cfg, &m);
    double *g = malloc(m * sizeof(double));
    for (size_t i = 0; i < m; i++)
        g[i] = (double)(t[i] - (i ? t[i - 1] : 0)) / 1e9; /* the first gap is from t = 0 */
    free(t);
    *n = m;
    return g;
}

/* One-sample KS of the intended gaps against Exp(λ) at α = .01 with the asymptotic critical
 * value KS_C_01/√n (the Kolmogorov distribution's 0.99 quantile, test_stats.h), D and its p-value
 * cross-checked with scipy.stats.kstest (Debian python3-scipy) on the same gaps. A wrong λ
 * (1.1λ) must be rejected: the test bites. */
static void test_poisson_ks(void **state)
{
    (void)state;
    double rate = 500;
    size_t n;
    double *g = poisson_gaps(rate, 20 * S, 42, &n);
    /* A Poisson count has variance equal to its mean (common practice: 4 sigma). */
    assert_true(fabs((double)n - 10000) < 4 * sqrt(10000));
    const char *path = write_samples(g, n, "%.17g\n");
    assert_non_null(path);
    double *sorted = malloc(n * sizeof(double));
    memcpy(sorted, g, n * sizeof(double));
    double d = ks_distance(sorted, n, exp_cdf, rate), crit = KS_C_01 / sqrt((double)n);
    double d_wrong = ks_distance(sorted, n, exp_cdf, rate * 1.1);
    char args[512];
    snprintf(args, sizeof(args), "ks %s %.17g", path, rate);
    double d_py, p_py;
    assert_int_equal(run_ref(args, &d_py, &p_py), 0);
    unlink(path);
    printf("poisson KS: n %zu, D %.6f (scipy %.6f, p %.4f), critical %.6f; D at 1.1x rate %.4f\n",
           n, d, d_py, p_py, crit, d_wrong);
    assert_true(d < crit);
    assert_true(fabs(d - d_py) < 1e-9);
    assert_true(p_py > 0.01);
    assert_true(d_wrong > crit);
    free(sorted);
    free(g);
}

/* Chi-square of λ·gap over ten equiprobable Exp(1) bins, df 9, critical 21.666 at .01
 * (NIST/SEMATECH table, test_stats.h). The edges are the Exp(1) deciles, derived here from its
 * CDF F(x) = 1 − e^(−x): F(x_k) = k/10 gives x_k = −ln(1 − k/10), 0.10536 … 2.30259. */
static void test_poisson_chi_square(void **state)
{
    (void)state;
    double edges[9];
    for (int k = 1; k <= 9; k++)
        edges[k - 1] = -log(1.0 - k / 10.0);
    double rate = 2000;
    size_t n;
    double *g = poisson_gaps(rate, 10 * S, 7, &n);
    double obs[10] = {0}, exp_[10];
    for (size_t i = 0; i < n; i++) {
        size_t b = 0;
        while (b < 9 && g[i] * rate > edges[b])
            b++;
        obs[b]++;
    }
    for (int b = 0; b < 10; b++)
        exp_[b] = (double)n / 10;
    double chi = chi_square(obs, exp_, 10);
    printf("poisson chi-square: n %zu, X2 %.3f (critical 21.666)\n", n, chi);
    assert_true(chi < CHI2_9_01);
    free(g);
}

/* An even ramp makes (r0 + r1)/2 · T starts within 1, the k-th at Λ⁻¹(k): checked against the
 * textbook root (-r0 + sqrt(r0² + 2 s k)) / s and against scipy.optimize.brentq (an
 * independent bracketing root finder) on the same times. */
static void check_ramp(double r0, double r1, int64_t dur)
{
    sched_open_cfg_t cfg = {.shape = SCHED_RAMP, .from = r0, .to = r1, .duration_ns = dur};
    size_t n;
    int64_t *t = collect(&cfg, &n);
    double T = (double)dur / 1e9, slope = (r1 - r0) / T;
    assert_true(fabs((double)n - (r0 + r1) / 2 * T) <= 1);
    assert_int_equal(sched_open_even_count(&cfg), n);
    assert_true(fabs(sched_open_lambda(&cfg, dur) - (r0 + r1) / 2 * T) < 1e-6);
    for (size_t k = 0; k < n; k++) {
        double root = (-r0 + sqrt(r0 * r0 + 2 * slope * (double)k)) / slope;
        assert_true(fabs((double)t[k] - root * 1e9) <= 1.0);
    }
    double *d = malloc(n * sizeof(double));
    for (size_t k = 0; k < n; k++)
        d[k] = (double)t[k];
    const char *path = write_samples(d, n, "%.0f\n");
    char args[512];
    snprintf(args, sizeof(args), "ramp %s %.17g %.17g %.17g", path, r0, r1, T);
    double n_py, worst;
    assert_int_equal(run_ref(args, &n_py, &worst), 0);
    unlink(path);
    printf("ramp %g->%g over %g s: %zu starts (scipy %g), max |t - brentq root| %.3f ns\n", r0, r1,
           T, n, n_py, worst);
    assert_true(fabs(n_py - (double)n) < 0.5);
    assert_true(worst <= 1.0);
    free(d);
    free(t);
}

static void test_ramp_even(void **state)
{
    (void)state;
    check_ramp(10, 400, 60 * S);
    check_ramp(400, 10, 60 * S); /* a ramp down: the slope is negative */
    check_ramp(0, 100, 10 * S);  /* from zero: the first start at t = 0 */
}

/* A Poisson ramp is a time-transformed unit Poisson process: Λ(t_k) − Λ(t_(k−1)) are Exp(1), so
 * they pass the same KS test (time-rescaling theorem, e.g. Brown et al., Neural Computation
 * 14(2), 2002, from memory). */
static void test_ramp_poisson(void **state)
{
    (void)state;
    sched_open_cfg_t cfg = {.shape = SCHED_RAMP,
                            .from = 50,
                            .to = 950,
                            .duration_ns = 20 * S,
                            .arrivals = SCHED_POISSON,
                            .seed = 11};
    size_t n;
    int64_t *t = collect(&cfg, &n);
    double expect = sched_open_lambda(&cfg, cfg.duration_ns); /* 10000 */
    assert_true(fabs((double)n - expect) < 4 * sqrt(expect));
    double *u = malloc(n * sizeof(double)), prev = 0;
    for (size_t i = 0; i < n; i++) {
        double l = sched_open_lambda(&cfg, t[i]);
        u[i] = l - prev;
        prev = l;
    }
    double d = ks_distance(u, n, exp_cdf, 1.0), crit = KS_C_01 / sqrt((double)n);
    printf("poisson ramp 50->950/s: n %zu (expected %.0f), rescaled KS D %.5f < %.5f\n", n, expect,
           d, crit);
    assert_true(d < crit);
    free(u);
    free(t);
}

/* Steps: 100/s for 2 s, nothing for 1 s, then 50/s holding for the remaining 7 s. */
static void test_steps(void **state)
{
    (void)state;
    sched_step_t steps[] = {{100, 2 * S}, {0, 1 * S}, {50, 1 * S}};
    sched_open_cfg_t cfg = {
        .shape = SCHED_STEPS, .steps = steps, .n_steps = 3, .duration_ns = 10 * S};
    size_t n;
    int64_t *t = collect(&cfg, &n);
    assert_int_equal(n, 200 + 350);
    assert_int_equal(sched_open_even_count(&cfg), n);
    assert_true(fabs(sched_open_lambda(&cfg, cfg.duration_ns) - 550) < 1e-9);
    size_t in_first = 0, in_gap = 0;
    for (size_t i = 0; i < n; i++) {
        in_first += t[i] < 2 * S;
        in_gap += t[i] >= 2 * S && t[i] < 3 * S;
    }
    assert_int_equal(in_first, 200);
    assert_int_equal(in_gap, 0);
    assert_int_equal(t[200], 3 * S); /* the 50/s step's first start is at its beginning */
    assert_int_equal(t[201] - t[200], 20000000);
    free(t);

    assert_true(sched_open_rate(&cfg, 1999999999) == 100);
    assert_true(sched_open_rate(&cfg, 2 * S) == 0);
    assert_true(sched_open_rate(&cfg, 9 * S) == 50); /* the last step holds */
    assert_true(sched_open_rate(&cfg, 10 * S) == 0); /* the phase is over */
    cfg.duration_ns = 1500000000;                    /* the phase ends inside the first step */
    t = collect(&cfg, &n);
    assert_int_equal(n, 150);
    free(t);
    printf("steps: 100/s 2 s, 0/s 1 s, 50/s held 7 s -> 550 starts, none in the quiet second\n");
}

/* The ramp's intended rate at t is linear from r0 to r1 (the definition of a ramp). */
static void test_rate_at(void **state)
{
    (void)state;
    sched_open_cfg_t cfg = {.shape = SCHED_RAMP, .from = 10, .to = 400, .duration_ns = 60 * S};
    assert_true(fabs(sched_open_rate(&cfg, 0) - 10) < 1e-12);
    assert_true(fabs(sched_open_rate(&cfg, 30 * S) - 205) < 1e-9);
    assert_true(sched_open_rate(&cfg, -1) == 0);
}

/* splitmix64's K-th output for SEED, computed by tests/unit/sched_ref.py from the published
 * constants (Python integers, no code shared with src/sched/). */
static uint64_t splitmix_ref(uint64_t seed, uint64_t k)
{
    char cmd[512];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s/tests/unit/sched_ref.py splitmix %llu %llu",
             SRCDIR, (unsigned long long)seed, (unsigned long long)k);
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    unsigned long long v = 0;
    int got = fscanf(p, "%llu", &v);
    if (pclose(p) != 0 || got != 1)
        fail_msg("sched_ref.py splitmix failed (needs /usr/bin/python3)");
    return (uint64_t)v;
}

/* Derived seeds: sched_seed(run, phase, stream) is the k-th output of a splitmix64 generator
 * seeded with run, k = (phase << 32 | stream) + 1 (src/sched/seed.c), checked against splitmix64
 * recomputed in Python from the published constants (Steele, Lea & Flood, OOPSLA 2014), and
 * against a published check sequence (seed 1234567, quoted from memory in sched_ref.py). Then:
 * reproducible, and distinct across phases and streams (1,000 of them). */
static void test_seeds(void **state)
{
    (void)state;
    /* Rosetta Code's splitmix64 sequence for seed 1234567: phase 0, streams 0, 1, 2. */
    assert_true(sched_seed(1234567, 0, 0) == UINT64_C(6457827717110365317));
    assert_true(sched_seed(1234567, 0, 1) == UINT64_C(3203168211198807973));
    assert_true(sched_seed(1234567, 0, 2) == UINT64_C(9817491932198370423));
    static const struct {
        uint64_t run;
        uint32_t phase, stream;
    } cases[] = {{42, 3, 1}, {0, 0, 0}, {UINT64_MAX, 7, 1003}, {0x5eed, 4294967295u, 12}};
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        uint64_t k = ((uint64_t)cases[i].phase << 32 | cases[i].stream) + 1;
        uint64_t want = splitmix_ref(cases[i].run, k);
        if (sched_seed(cases[i].run, cases[i].phase, cases[i].stream) != want)
            fail_msg("sched_seed(%llu, %u, %u) = %llu, splitmix64 gives %llu",
                     (unsigned long long)cases[i].run, cases[i].phase, cases[i].stream,
                     (unsigned long long)sched_seed(cases[i].run, cases[i].phase, cases[i].stream),
                     (unsigned long long)want);
    }
    assert_int_equal(sched_seed(42, 3, 1), sched_seed(42, 3, 1));
    uint64_t seen[1000];
    for (int i = 0; i < 1000; i++) {
        seen[i] = sched_seed(42, (uint32_t)(i / 10), (uint32_t)(i % 10));
        for (int j = 0; j < i; j++)
            assert_true(seen[j] != seen[i]);
    }
    assert_true(sched_seed(42, 0, 0) != sched_seed(43, 0, 0));
}

/* The same seed gives the same schedule; another seed a different one. */
static void test_determinism(void **state)
{
    (void)state;
    size_t n1, n2, n3;
    double *a = poisson_gaps(300, 5 * S, 99, &n1), *b = poisson_gaps(300, 5 * S, 99, &n2);
    double *c = poisson_gaps(300, 5 * S, 100, &n3);
    assert_int_equal(n1, n2);
    assert_memory_equal(a, b, n1 * sizeof(double));
    assert_true(n1 != n3 || memcmp(a, c, n1 * sizeof(double)) != 0);
    free(a), free(b), free(c);
}

/* peek/due/next agree: due yields exactly the starts at or before now, bounded by max. */
static void test_due_and_peek(void **state)
{
    (void)state;
    sched_open_cfg_t cfg = {.shape = SCHED_CONSTANT, .rate = 100, .duration_ns = 1 * S};
    sched_open_t *s;
    assert_int_equal(sched_open_new(&cfg, &s), 0);
    int64_t out[64], t;
    assert_true(sched_open_peek(s, &t));
    assert_int_equal(t, 0);
    assert_int_equal(sched_open_due(s, 95000000, out, 64), 10); /* 0, 10, ..., 90 ms */
    assert_int_equal(out[9], 90000000);
    assert_true(sched_open_peek(s, &t));
    assert_int_equal(t, 100000000);
    assert_int_equal(sched_open_due(s, 95000000, out, 64), 0);
    assert_int_equal(sched_open_due(s, 10 * S, out, 5), 5);
    assert_int_equal(sched_open_due(s, 10 * S, out, 64), 64);
    assert_int_equal(sched_open_due(s, 10 * S, out, 64), 21);
    assert_int_equal(out[20], 990000000);
    assert_int_equal(sched_open_count(s), 100);
    assert_false(sched_open_peek(s, &t));
    assert_false(sched_open_next(s, &t));
    sched_open_free(s);
}

static void test_invalid(void **state)
{
    (void)state;
    sched_open_t *s;
    sched_open_cfg_t bad[] = {
        {.shape = SCHED_CONSTANT, .rate = 10, .duration_ns = 0},
        {.shape = SCHED_CONSTANT, .rate = -1, .duration_ns = S},
        {.shape = SCHED_CONSTANT, .rate = NAN, .duration_ns = S},
        {.shape = SCHED_RAMP, .from = 1, .to = 2e9, .duration_ns = S},
        {.shape = SCHED_STEPS, .steps = NULL, .n_steps = 0, .duration_ns = S},
    };
    for (size_t i = 0; i < sizeof(bad) / sizeof(bad[0]); i++)
        assert_int_equal(sched_open_new(&bad[i], &s), SQ_EINVAL);
    sched_open_cfg_t zero = {.shape = SCHED_CONSTANT, .rate = 0, .duration_ns = S};
    assert_int_equal(sched_open_even_count(&zero), 0);
}

/* Mix proportions: chi-square of 200,000 picks over weights 50:20:15:10:5, df 4, critical 13.277
 * at .01 (NIST/SEMATECH table); the wrong proportions (equal shares) are rejected; a zero
 * weight is never picked. */
static void test_mix(void **state)
{
    (void)state;
    double w[5] = {50, 20, 15, 10, 5}, obs[5] = {0}, exp_[5], flat[5];
    sched_mix_t *m;
    assert_int_equal(sched_mix_new(w, 5, 3, &m), 0);
    int n = 200000;
    for (int i = 0; i < n; i++)
        obs[sched_mix_pick(m)]++;
    for (int i = 0; i < 5; i++) {
        exp_[i] = n * w[i] / 100;
        flat[i] = n / 5.0;
    }
    double chi = chi_square(obs, exp_, 5), chi_flat = chi_square(obs, flat, 5);
    printf("mix 50:20:15:10:5: X2 %.3f (critical 13.277); against equal shares %.0f\n", chi,
           chi_flat);
    assert_true(chi < CHI2_4_01);
    assert_true(chi_flat > CHI2_4_01);
    sched_mix_free(m);

    double z[3] = {3, 0, 1};
    assert_int_equal(sched_mix_new(z, 3, 5, &m), 0);
    int ones = 0;
    for (int i = 0; i < 10000; i++)
        ones += sched_mix_pick(m) == 1;
    assert_int_equal(ones, 0);
    sched_mix_free(m);
    double none[2] = {0, 0};
    assert_int_equal(sched_mix_new(none, 2, 1, &m), SQ_EINVAL);
}

/* Closed loop, fixed think: 3 clients, 50 ms responses, 100 ms think over 1 s. Each client's
 * intended starts are 0, 150, 300, ..., 900 ms (completion + think), 7 each, which is also the
 * expected-count helper's answer. */
static void test_closed_fixed(void **state)
{
    (void)state;
    sched_closed_cfg_t cfg = {.clients = 3, .think_ns = 100000000, .duration_ns = S};
    sched_closed_t *c;
    assert_int_equal(sched_closed_new(&cfg, &c), 0);
    int64_t now = 0, t, next;
    int client, steps = 0;
    int64_t expect_next[3] = {0, 0, 0};
    while (!sched_closed_finished(c) && steps++ < 1000) {
        while (sched_closed_due(c, now, &client, &t)) {
            assert_int_equal(t, expect_next[client]);
            assert_int_equal(sched_closed_state(c, client), SCHED_CLIENT_BUSY);
            assert_false(sched_closed_complete(c, client + 100, t, NULL));
            bool again = sched_closed_complete(c, client, t + 50000000, &next);
            assert_int_equal(next, t + 150000000);
            assert_int_equal(again, next < S);
            expect_next[client] = next;
        }
        if (!sched_closed_peek(c, &now))
            break;
    }
    assert_true(sched_closed_finished(c));
    for (int i = 0; i < 3; i++) {
        assert_int_equal(sched_closed_issued(c, i), 7);
        assert_int_equal(sched_closed_state(c, i), SCHED_CLIENT_DONE);
    }
    assert_int_equal(sched_closed_total(c), 21);
    assert_true(fabs(sched_closed_expected(&cfg, 50000000) - 21) < 1e-9);
    assert_false(sched_closed_complete(c, 0, 0, NULL)); /* DONE, not BUSY */
    sched_closed_free(c);
    printf("closed loop: 3 clients x 7 requests, starts at completion + 100 ms think\n");
}

/* Exponential think: the think gaps are Exp(1/mean): KS at .01 as for arrivals. A client is not
 * due before its think has passed, and a spread start staggers first starts. */
static void test_closed_exp(void **state)
{
    (void)state;
    double mean_s = 0.01;
    sched_closed_cfg_t cfg = {.clients = 4,
                              .think_ns = 10000000,
                              .think = SCHED_THINK_EXP,
                              .spread_ns = 4000000,
                              .duration_ns = 100 * S,
                              .seed = 8};
    sched_closed_t *c;
    assert_int_equal(sched_closed_new(&cfg, &c), 0);
    int64_t t, next, firsts[4];
    int client;
    for (int i = 0; i < 4; i++) { /* all four busy first, so none comes round again */
        assert_true(sched_closed_due(c, 3 * S, &client, &t));
        assert_int_equal(client, i);
        firsts[client] = t;
    }
    assert_false(sched_closed_due(c, 3 * S, &client, &t));
    for (int i = 0; i < 4; i++)
        sched_closed_complete(c, i, firsts[i], &next); /* zero response time */
    assert_int_equal(firsts[0], 0);
    assert_int_equal(firsts[1], 1000000);
    assert_int_equal(firsts[3], 3000000);
    size_t cap = 40000, n = 0;
    double *gaps = malloc(cap * sizeof(double));
    int64_t last[4];
    memcpy(last, firsts, sizeof(last));
    while (n < cap && sched_closed_peek(c, &t)) {
        assert_false(sched_closed_due(c, t - 1, &client, &next));
        assert_true(sched_closed_due(c, t, &client, &next));
        gaps[n++] = (double)(next - last[client]) / 1e9;
        last[client] = next;
        sched_closed_complete(c, client, next, NULL);
    }
    double d = ks_distance(gaps, n, exp_cdf, 1 / mean_s), crit = KS_C_01 / sqrt((double)n);
    printf("closed loop exp think: %zu gaps, KS D %.5f < %.5f\n", n, d, crit);
    assert_true(d < crit);
    free(gaps);
    sched_closed_free(c);
}

static double unit_cdf(double x, double unused)
{
    (void)unused;
    return x < 0 ? 0 : x > 1 ? 1 : x;
}

/* A log tick of n requests spread as a Poisson process given n: n sorted uniform points. Every
 * tick's offsets are non-decreasing and in [0, width); pooled over 2,000 ticks of 1..9 points
 * they are uniform on the tick (one-sample KS at the 1 % level: Marsaglia, Tsang & Wang 2003).
 * Even spreading puts the k-th of n at exactly k/n of the tick. */
static void test_spread(void **state)
{
    (void)state;
    static double x[20000];
    size_t m = 0;
    sched_spread_t s;
    sched_spread_init(&s, true, 42);
    for (int tick = 0; tick < 2000; tick++) {
        uint64_t n = 1 + (uint64_t)tick % 9;
        sched_spread_tick(&s, 1000000000, n);
        int64_t last = 0;
        for (uint64_t k = 0; k < n; k++) {
            int64_t off = sched_spread_next(&s);
            assert_true(off >= last && off < 1000000000);
            last = off;
            x[m++] = (double)off / 1e9;
        }
    }
    double d = ks_distance(x, m, unit_cdf, 0);
    assert_true(d * sqrt((double)m) < KS_C_01);
    sched_spread_init(&s, false, 42);
    sched_spread_tick(&s, 1000000000, 8);
    for (int k = 0; k < 8; k++)
        assert_int_equal(sched_spread_next(&s), k * 125000000);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_constant_even),
        cmocka_unit_test(test_poisson_ks),
        cmocka_unit_test(test_poisson_chi_square),
        cmocka_unit_test(test_ramp_even),
        cmocka_unit_test(test_ramp_poisson),
        cmocka_unit_test(test_steps),
        cmocka_unit_test(test_determinism),
        cmocka_unit_test(test_rate_at),
        cmocka_unit_test(test_seeds),
        cmocka_unit_test(test_due_and_peek),
        cmocka_unit_test(test_invalid),
        cmocka_unit_test(test_spread),
        cmocka_unit_test(test_mix),
        cmocka_unit_test(test_closed_fixed),
        cmocka_unit_test(test_closed_exp),
        cmocka_unit_test(test_critical_values_match_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
