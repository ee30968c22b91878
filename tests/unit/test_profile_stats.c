/* Unit tests for the statistics squall profile decides with (src/profile/stats.c), against numpy
 * and scipy through tests/unit/profile_ref.py: the Rayleigh test (scipy.stats.directional_stats
 * for R̄ and the mean direction; Zar's p approximation written from the book), the index of
 * dispersion (numpy's unbiased variance; scipy.stats.chi2.cdf), and the chi-square distribution
 * function itself. Fixed seeds: the decisions below hold for these samples. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "pyref.h"

#include "squall/profile.h"
#include "squall/rng.h"

#define N_ANGLE_CASES 6
#define N_COUNT_CASES 4

static void close_to(double got, double want, double rel, double abs_tol)
{
    if (!(fabs(got - want) <= fmax(abs_tol, rel * fabs(want)))) {
        fprintf(stderr, "got %.17g, want %.17g\n", got, want);
        fail();
    }
}

/* Runs profile_ref.py on `input` (one case a line) and returns its output lines. */
static char *reference(const char *input)
{
    return pyref_run("profile_ref.py", input);
}

/* Angle cases: uniform (300, 50), aligned within milliseconds of a 10 s period (300), a wide
 * normal spread of 2 rad (20), a tight cluster (10), and two opposite clusters (100), which the
 * Rayleigh test cannot tell from uniform (Mardia & Jupp 2000, 6.3: it has power against
 * unimodal alternatives only). */
static size_t angles(int k, rng_t *g, double *a)
{
    static const size_t n[N_ANGLE_CASES] = {300, 50, 300, 20, 10, 100};
    for (size_t i = 0; i < n[k]; i++) {
        double u = 2 * M_PI * (rng_unit(g) - 0.5);
        a[i] = k <= 1   ? u + M_PI
               : k == 2 ? 2 * M_PI * 0.0015 * rng_normal(g) + 1.0
               : k == 3 ? 2.0 * rng_normal(g) + 2.0
               : k == 4 ? 0.3 * rng_normal(g) + 5.0
                        : (i % 2 ? M_PI : 0) + 0.05 * rng_normal(g);
        a[i] = fmod(a[i] + 4 * M_PI, 2 * M_PI);
    }
    return n[k];
}

static void test_rayleigh_against_scipy(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 17);
    static double a[N_ANGLE_CASES][300];
    size_t n[N_ANGLE_CASES];
    char *in = malloc(1 << 16);
    size_t o = 0;
    for (int k = 0; k < N_ANGLE_CASES; k++) {
        n[k] = angles(k, &g, a[k]);
        o += (size_t)sprintf(in + o, "rayleigh");
        for (size_t i = 0; i < n[k]; i++)
            o += (size_t)sprintf(in + o, " %.17g", a[k][i]);
        in[o++] = '\n';
    }
    in[o] = '\0';
    char *ref = reference(in), *line = ref;
    for (int k = 0; k < N_ANGLE_CASES; k++) {
        double rbar, mean, z, p;
        assert_int_equal(sscanf(line, "%lf %lf %lf %lf", &rbar, &mean, &z, &p), 4);
        line = strchr(line, '\n') + 1;
        prof_rayleigh_t r;
        prof_rayleigh(a[k], n[k], &r);
        assert_int_equal(r.n, n[k]);
        close_to(r.r_bar, rbar, 1e-12, 1e-12);
        if (rbar > 0.05)
            close_to(r.mean, mean, 1e-9, 1e-9);
        close_to(r.z, z, 1e-12, 1e-12);
        close_to(r.p, p, 1e-9, 1e-300);
        /* The decision squall profile takes at its default alpha, 0.001. */
        bool aligned = r.p < 0.001;
        if (aligned != (k == 2 || k == 4))
            fprintf(stderr, "case %d: R %.4f p %.3g\n", k, r.r_bar, r.p);
        assert_true(aligned == (k == 2 || k == 4));
    }
    free(in);
}

/* Counts per interval: Poisson (mean 50, and 0.8), even (50 or 51 each, as a rate of 50.5/s
 * gives), and overdispersed (a Poisson mean that switches between 20 and 80). */
static size_t counts(int k, rng_t *g, uint32_t *c)
{
    size_t n = 60;
    for (size_t i = 0; i < n; i++) {
        double lambda = k == 0 ? 50 : k == 1 ? 0.8 : k == 3 ? (i % 7 < 3 ? 20 : 80) : 0;
        if (k == 2) {
            c[i] = 50 + (uint32_t)(i % 2);
            continue;
        }
        c[i] = 0;
        for (double t = rng_exp(g, lambda); t < 1; t += rng_exp(g, lambda))
            c[i]++;
    }
    return n;
}

static void test_dispersion_against_scipy(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 23);
    uint32_t c[N_COUNT_CASES][60];
    size_t n[N_COUNT_CASES];
    char in[1 << 14];
    size_t o = 0;
    for (int k = 0; k < N_COUNT_CASES; k++) {
        n[k] = counts(k, &g, c[k]);
        o += (size_t)sprintf(in + o, "dispersion");
        for (size_t i = 0; i < n[k]; i++)
            o += (size_t)sprintf(in + o, " %u", c[k][i]);
        in[o++] = '\n';
    }
    in[o] = '\0';
    char *line = reference(in);
    for (int k = 0; k < N_COUNT_CASES; k++) {
        double d, x2, df, plow;
        assert_int_equal(sscanf(line, "%lf %lf %lf %lf", &d, &x2, &df, &plow), 4);
        line = strchr(line, '\n') + 1;
        prof_dispersion_t r;
        prof_dispersion(c[k], n[k], &r);
        close_to(r.d, d, 1e-12, 1e-15);
        close_to(r.x2, x2, 1e-12, 1e-12);
        close_to(r.df, df, 0, 0);
        close_to(r.p_low, plow, 1e-9, 1e-15);
        /* Even arrivals are too regular for Poisson; Poisson ones are not; bursts are burstier. */
        assert_true((r.p_low < 0.001) == (k == 2));
        assert_true((r.p_high < 0.001) == (k == 3));
    }
}

static void test_chi2_cdf_against_scipy(void **state)
{
    (void)state;
    static const double xs[] = {0.01, 0.5, 1, 3, 5, 29.7, 59, 100, 250, 500, 1200};
    static const double dfs[] = {1, 2, 3, 5, 10, 59, 100, 1000};
    char in[1 << 14];
    size_t o = 0;
    for (size_t i = 0; i < sizeof xs / sizeof xs[0]; i++)
        for (size_t j = 0; j < sizeof dfs / sizeof dfs[0]; j++)
            o += (size_t)sprintf(in + o, "chi2 %.17g %.17g\n", xs[i], dfs[j]);
    char *line = reference(in);
    for (size_t i = 0; i < sizeof xs / sizeof xs[0]; i++)
        for (size_t j = 0; j < sizeof dfs / sizeof dfs[0]; j++) {
            double want;
            assert_int_equal(sscanf(line, "%lf", &want), 1);
            line = strchr(line, '\n') + 1;
            close_to(prof_chi2_cdf(xs[i], dfs[j]), want, 1e-9, 1e-14);
        }
    assert_true(prof_chi2_cdf(0, 3) == 0);
    assert_true(prof_chi2_cdf(-1, 3) == 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_rayleigh_against_scipy),
        cmocka_unit_test(test_dispersion_against_scipy),
        cmocka_unit_test(test_chi2_cdf_against_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
