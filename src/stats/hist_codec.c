/* The compact text form of a histogram (format in include/squall/hist.h): configuration and
 * tallies in decimal, then the non-empty buckets as base64 of (gap, count) varints. */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <openssl/evp.h>

#include "hist_int.h"
#include "squall/err.h"

#define CODEC_MAGIC "sqh1"

/* Appends v as an unsigned LEB128 varint; returns the new length. */
static size_t put_varint(unsigned char *buf, size_t len, uint64_t v)
{
    do {
        unsigned char b = v & 0x7f;
        v >>= 7;
        buf[len++] = (unsigned char)(b | (v ? 0x80 : 0));
    } while (v);
    return len;
}

/* Reads a varint at *pos; false when truncated or longer than 64 bits. */
static bool get_varint(const unsigned char *buf, size_t len, size_t *pos, uint64_t *v)
{
    *v = 0;
    for (int shift = 0; shift < 64; shift += 7) {
        if (*pos >= len)
            return false;
        unsigned char b = buf[(*pos)++];
        if (shift == 63 && (b & 0x7e))
            return false;
        *v |= (uint64_t)(b & 0x7f) << shift;
        if (!(b & 0x80))
            return true;
    }
    return false;
}

int hist_encode(const hist_t *h, char **out)
{
    *out = NULL;
    size_t nbuckets = 0;
    for (size_t i = h->min_index; h->total && i <= h->max_index; i++)
        nbuckets += h->counts[i] != 0;
    /* Two varints of at most 10 bytes per bucket (a gap and a uint32 count need far fewer). */
    unsigned char *raw = malloc(nbuckets * 20 + 1);
    if (!raw)
        return SQ_ENOMEM;
    size_t len = 0;
    int64_t prev = -1;
    for (size_t i = h->min_index; h->total && i <= h->max_index; i++) {
        if (!h->counts[i])
            continue;
        len = put_varint(raw, len, (uint64_t)((int64_t)i - prev - 1));
        len = put_varint(raw, len, h->counts[i]);
        prev = (int64_t)i;
    }
    size_t b64_len = 4 * ((len + 2) / 3);
    char head[160];
    int head_len = snprintf(
        head, sizeof head, CODEC_MAGIC ":%lld:%lld:%d:%lld:%lld:%zu:", (long long)h->lowest,
        (long long)h->highest, h->digits, (long long)h->clamped, (long long)h->overflow, nbuckets);
    char *text = malloc((size_t)head_len + b64_len + 1);
    if (!text) {
        free(raw);
        return SQ_ENOMEM;
    }
    memcpy(text, head, (size_t)head_len);
    EVP_EncodeBlock((unsigned char *)text + head_len, raw, (int)len);
    text[(size_t)head_len + b64_len] = '\0';
    free(raw);
    *out = text;
    return 0;
}

/* Parses a non-negative decimal field ending at ':'; advances *s past the colon. */
static bool get_field(const char **s, int64_t *v)
{
    const char *p = *s;
    if (*p < '0' || *p > '9')
        return false;
    errno = 0;
    char *end;
    long long x = strtoll(p, &end, 10);
    if (errno || *end != ':')
        return false;
    *v = x;
    *s = end + 1;
    return true;
}

/* Decodes standard base64 (no whitespace, padded) into a malloc'd buffer. */
static int decode_b64(const char *s, unsigned char **raw, size_t *len)
{
    size_t n = strlen(s);
    if (n % 4 || n > INT32_MAX)
        return SQ_EPARSE;
    size_t pad = 0;
    for (size_t i = 0; i < n; i++) {
        char c = s[i];
        bool alpha = (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') ||
                     c == '+' || c == '/';
        if (c == '=' && i + 2 >= n && (i + 1 == n || s[i + 1] == '='))
            pad++;
        else if (!alpha)
            return SQ_EPARSE;
    }
    *raw = malloc(n / 4 * 3 + 1);
    if (!*raw)
        return SQ_ENOMEM;
    int got = n ? EVP_DecodeBlock(*raw, (const unsigned char *)s, (int)n) : 0;
    if (got < 0 || (size_t)got < pad) {
        free(*raw);
        *raw = NULL;
        return SQ_EPARSE;
    }
    *len = (size_t)got - pad;
    return 0;
}

/* Fills h from the payload's (gap, count) pairs; SQ_EPARSE unless exactly nbuckets fit. */
static int fill_buckets(hist_t *h, const unsigned char *raw, size_t len, int64_t nbuckets)
{
    size_t pos = 0;
    int64_t prev = -1;
    for (int64_t k = 0; k < nbuckets; k++) {
        uint64_t gap, count;
        if (!get_varint(raw, len, &pos, &gap) || !get_varint(raw, len, &pos, &count))
            return SQ_EPARSE;
        if (gap >= h->counts_len || (uint64_t)(prev + 1) + gap >= h->counts_len)
            return SQ_EPARSE;
        if (count == 0 || count > UINT32_MAX)
            return SQ_EPARSE;
        prev = prev + 1 + (int64_t)gap;
        hist_count_at(h, (size_t)prev, (int64_t)count);
    }
    return pos == len ? 0 : SQ_EPARSE;
}

int hist_decode(const char *text, hist_t **out)
{
    *out = NULL;
    if (!text || strncmp(text, CODEC_MAGIC ":", sizeof CODEC_MAGIC) != 0)
        return SQ_EPARSE;
    const char *s = text + sizeof CODEC_MAGIC;
    int64_t lowest, highest, digits, clamped, overflow, nbuckets;
    if (!get_field(&s, &lowest) || !get_field(&s, &highest) || !get_field(&s, &digits) ||
        !get_field(&s, &clamped) || !get_field(&s, &overflow) || !get_field(&s, &nbuckets))
        return SQ_EPARSE;
    hist_t *h;
    if (digits > 5 || hist_new(lowest, highest, (int)digits, &h) != 0)
        return SQ_EPARSE;
    if (nbuckets > (int64_t)h->counts_len) {
        hist_free(h);
        return SQ_EPARSE;
    }
    unsigned char *raw = NULL;
    size_t len = 0;
    int rc = decode_b64(s, &raw, &len);
    if (rc == 0)
        rc = fill_buckets(h, raw, len, nbuckets);
    free(raw);
    if (rc != 0) {
        hist_free(h);
        return rc;
    }
    h->clamped = clamped;
    h->overflow = overflow;
    *out = h;
    return 0;
}
