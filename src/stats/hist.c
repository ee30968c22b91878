/* HDR histograms: bucket layout, O(1) recording, percentiles, mean and merge.
 * The index arithmetic is HdrHistogram_c's (src/hdr_histogram.c: hdr_calculate_bucket_config,
 * get_bucket_index, counts_index, hdr_value_at_percentile); the text encoding lives in
 * hist_codec.c. */
#include "squall/hist.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "hist_int.h"
#include "squall/err.h"

/* Smallest m with 2^m >= x, for x >= 1. */
static int ceil_log2(int64_t x)
{
    int m = 0;
    while ((INT64_C(1) << m) < x)
        m++;
    return m;
}

/* Number of doublings of (sub_bucket_count << unit) needed to exceed `highest`. */
static int buckets_to_cover(int64_t highest, int32_t sub_bucket_count, int unit)
{
    int64_t smallest_untrackable = (int64_t)sub_bucket_count << unit;
    int needed = 1;
    while (smallest_untrackable <= highest) {
        if (smallest_untrackable > INT64_MAX / 2)
            return needed + 1;
        smallest_untrackable <<= 1;
        needed++;
    }
    return needed;
}

int hist_new(int64_t lowest, int64_t highest, int digits, hist_t **out)
{
    *out = NULL;
    if (lowest < 1 || highest < 2 * lowest || digits < 1 || digits > 5)
        return SQ_EINVAL;
    int64_t single_unit = 2;
    for (int i = 0; i < digits; i++)
        single_unit *= 10;
    int half_mag = ceil_log2(single_unit) - 1;
    int unit = 63 - __builtin_clzll((unsigned long long)lowest);
    if (unit + half_mag > 61)
        return SQ_EINVAL;
    int32_t sub_count = INT32_C(1) << (half_mag + 1);
    int buckets = buckets_to_cover(highest, sub_count, unit);
    size_t len = (size_t)(buckets + 1) * (size_t)(sub_count / 2);
    hist_t *h = calloc(1, sizeof(*h) + len * sizeof(h->counts[0]));
    if (!h)
        return SQ_ENOMEM;
    h->lowest = lowest;
    h->highest = highest;
    h->digits = digits;
    h->unit_magnitude = unit;
    h->half_magnitude = half_mag;
    h->sub_bucket_count = sub_count;
    h->sub_bucket_half = sub_count / 2;
    h->sub_bucket_mask = ((int64_t)sub_count - 1) << unit;
    h->bucket_count = buckets;
    h->counts_len = len;
    hist_reset(h);
    *out = h;
    return 0;
}

int hist_new_ns(hist_t **out)
{
    return hist_new(HIST_NS_LOWEST, HIST_NS_HIGHEST, HIST_NS_DIGITS, out);
}

void hist_free(hist_t *h)
{
    free(h);
}

/* Only the buckets between the lowest and highest ever counted can be non-zero (every count goes
 * through hist_count_at), so a histogram reused once a second clears a few cache lines, not its
 * whole 96 KiB. */
void hist_reset(hist_t *h)
{
    if (h->min_index <= h->max_index && h->min_index < h->counts_len)
        memset(&h->counts[h->min_index], 0,
               (h->max_index - h->min_index + 1) * sizeof(h->counts[0]));
    h->total = h->clamped = h->overflow = 0;
    h->min_index = h->counts_len;
    h->max_index = 0;
}

static int bucket_of(const hist_t *h, int64_t v)
{
    int pow2ceiling = 64 - __builtin_clzll((unsigned long long)(v | h->sub_bucket_mask));
    return pow2ceiling - h->unit_magnitude - (h->half_magnitude + 1);
}

size_t hist_index_of(const hist_t *h, int64_t v)
{
    int bucket = bucket_of(h, v);
    int32_t sub = (int32_t)(v >> (bucket + h->unit_magnitude));
    return ((size_t)(bucket + 1) << h->half_magnitude) + (size_t)(sub - h->sub_bucket_half);
}

int64_t hist_value_of(const hist_t *h, size_t index)
{
    int bucket = (int)(index >> h->half_magnitude) - 1;
    int64_t sub = (int64_t)(index & (size_t)(h->sub_bucket_half - 1)) + h->sub_bucket_half;
    if (bucket < 0) {
        sub -= h->sub_bucket_half;
        bucket = 0;
    }
    return sub << (bucket + h->unit_magnitude);
}

/* Width of the bucket at `index` (bucket 0's lower half shares bucket 0's width). */
static int64_t width_of(const hist_t *h, size_t index)
{
    int bucket = (int)(index >> h->half_magnitude) - 1;
    return INT64_C(1) << ((bucket < 0 ? 0 : bucket) + h->unit_magnitude);
}

void hist_count_at(hist_t *h, size_t index, int64_t n)
{
    if ((uint64_t)h->counts[index] + (uint64_t)n > UINT32_MAX) {
        h->overflow += n;
        return;
    }
    h->counts[index] += (uint32_t)n;
    h->total += n;
    if (index < h->min_index)
        h->min_index = index;
    if (index > h->max_index)
        h->max_index = index;
}

void hist_record_n(hist_t *h, int64_t value, int64_t n)
{
    if (n <= 0)
        return;
    if (value < h->lowest) {
        value = h->lowest;
    } else if (value > h->highest) {
        value = h->highest;
        h->clamped += n;
    }
    hist_count_at(h, hist_index_of(h, value), n);
}

void hist_record(hist_t *h, int64_t value)
{
    hist_record_n(h, value, 1);
}

static bool same_config(const hist_t *a, const hist_t *b)
{
    return a->lowest == b->lowest && a->highest == b->highest && a->digits == b->digits;
}

int hist_merge(hist_t *dst, const hist_t *src)
{
    if (!same_config(dst, src))
        return SQ_EMISMATCH;
    if (src->total == 0 && src->clamped == 0 && src->overflow == 0)
        return 0;
    /* Check first so that a refused merge leaves dst untouched. */
    for (size_t i = src->min_index; i <= src->max_index && src->total; i++)
        if ((uint64_t)dst->counts[i] + src->counts[i] > UINT32_MAX)
            return SQ_ERANGE;
    for (size_t i = src->min_index; i <= src->max_index && src->total; i++)
        if (src->counts[i])
            hist_count_at(dst, i, src->counts[i]);
    dst->clamped += src->clamped;
    dst->overflow += src->overflow;
    return 0;
}

bool hist_equal(const hist_t *a, const hist_t *b)
{
    if (!same_config(a, b) || a->total != b->total)
        return false;
    return memcmp(a->counts, b->counts, a->counts_len * sizeof(a->counts[0])) == 0;
}

int64_t hist_count(const hist_t *h)
{
    return h->total;
}

int64_t hist_clamped(const hist_t *h)
{
    return h->clamped;
}

int64_t hist_overflow(const hist_t *h)
{
    return h->overflow;
}

int64_t hist_min(const hist_t *h)
{
    return h->total ? hist_value_of(h, h->min_index) : 0;
}

int64_t hist_max(const hist_t *h)
{
    return h->total ? hist_value_of(h, h->max_index) + width_of(h, h->max_index) - 1 : 0;
}

double hist_mean(const hist_t *h)
{
    if (!h->total)
        return 0.0;
    double sum = 0.0;
    for (size_t i = h->min_index; i <= h->max_index; i++)
        if (h->counts[i])
            sum += (double)h->counts[i] *
                   (double)(hist_value_of(h, i) + width_of(h, i) / 2); /* bucket middle */
    return sum / (double)h->total;
}

double hist_stddev(const hist_t *h)
{
    if (!h->total)
        return 0.0;
    double mean = hist_mean(h), sq = 0.0;
    for (size_t i = h->min_index; i <= h->max_index; i++) {
        if (!h->counts[i])
            continue;
        double d = (double)(hist_value_of(h, i) + width_of(h, i) / 2) - mean;
        sq += d * d * (double)h->counts[i];
    }
    return sqrt(sq / (double)h->total);
}

int64_t hist_value_at(const hist_t *h, double p)
{
    if (!h->total)
        return 0;
    if (p > 100.0)
        p = 100.0;
    if (p < 0.0)
        p = 0.0;
    int64_t target = (int64_t)(p / 100.0 * (double)h->total + 0.5);
    if (target < 1)
        target = 1;
    int64_t seen = 0;
    for (size_t i = h->min_index; i <= h->max_index; i++) {
        seen += h->counts[i];
        if (seen >= target)
            return hist_value_of(h, i) + width_of(h, i) - 1;
    }
    return hist_max(h);
}

int64_t hist_lowest_equiv(const hist_t *h, int64_t value)
{
    if (value < 0)
        value = 0;
    return hist_value_of(h, hist_index_of(h, value));
}

int64_t hist_highest_equiv(const hist_t *h, int64_t value)
{
    if (value < 0)
        value = 0;
    size_t i = hist_index_of(h, value);
    return hist_value_of(h, i) + width_of(h, i) - 1;
}

int64_t hist_lowest(const hist_t *h)
{
    return h->lowest;
}

int64_t hist_highest(const hist_t *h)
{
    return h->highest;
}

int hist_digits(const hist_t *h)
{
    return h->digits;
}

size_t hist_counts_len(const hist_t *h)
{
    return h->counts_len;
}

int hist_bucket_count(const hist_t *h)
{
    return h->bucket_count;
}

int hist_sub_bucket_count(const hist_t *h)
{
    return h->sub_bucket_count;
}

size_t hist_memory(const hist_t *h)
{
    return sizeof(*h) + h->counts_len * sizeof(h->counts[0]);
}

void hist_iter_init(hist_iter_t *it, const hist_t *h)
{
    it->h = h;
    it->index = h->total ? h->min_index : h->counts_len;
    it->lo = it->hi = it->count = 0;
}

bool hist_iter_next(hist_iter_t *it)
{
    const hist_t *h = it->h;
    while (it->index < h->counts_len && it->index <= h->max_index) {
        size_t i = it->index++;
        if (h->counts[i]) {
            it->lo = hist_value_of(h, i);
            it->hi = it->lo + width_of(h, i) - 1;
            it->count = h->counts[i];
            return true;
        }
    }
    return false;
}
