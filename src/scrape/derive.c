/* Derived series of scraped metrics: counters as rates, histogram buckets as per-interval
 * quantiles (the arithmetic Prometheus's rate() and histogram_quantile() document). */
#include <math.h>

#include "squall/scrape.h"

void scrape_rates(const int64_t *t_ms, const double *v, size_t n, double *rate)
{
    for (size_t i = 1; i < n; i++) {
        double dt = (double)(t_ms[i] - t_ms[i - 1]) / 1000.0;
        double inc = v[i] >= v[i - 1] ? v[i] - v[i - 1] : v[i]; /* a reset: counted from 0 */
        rate[i - 1] = dt > 0 ? inc / dt : NAN;
    }
}

double scrape_bucket_quantile(double q, const double *bounds, const double *inc, size_t n)
{
    if (n == 0 || !(q > 0 && q < 1))
        return NAN;
    double total = inc[n - 1];
    if (!(total > 0))
        return NAN;
    double rank = q * total, below = 0;
    for (size_t b = 0; b < n; b++) {
        if (inc[b] < rank)
            continue;
        if (isinf(bounds[b]))
            return b > 0 ? bounds[b - 1] : NAN; /* in the +Inf bucket: the highest finite */
        double lo = b > 0 ? bounds[b - 1] : 0, in = inc[b] - (b > 0 ? inc[b - 1] : 0);
        below = b > 0 ? inc[b - 1] : 0;
        if (b == 0 && bounds[0] <= 0)
            return bounds[0]; /* the lowest bucket's upper bound when it is not above 0 */
        return in > 0 ? lo + (bounds[b] - lo) * (rank - below) / in : bounds[b];
    }
    return NAN;
}
