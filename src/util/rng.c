/* xoshiro256** with splitmix64 seeding; uniform, bounded, exponential and normal variates. */
#include "squall/rng.h"

#include <math.h>

static uint64_t splitmix64(uint64_t *x)
{
    uint64_t z = (*x += UINT64_C(0x9e3779b97f4a7c15));
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}

void rng_seed(rng_t *r, uint64_t seed)
{
    for (int i = 0; i < 4; i++)
        r->s[i] = splitmix64(&seed);
}

static inline uint64_t rotl(uint64_t x, int k)
{
    return (x << k) | (x >> (64 - k));
}

uint64_t rng_next(rng_t *r)
{
    uint64_t *s = r->s;
    uint64_t result = rotl(s[1] * 5, 7) * 9;
    uint64_t t = s[1] << 17;
    s[2] ^= s[0];
    s[3] ^= s[1];
    s[1] ^= s[2];
    s[0] ^= s[3];
    s[2] ^= t;
    s[3] = rotl(s[3], 45);
    return result;
}

double rng_unit(rng_t *r)
{
    /* 53 random bits -> (0, 1]: add one so zero never comes out. */
    return ((double)(rng_next(r) >> 11) + 1.0) * 0x1.0p-53;
}

uint64_t rng_below(rng_t *r, uint64_t n)
{
    /* Rejection of the short top range (Lemire's threshold) removes modulo bias. */
    uint64_t threshold = (0 - n) % n;
    for (;;) {
        uint64_t x = rng_next(r);
        if (x >= threshold)
            return x % n;
    }
}

double rng_exp(rng_t *r, double lambda)
{
    return -log(rng_unit(r)) / lambda;
}

double rng_normal(rng_t *r)
{
    double u1 = rng_unit(r), u2 = rng_unit(r);
    return sqrt(-2.0 * log(u1)) * cos(2.0 * M_PI * u2);
}
