/* Pools of existing objects: what a run may pick for its gets, updates and deletes.
 *
 * A pool holds the paths (and, when the answer gave one, the versions) of objects that exist on
 * the target: one pool per creating request class. Adding a path already present only updates
 * its version; removing moves the last object into the freed slot, so every operation is O(1)
 * on average (an open-addressing hash from path to slot sits beside the array).
 * Picks: uniform over the slots, or Zipf-skewed by rank, where rank 1 is slot 0 (the oldest
 * object, unless deletes have moved objects into freed slots).
 * Glossary: "slot" = an index 0 .. pool_count() - 1; it changes when an object is removed. */
#ifndef SQUALL_POOL_H
#define SQUALL_POOL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/rng.h"

typedef struct pool pool_t;

/* An empty pool; SQ_ENOMEM. */
int pool_new(pool_t **out);
void pool_free(pool_t *p); /* NULL is allowed */

size_t pool_count(const pool_t *p);
/* Copies path. Returns 0, SQ_EEXISTS when it was already there (its version is then updated),
 * SQ_EINVAL for an empty path, SQ_ENOMEM. */
int pool_add(pool_t *p, const char *path, uint64_t version);
/* Returns 0, or SQ_ENOTFOUND when the path is not in the pool. */
int pool_remove(pool_t *p, const char *path);
bool pool_contains(const pool_t *p, const char *path);
/* The slot holding path, or -1. */
long pool_slot(const pool_t *p, const char *path);

/* The object in a slot (slot < pool_count()); the path stays valid until it is removed. */
const char *pool_path(const pool_t *p, size_t slot);
uint64_t pool_version(const pool_t *p, size_t slot);

/* A uniform slot; the pool must not be empty. */
size_t pool_pick(const pool_t *p, rng_t *rng);
/* A slot drawn by Zipf(s) rank over the pool's n objects: P(rank k) = k^-s / H(n, s), s > 0.
 * The pool must not be empty. */
size_t pool_pick_zipf(const pool_t *p, rng_t *rng, double s);

/* Zipf(s) on {1, ..., n} (s > 0, n >= 1) by rejection-inversion: W. Hörmann and G. Derflinger,
 * "Rejection-inversion to generate variates from monotone discrete distributions", ACM TOMACS
 * 6(3), 1996. Constant expected time for any n; needs no table. */
uint64_t pool_zipf_rank(rng_t *rng, double s, uint64_t n);

#endif
