/* Human output: every message a user reads goes through one out_t.
 *
 * Two streams: results (the product's answer: a plan summary, a table) and diagnostics
 * (error/warn/info/debug, each line prefixed by its level except info). An out_t writes to
 * FILE pointers, or captures both streams into memory so tests can assert exact text.
 * Glossary: "level" is the most verbose diagnostic level printed (OUT_QUIET prints errors only). */
#ifndef SQUALL_OUT_H
#define SQUALL_OUT_H

#include <stdarg.h>
#include <stdbool.h>
#include <stdio.h>

enum out_level { OUT_ERROR = 0, OUT_WARN = 1, OUT_INFO = 2, OUT_DEBUG = 3 };

typedef struct out out_t;

/* Writes results to `res` and diagnostics to `diag`; NULL on allocation failure. */
out_t *out_new_file(FILE *res, FILE *diag);
/* Captures both streams in memory (see out_captured). */
out_t *out_new_capture(void);
void out_free(out_t *o);

void out_set_level(out_t *o, enum out_level level);
enum out_level out_level(const out_t *o);
/* True when diagnostics go to a terminal (live lines may then be redrawn in place). */
bool out_diag_is_tty(const out_t *o);

/* Results stream; no prefix, no newline added. */
void out_print(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Diagnostics; a newline is added. error and warn lines start with "squall: error: " and
 * "squall: warning: ", unless the text already starts with a location ("FILE:LINE:COL: "), in
 * which case the caller formats the whole line (out_raw). */
void out_error(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void out_warn(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void out_info(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void out_debug(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* A diagnostic line at `level` written exactly as given (a newline is added). */
void out_raw(out_t *o, enum out_level level, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
void out_vraw(out_t *o, enum out_level level, const char *fmt, va_list ap);
/* A live status line: redrawn in place on a terminal, a plain line otherwise; not shown below
 * OUT_INFO. out_live_end() finishes a redrawn line so later output starts on a fresh line. */
void out_live(out_t *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
void out_live_end(out_t *o);

/* For capture objects: everything written so far to each stream ("" if none). */
const char *out_captured_results(const out_t *o);
const char *out_captured_diag(const out_t *o);
/* Number of out_error calls (or OUT_ERROR raw lines) so far. */
int out_errors(const out_t *o);

#endif
