/* Private to src/alog/: the per-line parsers, the scratch area they write strings into, and the
 * time and validation helpers they share. */
#ifndef SQUALL_ALOG_INT_H
#define SQUALL_ALOG_INT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/alog.h"

#define ALOG_CLIENT_MAX 256 /* client identity bytes kept before encoding */

/* What a parser needs besides the line: a scratch area for the record's strings (sized so that
 * a line of ALOG_MAX_LINE bytes always fits, percent-encoding included), the reason a line was
 * refused, and a one-entry cache of the last CLF time text (most lines share their second). */
typedef struct {
    char *s;
    size_t cap, len;
    char why[200];
    char clf_text[32];
    int64_t clf_ns;
} alog_parse_t;

#define ALOG_SCRATCH (4 * ALOG_MAX_LINE + 4 * ALOG_CLIENT_MAX + 64)

/* Parsers: 0 and *rec filled (but for rec->line), or -1 with p->why set. */
int alog_parse_clf(alog_parse_t *p, const char *line, size_t n, bool combined, alog_record_t *rec);
int alog_parse_ndjson(alog_parse_t *p, const alog_config_t *cfg, const char *line, size_t n,
                      alog_record_t *rec);

/* Sets p->why to "what (expected ..., got 'TEXT')" with TEXT escaped and cut short; returns -1. */
int alog_why(alog_parse_t *p, const char *what, const char *expected, const char *text, size_t n);
/* Escapes n bytes for a message (\xhh for anything not printable), at most max input bytes,
 * adding "..." when cut. Returns dst. */
char *alog_escape(char *dst, size_t len, const char *s, size_t n, size_t max);

/* Scratch strings: the normalised path / client / a plain copy, NUL-terminated. NULL when the
 * text is refused (p->why set) or does not fit. */
const char *alog_put_path(alog_parse_t *p, const char *s, size_t n);
const char *alog_put_method(alog_parse_t *p, const char *s, size_t n);
const char *alog_put_client(alog_parse_t *p, const char *s, size_t n);
char *alog_put_raw(alog_parse_t *p, const char *s, size_t n);
/* n + 1 bytes of scratch (the caller writes the NUL), NULL when they do not fit. */
char *alog_reserve(alog_parse_t *p, size_t n);

/* Times. CLF: exactly "10/Oct/2000:13:55:36 -0700" (26 bytes). RFC 3339 date-time (§5.6), with
 * 'T', 't' or a space between date and time; res gets 10^(9 - fraction digits) ns. Decimal unix
 * time in units of `unit_ns` nanoseconds, exact to 1 ns (exponent forms through strtod). 0 or -1.
 */
int alog_time_clf(const char *s, size_t n, int64_t *ns);
int alog_time_rfc3339(const char *s, size_t n, int64_t *ns, int64_t *res);
int alog_decimal(const char *s, size_t n, int64_t unit_ns, int64_t *ns, int64_t *res);
/* Unit of a unix time by the number of digits before the point (see enum alog_time_kind). */
int64_t alog_auto_unit(const char *s, size_t n);
/* Days from 1970-01-01 to a proleptic Gregorian date (H. Hinnant, "chrono-Compatible Low-Level
 * Date Algorithms", days_from_civil). */
int64_t alog_days_from_civil(int64_t y, unsigned m, unsigned d);

#endif
