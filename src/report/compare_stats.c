/* The comparison's tests: the Mann-Whitney U test (exact for small samples, else the normal
 * approximation), Fisher's exact test, and the quantile test of two histograms built on it. */
#include <math.h>
#include <stdlib.h>

#include "squall/err.h"
#include "squall/report.h"

/* ---- Mann-Whitney U ------------------------------------------------------------------------
 * Mann & Whitney, "On a test of whether one of two random variables is stochastically larger
 * than the other", Ann. Math. Statist. 18(1), 1947. Two-sided, with the arithmetic of
 * scipy.stats.mannwhitneyu(method="auto", use_continuity=True) (scipy 1.10): the exact null
 * distribution when a side has at most 8 samples and no value is tied, else the normal
 * approximation with the tie correction of the variance and a continuity correction of 1/2.
 * tests/unit/test_compare.c checks both against scipy. */

#define MW_EXACT_SMALL 8    /* scipy's rule: exact when a side has at most this many */
#define MW_EXACT_LARGE 1000 /* ours: the exact recurrence costs small x large^2 / 2 steps */

typedef struct {
    double v;
    int from_x;
} obs_t;

static int by_value(const void *a, const void *b)
{
    double x = ((const obs_t *)a)->v, y = ((const obs_t *)b)->v;
    return (x > y) - (x < y);
}

/* Sum of the midranks of x's values, the tie term sum(t^3 - t) over groups of ties, and whether
 * any value is tied. */
static bool rank_sums(obs_t *all, size_t n, double *r_x, double *ties)
{
    *r_x = *ties = 0;
    bool tied = false;
    for (size_t i = 0; i < n;) {
        size_t j = i;
        while (j < n && all[j].v == all[i].v)
            j++;
        double t = (double)(j - i), mid = ((double)i + 1 + (double)j) / 2; /* ranks i+1..j */
        for (size_t k = i; k < j; k++)
            *r_x += all[k].from_x ? mid : 0;
        *ties += t * t * t - t;
        tied |= j - i > 1;
        i = j;
    }
    return tied;
}

static bool mw_exact_applies(size_t nx, size_t ny)
{
    size_t small = nx < ny ? nx : ny, large = nx < ny ? ny : nx;
    return small <= MW_EXACT_SMALL && large <= MW_EXACT_LARGE;
}

/* P(U <= kmax) under the null hypothesis for samples of a and b values, from Mann and Whitney's
 * recurrence p[a,b](k) = a/(a+b) p[a-1,b](k-b) + b/(a+b) p[a,b-1](k) (the largest of all values
 * comes from the first sample with probability a/(a+b), and then exceeds all b others). Rows
 * j = 0..a hold p[j,i](0..kmax) as i grows; every step is a convex sum, so nothing cancels.
 * SQ_ENOMEM. */
static int mw_exact_cdf(size_t a, size_t b, size_t kmax, double *cdf)
{
    size_t w = kmax + 1;
    double *p = calloc((a + 1) * w, sizeof(*p));
    if (!p)
        return SQ_ENOMEM;
    for (size_t j = 0; j <= a; j++)
        p[j * w] = 1; /* no values in the second sample: U = 0 */
    for (size_t i = 1; i <= b; i++)
        for (size_t j = 1; j <= a; j++) {
            double *row = p + j * w, *prev = p + (j - 1) * w;
            double fj = (double)j / (double)(j + i), fi = 1 - fj;
            for (size_t k = 0; k <= kmax; k++)
                row[k] = fi * row[k] + (k >= i ? fj * prev[k - i] : 0);
        }
    *cdf = 0;
    for (size_t k = 0; k <= kmax; k++)
        *cdf += p[a * w + k];
    free(p);
    return 0;
}

/* The normal approximation: z of the larger of U and nx ny - U, and its two-sided p. */
static void mw_normal(report_mw_t *r, size_t nx, size_t ny, double ties)
{
    double fx = (double)nx, fy = (double)ny, fn = fx + fy;
    double mu = fx * fy / 2;
    double var = fx * fy / 12 * ((fn + 1) - ties / (fn * (fn - 1)));
    if (var <= 0)
        return; /* every value tied: no evidence of a difference (scipy gives NaN) */
    double dev = fabs(r->u - mu) - 0.5;
    r->z = (r->u >= mu ? dev : -dev) / sqrt(var);
    r->p = fmin(1, erfc(dev / sqrt(var) / sqrt(2)));
}

int report_mann_whitney(const double *x, size_t nx, const double *y, size_t ny, report_mw_t *r)
{
    *r = (report_mw_t){.p = 1};
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
    bool tied = rank_sums(all, n, &r_x, &ties);
    free(all);
    r->u = r_x - (double)nx * ((double)nx + 1) / 2;
    if (tied || !mw_exact_applies(nx, ny)) {
        mw_normal(r, nx, ny, ties);
        return 0;
    }
    r->exact = true;
    double nm = (double)nx * (double)ny, umax = fmax(r->u, nm - r->u);
    size_t small = nx < ny ? nx : ny, large = nx < ny ? ny : nx;
    double cdf; /* P(U <= nm - umax) = P(U >= umax), by symmetry */
    int rc = mw_exact_cdf(small, large, (size_t)(nm - umax), &cdf);
    r->p = rc ? 1 : fmin(1, 2 * cdf);
    return rc;
}

/* log C(n, k). */
static double lchoose(double n, double k)
{
    return lgamma(n + 1) - lgamma(k + 1) - lgamma(n - k + 1);
}

double report_mann_whitney_best(size_t nx, size_t ny)
{
    if (nx == 0 || ny == 0)
        return 1;
    double fx = (double)nx, fy = (double)ny;
    if (mw_exact_applies(nx, ny)) /* one arrangement of C(nx + ny, nx) at each end */
        return fmin(1, 2 * exp(-lchoose(fx + fy, fx)));
    double z = (fx * fy / 2 - 0.5) / sqrt(fx * fy * (fx + fy + 1) / 12);
    return fmin(1, erfc(z / sqrt(2)));
}

/* ---- Fisher's exact test -------------------------------------------------------------------
 * R. A. Fisher, "The logic of inductive inference", J. Royal Statist. Soc. 98(1), 1935: with
 * the table's margins fixed, its top-left count is hypergeometric; the two-sided p sums the
 * probabilities of every table no more probable than the one observed (scipy.stats.fisher_exact,
 * alternative="two-sided"). "No more probable" allows a relative 1e-7 for rounding, as R's
 * fisher.test does (from memory of its source). The probabilities are unimodal in the count,
 * so those tables are the two tails: each is walked from its end inwards. */

typedef struct {
    double r1, r2, c1; /* first row, second row, first column */
} hyper_t;

static double lhyper(const hyper_t *h, int64_t x)
{
    return lchoose(h->r1, (double)x) + lchoose(h->r2, h->c1 - (double)x) -
           lchoose(h->r1 + h->r2, h->c1);
}

double report_fisher_exact(int64_t a, int64_t b, int64_t c, int64_t d)
{
    int64_t r1 = a + b, r2 = c + d, c1 = a + c;
    if (r1 == 0 || r2 == 0 || c1 == 0 || c1 == r1 + r2)
        return 1;
    hyper_t h = {(double)r1, (double)r2, (double)c1};
    int64_t lo = c1 > r2 ? c1 - r2 : 0, hi = r1 < c1 ? r1 : c1;
    double limit = lhyper(&h, a) + log1p(1e-7), sum = 0, l;
    int64_t x = lo, y = hi;
    for (; x <= hi && (l = lhyper(&h, x)) <= limit; x++)
        sum += exp(l);
    for (; y >= x && (l = lhyper(&h, y)) <= limit; y--)
        sum += exp(l);
    return fmin(1, sum);
}

/* ---- the quantile test ---------------------------------------------------------------------
 * The median test (A. M. Mood, "Introduction to the Theory of Statistics", McGraw-Hill, 1950)
 * taken to any percentile q, as W. J. Conover describes it ("Practical Nonparametric
 * Statistics", 3rd ed., Wiley, 1999, section 4.3, from memory): pool both samples, find the
 * pooled q-th percentile, count each sample's values above it and test the 2 x 2 table with
 * Fisher's exact test. It depends only on ranks, so the histograms' buckets (each within 0.1 %
 * of its values) give the same table as the exact values, ties at the percentile counted
 * below it. */

static int64_t rows_above(const hist_t *h, int64_t threshold)
{
    hist_iter_t it;
    int64_t n = 0;
    hist_iter_init(&it, h);
    while (hist_iter_next(&it))
        n += it.lo > threshold ? it.count : 0;
    return n;
}

int report_quantile_test(const hist_t *b, const hist_t *n, double q, double div_b, double div_n,
                         report_qt_t *r)
{
    *r = (report_qt_t){.p = 1};
    hist_t *pool;
    int rc = hist_new(hist_lowest(b), hist_highest(b), hist_digits(b), &pool);
    if (rc)
        return rc;
    if ((rc = hist_merge(pool, b)) == 0 && (rc = hist_merge(pool, n)) == 0) {
        r->threshold = hist_value_at(pool, q);
        int64_t ab = rows_above(b, r->threshold), an = rows_above(n, r->threshold);
        /* Values that share a cause count once: divided by it, rounded half up. */
        r->above_base = (int64_t)floor((double)ab / div_b + 0.5);
        r->below_base = (int64_t)floor((double)(hist_count(b) - ab) / div_b + 0.5);
        r->above_new = (int64_t)floor((double)an / div_n + 0.5);
        r->below_new = (int64_t)floor((double)(hist_count(n) - an) / div_n + 0.5);
        r->p = report_fisher_exact(r->above_base, r->below_base, r->above_new, r->below_new);
    }
    hist_free(pool);
    return rc;
}

double report_quantile_best(int64_t nb, int64_t nn, double q)
{
    int64_t total = nb + nn, rank = (int64_t)(q / 100.0 * (double)total + 0.5);
    rank = rank < 1 ? 1 : rank;
    int64_t k = total - rank; /* values above the pooled percentile */
    if (nb == 0 || nn == 0 || k <= 0)
        return 1;
    double pb = k <= nb ? report_fisher_exact(k, nb - k, 0, nn) : 1;
    double pn = k <= nn ? report_fisher_exact(0, nb, k, nn - k) : 1;
    return fmin(pb, pn);
}
