/* The histogram's layout, shared by hist.c and hist_codec.c only (the public type is opaque). */
#ifndef SQUALL_STATS_HIST_INT_H
#define SQUALL_STATS_HIST_INT_H

#include "squall/hist.h"

struct hist {
    int64_t lowest, highest; /* as given to hist_new */
    int digits;
    int unit_magnitude;       /* floor(log2(lowest)) */
    int half_magnitude;       /* log2(sub_bucket_half) */
    int32_t sub_bucket_count; /* 2^ceil(log2(2 * 10^digits)) */
    int32_t sub_bucket_half;
    int64_t sub_bucket_mask;
    int bucket_count;
    size_t counts_len;
    int64_t total, clamped, overflow;
    size_t min_index, max_index; /* of non-empty buckets; min_index = counts_len when empty */
    uint32_t counts[];           /* counts_len entries, in the same allocation */
};

/* Index of the bucket counting v (0 <= v <= the largest trackable value). */
size_t hist_index_of(const hist_t *h, int64_t v);
/* Lowest value counted at index. */
int64_t hist_value_of(const hist_t *h, size_t index);
/* Adds n (>= 1) at index, or tallies overflow when the bucket would exceed UINT32_MAX. */
void hist_count_at(hist_t *h, size_t index, int64_t n);

#endif
