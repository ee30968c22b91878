/* The Mann-Whitney U test (Mann & Whitney, "On a test of whether one of two random variables is
 * stochastically larger than the other", Ann. Math. Statist. 18(1), 1947), two-sided, with the
 * normal approximation, the tie correction of the variance and a continuity correction of 1/2:
 * the same arithmetic as scipy.stats.mannwhitneyu(method="asymptotic", use_continuity=True),
 * which tests/unit/test_compare.c checks it against. */
#include <math.h>
#include <stdlib.h>

#include "squall/err.h"
#include "squall/report.h"

typedef struct {
    double v;
    int from_x;
} obs_t;

static int by_value(const void *a, const void *b)
{
    double x = ((const obs_t *)a)->v, y = ((const obs_t *)b)->v;
    return (x > y) - (x < y);
}

/* Sum of the midranks of x's values, and the tie term sum(t^3 - t) over groups of ties. */
static void rank_sums(obs_t *all, size_t n, double *r_x, double *ties)
{
    *r_x = *ties = 0;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && all[j].v == all[i].v)
            j++;
        double t = (double)(j - i), mid = ((double)i + 1 + (double)j) / 2; /* ranks i+1..j */
        for (size_t k = i; k < j; k++)
            *r_x += all[k].from_x ? mid : 0;
        *ties += t * t * t - t;
        i = j;
    }
}

int report_mann_whitney(const double *x, size_t nx, const double *y, size_t ny, double *u,
                        double *z, double *p)
{
    *u = *z = 0;
    *p = 1;
    if (nx == 0 || ny == 0)
        return 0;
    size_t n = nx + ny;
    obs_t *all = malloc(n * sizeof(*all));
    if (!all)
        return SQ_ENOMEM;
    for (size_t i = 0; i < nx; i++)
        all[i] = (obs_t){x[i], 1};
    for (size_t i = 0; i < ny; i++)
        all[nx + i] = (obs_t){y[i], 0};
    qsort(all, n, sizeof(*all), by_value);
    double r_x, ties;
    rank_sums(all, n, &r_x, &ties);
    free(all);
    double fx = (double)nx, fy = (double)ny, fn = (double)n;
    *u = r_x - fx * (fx + 1) / 2;
    double mu = fx * fy / 2;
    double var = fx * fy / 12 * ((fn + 1) - ties / (fn * (fn - 1)));
    if (var <= 0)
        return 0; /* every value tied: no evidence of a difference */
    double dev = fabs(*u - mu) - 0.5;
    *z = (*u >= mu ? dev : -dev) / sqrt(var);
    *p = fmin(1, erfc(dev / sqrt(var) / sqrt(2)));
    return 0;
}
