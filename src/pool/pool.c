/* A pool of object paths: an array of slots for uniform picks and an open-addressing hash
 * (linear probing, backward-shift deletion) from path to slot for adds and removes. */
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/pool.h"

typedef struct {
    char *path;
    uint64_t version;
    uint64_t hash;
} entry_t;

struct pool {
    entry_t *e;
    size_t n, cap;
    uint32_t *table; /* slot + 1; 0 = empty */
    size_t mask;     /* table size - 1 (a power of two, at least twice n) */
};

/* FNV-1a, 64 bits (Fowler, Noll, Vo; the public-domain constants). */
static uint64_t hash_str(const char *s)
{
    uint64_t h = UINT64_C(14695981039346656037);
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * UINT64_C(1099511628211);
    return h;
}

int pool_new(pool_t **out)
{
    pool_t *p = calloc(1, sizeof(*p));
    if (!p)
        return SQ_ENOMEM;
    p->mask = 15;
    p->table = calloc(p->mask + 1, sizeof(*p->table));
    if (!p->table) {
        free(p);
        return SQ_ENOMEM;
    }
    *out = p;
    return 0;
}

void pool_free(pool_t *p)
{
    if (!p)
        return;
    for (size_t i = 0; i < p->n; i++)
        free(p->e[i].path);
    free(p->e);
    free(p->table);
    free(p);
}

size_t pool_count(const pool_t *p)
{
    return p->n;
}

/* The table position holding path, or the empty position where it would go. */
static size_t find_pos(const pool_t *p, const char *path, uint64_t h)
{
    size_t i = (size_t)h & p->mask;
    while (p->table[i]) {
        const entry_t *e = &p->e[p->table[i] - 1];
        if (e->hash == h && strcmp(e->path, path) == 0)
            return i;
        i = (i + 1) & p->mask;
    }
    return i;
}

static int grow_table(pool_t *p)
{
    size_t size = (p->mask + 1) * 2;
    uint32_t *t = calloc(size, sizeof(*t));
    if (!t)
        return SQ_ENOMEM;
    free(p->table);
    p->table = t;
    p->mask = size - 1;
    for (size_t s = 0; s < p->n; s++) {
        size_t i = (size_t)p->e[s].hash & p->mask;
        while (p->table[i])
            i = (i + 1) & p->mask;
        p->table[i] = (uint32_t)(s + 1);
    }
    return 0;
}

int pool_add(pool_t *p, const char *path, uint64_t version)
{
    if (!path || !path[0])
        return SQ_EINVAL;
    uint64_t h = hash_str(path);
    size_t i = find_pos(p, path, h);
    if (p->table[i]) {
        p->e[p->table[i] - 1].version = version;
        return SQ_EEXISTS;
    }
    if (p->n >= UINT32_MAX - 1)
        return SQ_ELIMIT;
    if (p->n == p->cap) {
        size_t cap = p->cap ? p->cap * 2 : 64;
        entry_t *e = realloc(p->e, cap * sizeof(*e));
        if (!e)
            return SQ_ENOMEM;
        p->e = e;
        p->cap = cap;
    }
    char *copy = strdup(path);
    if (!copy)
        return SQ_ENOMEM;
    p->e[p->n] = (entry_t){copy, version, h};
    p->table[i] = (uint32_t)(++p->n);
    if (p->n * 2 > p->mask + 1 && grow_table(p)) {
        /* Keep the pool consistent: undo the add rather than run with a full table. */
        p->table[find_pos(p, path, h)] = 0;
        free(p->e[--p->n].path);
        return SQ_ENOMEM;
    }
    return 0;
}

/* Empties table position i and shifts later members of its probe run back (Knuth, TAOCP
 * vol. 3, 6.4, Algorithm R), so lookups never need tombstones. */
static void table_delete(pool_t *p, size_t i)
{
    size_t j = i;
    for (;;) {
        p->table[i] = 0;
        for (;;) {
            j = (j + 1) & p->mask;
            if (!p->table[j])
                return;
            size_t home = (size_t)p->e[p->table[j] - 1].hash & p->mask;
            /* Move j back to i unless its home lies cyclically in (i, j]. */
            bool stays = i <= j ? (i < home && home <= j) : (i < home || home <= j);
            if (!stays)
                break;
        }
        p->table[i] = p->table[j];
        i = j;
    }
}

int pool_remove(pool_t *p, const char *path)
{
    uint64_t h = hash_str(path);
    size_t i = find_pos(p, path, h);
    if (!p->table[i])
        return SQ_ENOTFOUND;
    size_t slot = p->table[i] - 1, last = p->n - 1;
    free(p->e[slot].path);
    table_delete(p, i);
    if (slot != last) {
        p->e[slot] = p->e[last];
        p->table[find_pos(p, p->e[slot].path, p->e[slot].hash)] = (uint32_t)(slot + 1);
    }
    p->n--;
    return 0;
}

bool pool_contains(const pool_t *p, const char *path)
{
    return p->table[find_pos(p, path, hash_str(path))] != 0;
}

long pool_slot(const pool_t *p, const char *path)
{
    uint32_t v = p->table[find_pos(p, path, hash_str(path))];
    return v ? (long)v - 1 : -1;
}

const char *pool_path(const pool_t *p, size_t slot)
{
    return p->e[slot].path;
}

uint64_t pool_version(const pool_t *p, size_t slot)
{
    return p->e[slot].version;
}

size_t pool_pick(const pool_t *p, rng_t *rng)
{
    return (size_t)rng_below(rng, p->n);
}

size_t pool_pick_zipf(const pool_t *p, rng_t *rng, double s)
{
    return (size_t)(pool_zipf_rank(rng, s, p->n) - 1);
}
