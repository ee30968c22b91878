/* Log-bucketed latency histograms after Gil Tene's HDR method.
 *
 * A histogram covers [lowest, highest] with `digits` significant decimal digits: every value is
 * counted in a bucket whose width is at most value / 10^digits (1/1024 of the value for
 * digits = 3), so any percentile read back is within that relative error of the exact sample
 * percentile. Memory is fixed at creation; hist_record never allocates and is O(1).
 * Glossary: "equivalent range" of a value = the bucket [lo, hi] it is counted in; values read back
 * (percentiles, max) are the highest equivalent value of their bucket, min the lowest.
 * Units are the caller's; squall records nanoseconds (HIST_NS_* below). */
#ifndef SQUALL_HIST_H
#define SQUALL_HIST_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/* The range squall uses for every latency: 1 µs discernible up to 1 h, 3 digits. */
#define HIST_NS_LOWEST  INT64_C(1000)
#define HIST_NS_HIGHEST INT64_C(3600000000000)
#define HIST_NS_DIGITS  3

typedef struct hist hist_t;

/* Creates a histogram; lowest >= 1, highest >= 2 * lowest, 1 <= digits <= 5.
 * Returns 0 and sets *out, or SQ_EINVAL / SQ_ENOMEM. */
int hist_new(int64_t lowest, int64_t highest, int digits, hist_t **out);
/* hist_new(HIST_NS_LOWEST, HIST_NS_HIGHEST, HIST_NS_DIGITS, out). */
int hist_new_ns(hist_t **out);
void hist_free(hist_t *h);
void hist_reset(hist_t *h);

/* Counts a value (n times, n >= 1; n <= 0 is ignored). Values below lowest (also negative ones)
 * count as lowest; values above highest count as highest and are also tallied in hist_clamped(),
 * so nothing is silently lost. A bucket holds at most UINT32_MAX; a sample that would overflow
 * its bucket is not counted but tallied in hist_overflow() (see "Memory" below). */
void hist_record(hist_t *h, int64_t value);
void hist_record_n(hist_t *h, int64_t value, int64_t n);

/* Adds src's counts (and clamped/overflow tallies) to dst. Both must have the same lowest,
 * highest and digits: SQ_EMISMATCH otherwise; SQ_ERANGE if a bucket would exceed UINT32_MAX.
 * On error dst is unchanged. */
int hist_merge(hist_t *dst, const hist_t *src);
/* True when both have the same configuration and the same count in every bucket. */
bool hist_equal(const hist_t *a, const hist_t *b);

int64_t hist_count(const hist_t *h); /* samples counted in buckets (clamped ones included) */
int64_t hist_clamped(const hist_t *h);
int64_t hist_overflow(const hist_t *h); /* samples lost to a full bucket; 0 in any real run */
int64_t hist_min(const hist_t *h);      /* 0 when empty */
int64_t hist_max(const hist_t *h);      /* 0 when empty */
double hist_mean(const hist_t *h);      /* weights each bucket by its middle; 0 when empty */
double hist_stddev(const hist_t *h);
/* The value at percentile p in [0, 100]: the highest equivalent value of the first bucket where
 * the cumulative count reaches round(p/100 * count) (at least 1). 0 when empty. */
int64_t hist_value_at(const hist_t *h, double p);

int64_t hist_lowest_equiv(const hist_t *h, int64_t value);
int64_t hist_highest_equiv(const hist_t *h, int64_t value);

/* Configuration, as given to hist_new, and the derived sizes (for tests and encodings). */
int64_t hist_lowest(const hist_t *h);
int64_t hist_highest(const hist_t *h);
int hist_digits(const hist_t *h);
size_t hist_counts_len(const hist_t *h);
int hist_bucket_count(const hist_t *h);
int hist_sub_bucket_count(const hist_t *h);
/* Memory: counts are uint32_t (half of HdrHistogram_c's int64_t) in one allocation with the
 * header. Bytes one histogram holds, header included (98,408 for the HIST_NS_* range on x86-64). */
size_t hist_memory(const hist_t *h);

/* Iteration over non-empty buckets in increasing order:
 *     hist_iter_t it; hist_iter_init(&it, h); while (hist_iter_next(&it)) use(it.lo, it.hi,
 * it.count);
 */
typedef struct {
    const hist_t *h;
    size_t index;
    int64_t lo, hi, count;
} hist_iter_t;
void hist_iter_init(hist_iter_t *it, const hist_t *h);
bool hist_iter_next(hist_iter_t *it);

/* Compact lossless text encoding of a histogram (configuration, tallies and every non-empty
 * bucket) that hist_decode reads back exactly (hist_equal, same clamped and overflow):
 *     "sqh1:LOWEST:HIGHEST:DIGITS:CLAMPED:OVERFLOW:NBUCKETS:PAYLOAD"
 * decimal fields, PAYLOAD = base64 (RFC 4648, via libcrypto) of unsigned LEB128 varints, one
 * pair per non-empty bucket: (index - previous index - 1, count), the first "previous" being -1.
 * *out is malloc'd; the caller frees it. SQ_ENOMEM on allocation failure. */
int hist_encode(const hist_t *h, char **out);
/* SQ_EPARSE on malformed input; on success *out is a new histogram. */
int hist_decode(const char *text, hist_t **out);

#endif
