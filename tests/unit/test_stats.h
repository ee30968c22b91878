/* Small statistics shared by the scheduler tests: Kolmogorov-Smirnov distance against a known
 * distribution, Pearson's chi-square, and a temporary file of samples for the scipy helper.
 * Critical values come from /work/shared NOTES-methods.md "Statistics for tests": KS c(.01) =
 * 1.62762 (Kolmogorov distribution, asymptotic), chi-square df 9 at .01 = 21.666 and df 4 at .01 =
 * 13.277 (NIST/SEMATECH e-Handbook, table of the chi-square distribution). */
#ifndef TEST_SCHED_STATS_H
#define TEST_SCHED_STATS_H

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define KS_C_01   1.62762
#define CHI2_9_01 21.666
#define CHI2_4_01 13.277

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

/* Runs the scipy helper with the given arguments and reads two numbers from its answer. */
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

#endif
