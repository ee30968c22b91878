/* The profile's smallest shared helpers, below every other file of it: the FNV-1a hash of keys
 * and shapes, and the span of the log in seconds. */
#include "prof_int.h"

#define NS INT64_C(1000000000)

/* FNV-1a, 64 bits, continuing from h (0 starts afresh). */
uint64_t prof_hash(const void *s, size_t n, uint64_t h)
{
    const unsigned char *b = s;
    h = h ? h : UINT64_C(0xcbf29ce484222325);
    for (size_t i = 0; i < n; i++)
        h = (h ^ b[i]) * UINT64_C(0x100000001b3);
    return h;
}

/* The phase's duration in whole seconds. With a fine resolution the traffic spans first to
 * last start plus one resolution; with 1 s resolution the first and last seconds are only
 * partly covered, so first to last second, itself, is the unbiased length. */
int64_t prof_span_s(const prof_t *p)
{
    int64_t ns = p->t1 - p->t0 + (p->res < NS ? p->res : 0);
    int64_t s = (ns + NS / 2) / NS;
    return s < 1 ? 1 : s;
}
