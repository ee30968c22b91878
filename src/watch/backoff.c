/* Reconnect delays: immediate, fixed, exponential and the three jitter variants of "Exponential
 * Backoff and Jitter" (AWS Architecture Blog, 2015, and its backoff_simulator.py). */
#include "squall/watch.h"

void watch_backoff_init(watch_backoff_t *b, enum watch_policy policy, int64_t base_ns,
                        int64_t cap_ns)
{
    b->policy = policy;
    b->base_ns = base_ns > 0 ? base_ns : 0;
    b->cap_ns = cap_ns > b->base_ns ? cap_ns : b->base_ns;
    b->attempt = 0;
    b->sleep_ns = b->base_ns;
}

void watch_backoff_reset(watch_backoff_t *b)
{
    b->attempt = 0;
    b->sleep_ns = b->base_ns;
}

int64_t watch_backoff_expo(int64_t base_ns, int64_t cap_ns, int n)
{
    int64_t v = base_ns;
    for (int i = 0; i < n && v < cap_ns; i++)
        v = v > INT64_MAX / 2 ? INT64_MAX : v * 2;
    return v < cap_ns ? v : cap_ns;
}

/* Uniform in [lo, hi) from rng_unit's (0, 1]. */
static int64_t uniform(rng_t *rng, int64_t lo, int64_t hi)
{
    double u = 1.0 - rng_unit(rng); /* [0, 1) */
    return lo + (int64_t)(u * (double)(hi - lo));
}

int64_t watch_backoff_next(watch_backoff_t *b, rng_t *rng)
{
    int64_t expo = watch_backoff_expo(b->base_ns, b->cap_ns, b->attempt);
    int64_t d = 0;
    switch (b->policy) {
    case WATCH_POLICY_IMMEDIATE:
        d = 0;
        break;
    case WATCH_POLICY_FIXED:
        d = b->base_ns;
        break;
    case WATCH_POLICY_EXPONENTIAL:
        d = expo;
        break;
    case WATCH_POLICY_FULL_JITTER:
        d = uniform(rng, 0, expo);
        break;
    case WATCH_POLICY_EQUAL_JITTER:
        d = expo / 2 + uniform(rng, 0, expo - expo / 2);
        break;
    case WATCH_POLICY_DECORRELATED: {
        int64_t hi = b->sleep_ns > INT64_MAX / 3 ? INT64_MAX : 3 * b->sleep_ns;
        d = uniform(rng, b->base_ns, hi > b->base_ns ? hi : b->base_ns + 1);
        d = d < b->cap_ns ? d : b->cap_ns;
        b->sleep_ns = d;
        break;
    }
    }
    if (b->attempt < 62)
        b->attempt++;
    return d;
}
