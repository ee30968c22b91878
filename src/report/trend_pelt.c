/* Change points of one series: PELT (Killick, Fearnhead & Eckley, JASA 107(500), 2012) with the
 * normal mean-change cost, and the noise estimate it is scaled by. */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/trend.h"

static int by_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The median of v[0..n) (sorted in place); n > 0. */
static double median(double *v, size_t n)
{
    qsort(v, n, sizeof(*v), by_double);
    return n % 2 ? v[n / 2] : (v[n / 2 - 1] + v[n / 2]) / 2;
}

double trend_sigma(const double *y, size_t n, double floor)
{
    double *d = malloc((n + 1) * sizeof(*d));
    size_t m = 0;
    double prev = NAN;
    for (size_t i = 0; d && i < n; i++) {
        if (isnan(y[i]))
            continue;
        if (!isnan(prev))
            d[m++] = y[i] - prev;
        prev = y[i];
    }
    double s = 0;
    if (d && m > 0) {
        double med = median(d, m);
        for (size_t i = 0; i < m; i++)
            d[i] = fabs(d[i] - med);
        /* MAD / 0.6745 estimates a normal's sd (Hampel 1974); a difference of two values has
         * sd sqrt(2) sigma, and a change of mean moves only one difference. */
        s = median(d, m) / (0.6744897501960817 * sqrt(2.0));
    }
    free(d);
    return s > floor ? s : floor;
}

double trend_penalty(size_t n)
{
    return n >= 2 ? 2.0 * log((double)n) : 0;
}

/* The segment cost C(y[a..b)) from cumulative sums: the squared deviations from the segment's
 * mean over sigma^2 (twice the negative normal log-likelihood, constants dropped). */
static double cost(const double *s1, const double *s2, size_t a, size_t b, double var)
{
    double sum = s1[b] - s1[a], len = (double)(b - a);
    double c = (s2[b] - s2[a]) - sum * sum / len;
    return (c > 0 ? c : 0) / var;
}

int trend_pelt(const double *y, size_t n, double sigma, double beta, size_t min_len, size_t *starts,
               size_t *n_starts)
{
    *n_starts = 0;
    if (min_len < 1)
        min_len = 1;
    if (n < 2 * min_len)
        return 0;
    double *s1 = calloc(n + 1, sizeof(*s1)), *s2 = calloc(n + 1, sizeof(*s2));
    double *f = calloc(n + 1, sizeof(*f));
    size_t *last = calloc(n + 1, sizeof(*last)), *r = calloc(n + 1, sizeof(*r));
    size_t *dead = calloc(n + 1, sizeof(*dead));
    int rc = SQ_ENOMEM;
    if (!s1 || !s2 || !f || !last || !r || !dead)
        goto out;
    for (size_t i = 0; i < n; i++) {
        s1[i + 1] = s1[i] + y[i];
        s2[i + 1] = s2[i] + y[i] * y[i];
        dead[i] = SIZE_MAX;
    }
    double var = sigma * sigma;
    /* F(0) = -beta; R = {0}. For each t: F(t) = min over tau in R of F(tau) + C(tau, t) + beta.
     * A tau with F(tau) + C(tau, t) > F(t) can never be the best again once t itself is a
     * candidate (the paper's pruning, K = 0 for this cost); with segments of at least min_len,
     * t is a candidate from t + min_len on, so tau is dropped from then. Then t - min_len + 1
     * joins R, to be first used min_len steps later. With min_len = 1 this is exactly the
     * paper's Algorithm 2. */
    f[0] = -beta;
    size_t nr = 1;
    r[0] = 0;
    for (size_t t = min_len; t <= n; t++) {
        double best = INFINITY;
        size_t arg = 0, keep = 0;
        for (size_t k = 0; k < nr; k++)
            if (dead[r[k]] > t)
                r[keep++] = r[k];
        nr = keep;
        for (size_t k = 0; k < nr; k++) {
            double v = f[r[k]] + cost(s1, s2, r[k], t, var) + beta;
            if (v < best) {
                best = v;
                arg = r[k];
            }
        }
        f[t] = best;
        last[t] = arg;
        for (size_t k = 0; k < nr; k++)
            if (f[r[k]] + cost(s1, s2, r[k], t, var) > f[t] && dead[r[k]] > t + min_len)
                dead[r[k]] = t + min_len;
        if (t + 1 >= 2 * min_len && t - min_len + 1 <= n)
            r[nr++] = t - min_len + 1;
    }
    /* Walk back from n through the last change before each end. */
    size_t m = 0;
    for (size_t t = last[n]; t > 0; t = last[t])
        starts[m++] = t;
    for (size_t i = 0; i < m / 2; i++) {
        size_t tmp = starts[i];
        starts[i] = starts[m - 1 - i];
        starts[m - 1 - i] = tmp;
    }
    *n_starts = m;
    rc = 0;
out:
    free(s1);
    free(s2);
    free(f);
    free(last);
    free(r);
    free(dead);
    return rc;
}
