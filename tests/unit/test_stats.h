/* Small statistics shared by the statistical unit tests: Kolmogorov-Smirnov distance against a
 * known distribution, Pearson's chi-square, a temporary file of samples for the scipy helpers,
 * and the critical values they compare with.
 *
 * Critical values at alpha = .01: quantiles of published distributions, written here to the
 * precision their tables print and recomputed by scipy (Debian python3-scipy) in
 * test_critical_values_match_scipy, which every program that uses them runs:
 *   KS_C_01    the 0.99 quantile of the Kolmogorov distribution, the limit law of sqrt(n) D_n for
 *              the one-sample KS statistic (Marsaglia, Tsang & Wang, "Evaluating Kolmogorov's
 *              Distribution", J. Stat. Softw. 8(18), 2003); scipy.stats.kstwobign.ppf(0.99).
 *   CHI2_K_01  the upper .01 critical value of chi-square with K degrees of freedom
 *              (NIST/SEMATECH e-Handbook of Statistical Methods, "Critical Values of the
 *              Chi-Square Distribution", section 1.3.6.7.4); scipy.stats.chi2.ppf(0.99, K). */
#ifndef TEST_STATS_H
#define TEST_STATS_H

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define KS_C_01   1.62762
#define CHI2_2_01 9.210
#define CHI2_4_01 13.277
#define CHI2_9_01 21.666

static inline int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* D = sup |F_n - F| for the sorted sample x (sorted in place); cdf is the hypothesised CDF. */
static inline double ks_distance(double *x, size_t n, double (*cdf)(double, double), double param)
{
    qsort(x, n, sizeof(double), cmp_double);
    double d = 0;
    for (size_t i = 0; i < n; i++) {
        double f = cdf(x[i], param);
        double hi = (double)(i + 1) / (double)n - f, lo = f - (double)i / (double)n;
        d = fmax(d, fmax(hi, lo));
    }
    return d;
}

static inline double exp_cdf(double x, double lambda)
{
    return x <= 0 ? 0 : 1 - exp(-lambda * x);
}

static inline double chi_square(const double *observed, const double *expected, size_t k)
{
    double s = 0;
    for (size_t i = 0; i < k; i++)
        s += (observed[i] - expected[i]) * (observed[i] - expected[i]) / expected[i];
    return s;
}

/* Writes the samples to a fresh temporary file, one per line; returns its path (static). */
static inline const char *write_samples(const double *x, size_t n, const char *fmt)
{
    static char path[256];
    const char *dir = getenv("BUILDDIR") ? getenv("BUILDDIR") : "/tmp";
    snprintf(path, sizeof(path), "%s/sched-samples-XXXXXX", dir);
    int fd = mkstemp(path);
    if (fd < 0)
        return NULL;
    FILE *f = fdopen(fd, "w");
    for (size_t i = 0; f && i < n; i++)
        fprintf(f, fmt, x[i]);
    if (f)
        fclose(f);
    return path;
}

/* Runs the scipy helper of the scheduler tests (tests/unit/sched_ref.py) with the given arguments
 * and reads two numbers from its answer. */
static inline int run_ref(const char *args, double *a, double *b)
{
    char cmd[1024];
    snprintf(cmd, sizeof(cmd), "/usr/bin/python3 %s/tests/unit/sched_ref.py %s", SRCDIR, args);
    FILE *p = popen(cmd, "r");
    if (!p)
        return -1;
    int got = fscanf(p, "%lf %lf", a, b);
    int rc = pclose(p);
    return got == 2 && rc == 0 ? 0 : -1;
}

/* The constants above against scipy's quantiles, to the precision the tables print (5 decimals
 * for KS, 3 for chi-square). A missing python3 or scipy fails here: the reference is required. */
static inline void test_critical_values_match_scipy(void **state)
{
    (void)state;
    FILE *p = popen("/usr/bin/python3 -c 'from scipy.stats import kstwobign, chi2\n"
                    "print(repr(float(kstwobign.ppf(0.99))), *(repr(float(chi2.ppf(0.99, k)))"
                    " for k in (2, 4, 9)))'",
                    "r");
    assert_non_null(p);
    double ks = NAN, c2 = NAN, c4 = NAN, c9 = NAN;
    int got = fscanf(p, "%lf %lf %lf %lf", &ks, &c2, &c4, &c9);
    int rc = pclose(p);
    if (got != 4 || rc != 0)
        fail_msg("/usr/bin/python3 with scipy is required (tools/setup installs python3-scipy)");
    printf("critical values: KS c(.01) %.6f (table %.5f); chi-square .01 df 2 %.4f (%.3f), "
           "df 4 %.4f (%.3f), df 9 %.4f (%.3f)\n",
           ks, KS_C_01, c2, CHI2_2_01, c4, CHI2_4_01, c9, CHI2_9_01);
    assert_true(fabs(ks - KS_C_01) <= 5e-6);
    assert_true(fabs(c2 - CHI2_2_01) <= 5e-4);
    assert_true(fabs(c4 - CHI2_4_01) <= 5e-4);
    assert_true(fabs(c9 - CHI2_9_01) <= 5e-4);
}

#endif
