/* A small, fast, seedable pseudo-random generator (xoshiro256**, seeded through splitmix64,
 * after Blackman and Vigna, "Scrambled linear pseudorandom number generators", 2018).
 * Not for secrets. Every random choice squall makes goes through one so a seed replays a run. */
#ifndef SQUALL_RNG_H
#define SQUALL_RNG_H

#include <stdint.h>

typedef struct {
    uint64_t s[4];
} rng_t; /* a small value struct: copy it to fork a stream */

void rng_seed(rng_t *r, uint64_t seed);
uint64_t rng_next(rng_t *r);
/* Uniform in (0, 1]: never 0, so -log(u) is finite. */
double rng_unit(rng_t *r);
/* Uniform integer in [0, n) without modulo bias; n >= 1. */
uint64_t rng_below(rng_t *r, uint64_t n);
/* Exponential variate with rate lambda (> 0): -ln(U) / lambda, U in (0, 1]. */
double rng_exp(rng_t *r, double lambda);
/* Standard normal variate (Box-Muller). */
double rng_normal(rng_t *r);

#endif
