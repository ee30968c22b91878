/* The weighted class picker: Vose's alias method (Walker 1977; Vose, IEEE TSE 17(9), 1991),
 * O(n) to build, O(1) per pick, each class exactly at its weight's share. */
#include "squall/sched.h"

#include <math.h>
#include <stdlib.h>

#include "squall/err.h"
#include "squall/rng.h"

struct sched_mix {
    size_t n;
    double *prob; /* chance of keeping column i rather than taking its alias */
    size_t *alias;
    rng_t rng;
};

/* Splits scaled weights (mean 1) into columns of height 1: each small column is topped up by
 * a large one, which becomes its alias. */
static int build(sched_mix_t *m, const double *w, double sum)
{
    size_t n = m->n, *small = malloc(n * sizeof(size_t)), *large = malloc(n * sizeof(size_t));
    double *p = malloc(n * sizeof(double));
    if (!small || !large || !p) {
        free(small), free(large), free(p);
        return SQ_ENOMEM;
    }
    size_t ns = 0, nl = 0, big = 0;
    for (size_t i = 0; i < n; i++) {
        p[i] = w[i] * (double)n / sum;
        big = w[i] > w[big] ? i : big;
        if (p[i] < 1)
            small[ns++] = i;
        else
            large[nl++] = i;
    }
    while (ns > 0 && nl > 0) {
        size_t s = small[--ns], l = large[--nl];
        m->prob[s] = p[s];
        m->alias[s] = l;
        p[l] = (p[l] + p[s]) - 1;
        if (p[l] < 1)
            small[ns++] = l;
        else
            large[nl++] = l;
    }
    /* What is left is 1 up to rounding: those columns keep themselves. */
    while (nl > 0)
        m->prob[large[--nl]] = 1;
    while (ns > 0) {
        size_t s = small[--ns];
        m->prob[s] = w[s] > 0 ? 1 : 0;
        m->alias[s] = big; /* a zero weight must never be kept, even after rounding */
    }
    free(small), free(large), free(p);
    return 0;
}

int sched_mix_new(const double *weights, size_t n, uint64_t seed, sched_mix_t **out)
{
    double sum = 0;
    if (!weights || n == 0)
        return SQ_EINVAL;
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(weights[i]) || weights[i] < 0)
            return SQ_EINVAL;
        sum += weights[i];
    }
    if (!(sum > 0) || !isfinite(sum))
        return SQ_EINVAL;
    sched_mix_t *m = calloc(1, sizeof(*m));
    if (!m || !(m->prob = calloc(n, sizeof(double))) || !(m->alias = calloc(n, sizeof(size_t))))
        goto nomem;
    m->n = n;
    for (size_t i = 0; i < n; i++)
        m->alias[i] = i;
    if (build(m, weights, sum) < 0)
        goto nomem;
    rng_seed(&m->rng, seed);
    *out = m;
    return 0;
nomem:
    sched_mix_free(m);
    return SQ_ENOMEM;
}

void sched_mix_free(sched_mix_t *m)
{
    if (!m)
        return;
    free(m->prob);
    free(m->alias);
    free(m);
}

size_t sched_mix_pick(sched_mix_t *m)
{
    size_t i = (size_t)rng_below(&m->rng, m->n);
    /* rng_unit is in (0, 1]: keep column i when u <= prob, so prob 1 always keeps it and a
     * zero weight (prob 0) never does. */
    return rng_unit(&m->rng) <= m->prob[i] ? i : m->alias[i];
}
