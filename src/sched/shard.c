/* A shard's share of a run: round-robin ownership of numbered items, its seed, and the stable
 * hash replay deals clients by. */
#include "squall/sched.h"

bool sched_shard_valid(sched_shard_t sh)
{
    return (sh.index == 0 && sh.count == 0) || (sh.index >= 1 && sh.index <= sh.count);
}

bool sched_shard_split(sched_shard_t sh)
{
    return sh.count > 1;
}

bool sched_shard_owns(sched_shard_t sh, uint64_t k)
{
    return !sched_shard_split(sh) || k % (uint64_t)sh.count == (uint64_t)(sh.index - 1);
}

/* Items below x that the shard owns: the k = index - 1 + j·N < x. */
static uint64_t owned_below(sched_shard_t sh, uint64_t x)
{
    uint64_t n = (uint64_t)sh.count, first = (uint64_t)(sh.index - 1);
    return x > first ? (x - first + n - 1) / n : 0;
}

uint64_t sched_shard_share(sched_shard_t sh, uint64_t lo, uint64_t hi)
{
    if (hi <= lo)
        return 0;
    if (!sched_shard_split(sh))
        return hi - lo;
    return owned_below(sh, hi) - owned_below(sh, lo);
}

uint64_t sched_shard_seed(uint64_t run_seed, sched_shard_t sh)
{
    return sched_shard_split(sh) ? sched_seed(run_seed, UINT32_MAX, (uint32_t)sh.index) : run_seed;
}

uint64_t sched_shard_hash(const char *s)
{
    /* FNV-1a, 64-bit (Fowler, Noll, Vo; the IETF draft-eastlake-fnv constants). */
    uint64_t h = UINT64_C(0xcbf29ce484222325);
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * UINT64_C(0x100000001b3);
    return h;
}
