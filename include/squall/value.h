/* The value syntax every part of squall reads: durations, rates, percentages and plain numbers,
 * parsed strictly (no spaces, no signs on what cannot be negative, no hex, no inf or nan).
 *
 * Plans, command-line options and the embedded server's faults all read values through these
 * functions, so `2m15s` means the same everywhere. Each returns 0 and sets its output, or a
 * negative code (squall/err.h) and leaves the output alone: SQ_EPARSE when the text is
 * malformed, SQ_ERANGE when it is well formed but out of range. The *_EXPECTS texts describe
 * the syntax for error messages ("expected " VALUE_DURATION_EXPECTS). */
#ifndef SQUALL_VALUE_H
#define SQUALL_VALUE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

/* Durations: one or more <number><unit> parts (`250ms`, `1.5s`, `1m30s`), units ns, us (or µs),
 * ms, s, m, h; a bare `0` is zero. Exact in integer nanoseconds. Returns 0, SQ_EPARSE when
 * malformed, SQ_ERANGE when negative, finer than 1 ns or beyond INT64_MAX ns. */
int value_parse_duration(const char *s, int64_t *ns);
/* A duration as a plan writes it, shortest first: whole hours or minutes (`2h`, `5m`), else
 * seconds, milliseconds or microseconds with at most three decimals and a value of at least 1
 * (`1s`, `1.5s`, `250ms`, `12.5us`), else nanoseconds; `0` for zero. value_parse_duration reads
 * every result back to the same ns. Returns buf. */
const char *value_format_duration(int64_t ns, char *buf, size_t cap);
/* Rates: <number>/<unit>, unit s, m (or min) or h: `500/s`, `30/m`, `2/h`; a bare `0` is zero.
 * Returns requests per second; SQ_EPARSE when malformed, SQ_ERANGE above VALUE_RATE_MAX. */
int value_parse_rate(const char *s, double *per_s);
/* Percentages: <number>%, 0% to 100%: `5%` -> 0.05. SQ_EPARSE / SQ_ERANGE as above. */
int value_parse_percent(const char *s, double *fraction);
/* Plain decimal integers (no sign unless negative, no spaces), within [min, max]. */
int value_parse_int(const char *s, int64_t min, int64_t max, int64_t *v);
/* Plain decimal numbers (`1`, `0.25`, `1e3`), finite, within [min, max]. */
int value_parse_number(const char *s, double min, double max, double *v);
/* A listen address: "127.0.0.1:7070", "[::1]:7070" or ":7070" (loopback IPv4) into host (without
 * brackets) and *port (0 to 65535). SQ_EPARSE when malformed. */
int value_parse_listen(const char *s, char *host, size_t cap, int *port);
/* Whether host is an IPv4 address in 127.0.0.0/8 or IPv6 ::1. */
bool value_is_loopback(const char *host);

/* Sizes: a plain count of bytes, or <integer><unit> with unit B, KiB, MiB or GiB (powers of
 * 1024): `65536`, `512KiB`, `32MiB`. SQ_EPARSE / SQ_ERANGE (beyond 1 TiB) as above. */
int value_parse_bytes(const char *s, int64_t *bytes);

/* Text that came from a target or a file and is about to become part of a request: a request
 * path is '/' first, then only visible ASCII (0x21-0x7E) except '#', or bytes >= 0x80, and at
 * most VALUE_PATH_MAX bytes (what reaches the request line as is: never a CR, an LF, a space or
 * another control byte; never a scheme or an authority, which would be read as another host).
 * Returns NULL when it is one, else what is wrong with it (static text, never the input). */
const char *value_path_problem(const char *path);
/* A token (a resume version, an opaque continuation): 1 to max bytes, visible ASCII only. */
int value_token_ok(const char *s, size_t len, size_t max);

#define VALUE_BYTES_EXPECTS    "a size like 65536, 512KiB or 32MiB"
#define VALUE_PATH_MAX         8192
#define VALUE_RATE_MAX         1e9
#define VALUE_DURATION_EXPECTS "a duration like 250ms, 1.5s, 5m or 1h"
#define VALUE_RATE_EXPECTS     "a rate like 500/s, 30/m or 2/h"
#define VALUE_PERCENT_EXPECTS  "a percentage like 5% or 0.1%"

#endif
