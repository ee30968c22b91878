/* The statistics squall profile decides with: the Rayleigh test of phases, the index of
 * dispersion of counts and the chi-square distribution function it needs. */
#include <math.h>

#include "squall/profile.h"
#include "squall/sync.h"

void prof_rayleigh(const double *theta, size_t n, prof_rayleigh_t *out)
{
    double c = 0, s = 0;
    for (size_t i = 0; i < n; i++) {
        c += cos(theta[i]);
        s += sin(theta[i]);
    }
    out->n = n;
    if (n == 0) {
        *out = (prof_rayleigh_t){.p = 1};
        return;
    }
    double rn = hypot(c, s); /* n R̄ */
    out->r_bar = fmin(1, rn / (double)n);
    out->z = rn * rn / (double)n;
    out->p = sync_rayleigh_p(n, out->r_bar);
    double m = atan2(s, c);
    out->mean = m < 0 ? m + 2 * M_PI : m;
}

/* P(a, x) by its series, for x < a + 1 (Abramowitz & Stegun 6.5.29). */
static double gamma_series(double a, double x)
{
    double term = 1 / a, sum = term;
    for (int k = 1; k < 10000; k++) {
        term *= x / (a + k);
        sum += term;
        if (fabs(term) < fabs(sum) * 1e-15)
            break;
    }
    return sum * exp(-x + a * log(x) - lgamma(a));
}

/* Q(a, x) = 1 - P(a, x) by its continued fraction (A&S 6.5.31), evaluated with the modified
 * Lentz method, for x >= a + 1. */
static double gamma_cfrac(double a, double x)
{
    const double tiny = 1e-300;
    double b = x + 1 - a, c = 1 / tiny, d = 1 / b, h = d;
    for (int i = 1; i < 10000; i++) {
        double an = -i * (i - a);
        b += 2;
        d = an * d + b;
        d = fabs(d) < tiny ? tiny : d;
        c = b + an / c;
        c = fabs(c) < tiny ? tiny : c;
        d = 1 / d;
        double del = d * c;
        h *= del;
        if (fabs(del - 1) < 1e-15)
            break;
    }
    return exp(-x + a * log(x) - lgamma(a)) * h;
}

double prof_chi2_cdf(double x, double df)
{
    if (!(x > 0) || !(df > 0))
        return 0;
    double a = df / 2, y = x / 2;
    return y < a + 1 ? gamma_series(a, y) : 1 - gamma_cfrac(a, y);
}

void prof_dispersion(const uint32_t *counts, size_t k, prof_dispersion_t *out)
{
    *out = (prof_dispersion_t){.k = k, .p_low = 1, .p_high = 1};
    if (k < 2)
        return;
    double sum = 0;
    for (size_t i = 0; i < k; i++)
        sum += counts[i];
    double mean = sum / (double)k, ss = 0;
    for (size_t i = 0; i < k; i++)
        ss += (counts[i] - mean) * (counts[i] - mean);
    out->mean = mean;
    out->var = ss / (double)(k - 1);
    out->df = (double)(k - 1);
    if (mean <= 0) {
        out->p_low = 0;
        return;
    }
    out->d = out->var / mean;
    out->x2 = ss / mean;
    out->p_low = prof_chi2_cdf(out->x2, out->df);
    out->p_high = 1 - out->p_low;
}
