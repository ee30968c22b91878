/* Requests recorded within one tick of a coarse log clock, spread over the tick in their
 * recorded order: evenly, or as sorted uniform points (a Poisson process given its count). */
#include <math.h>

#include "squall/sched.h"

void sched_spread_init(sched_spread_t *s, bool poisson, uint64_t seed)
{
    *s = (sched_spread_t){.poisson = poisson};
    rng_seed(&s->rng, seed);
}

void sched_spread_tick(sched_spread_t *s, int64_t width_ns, uint64_t n)
{
    s->width_ns = width_ns;
    s->n = n;
    s->k = 0;
    s->u = 0;
}

int64_t sched_spread_next(sched_spread_t *s)
{
    if (s->n == 0)
        return 0;
    if (s->k >= s->n)
        return (int64_t)(s->u * (double)s->width_ns);
    if (s->poisson) {
        /* The smallest of the n - k points still to come, given they all lie above u. */
        double v = rng_unit(&s->rng);
        s->u = 1.0 - (1.0 - s->u) * pow(v, 1.0 / (double)(s->n - s->k));
    } else {
        s->u = (double)s->k / (double)s->n;
    }
    s->k++;
    int64_t off = (int64_t)(s->u * (double)s->width_ns);
    return off < s->width_ns ? off : s->width_ns - 1;
}
