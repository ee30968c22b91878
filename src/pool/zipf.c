/* Zipf-distributed ranks by rejection-inversion (Hörmann and Derflinger, ACM TOMACS 6(3), 1996):
 * invert the integral H of the hat function h(x) = x^-s, round to the nearest rank, and accept
 * it by a cheap test that almost always passes, so any n costs the same and needs no table. */
#include <math.h>

#include "squall/pool.h"

/* log1p(x) / x and expm1(x) / x, with their Taylor series near 0 where the quotients lose
 * precision (the paper's helper functions). */
static double helper1(double x)
{
    return fabs(x) > 1e-8 ? log1p(x) / x : 1 - x * (0.5 - x * (1.0 / 3 - 0.25 * x));
}

static double helper2(double x)
{
    return fabs(x) > 1e-8 ? expm1(x) / x : 1 + x * 0.5 * (1 + x / 3 * (1 + 0.25 * x));
}

/* H(x) = (x^(1-s) - 1) / (1 - s), which is log(x) at s = 1. */
static double h_integral(double x, double s)
{
    double lx = log(x);
    return helper2((1 - s) * lx) * lx;
}

static double h(double x, double s)
{
    return exp(-s * log(x));
}

static double h_integral_inverse(double x, double s)
{
    double t = x * (1 - s);
    if (t < -1)
        t = -1; /* rounding can step past the domain's edge */
    return exp(helper1(t) * x);
}

uint64_t pool_zipf_rank(rng_t *rng, double s, uint64_t n)
{
    if (n <= 1)
        return 1;
    double hx1 = h_integral(1.5, s) - 1;
    double hn = h_integral((double)n + 0.5, s);
    double cut = 2 - h_integral_inverse(h_integral(2.5, s) - h(2, s), s);
    uint64_t k = 1;
    /* A round is accepted with high probability (the paper bounds the expected number of
     * rounds by a small constant; from memory); 1000 rounds only bound the loop. */
    for (int round = 0; round < 1000; round++) {
        double u = hn + (1 - rng_unit(rng)) * (hx1 - hn);
        double x = h_integral_inverse(u, s);
        double kx = floor(x + 0.5);
        k = kx < 1 ? 1 : kx > (double)n ? n : (uint64_t)kx;
        if ((double)k - x <= cut || u >= h_integral((double)k + 0.5, s) - h((double)k, s))
            return k;
    }
    return k;
}
