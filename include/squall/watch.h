/* Long-lived watch streams: framing of a streamed body into events, the fields squall reads from
 * an event, reconnect delays, and a stream's lifecycle as a state machine.
 *
 * Nothing here does I/O, reads a clock or touches libuv: the run glue (src/source/watches.c) feeds
 * bytes in, asks what to do when a stream ends, and does it. That keeps every rule here testable
 * with plain byte strings.
 *
 * Glossary.
 *   framing    how a body is cut into events: NDJSON (ndjson-spec 1.0: one JSON text per line,
 *              LF or CRLF, empty lines ignored), SSE (WHATWG HTML "Server-sent events": fields,
 *              a blank line dispatches) or raw (every slice the engine hands over is one event).
 *   version    the resume point: the value of the class's version key in an event (NDJSON),
 *              or the SSE `id` field. A reconnect resumes from the last version seen.
 *   stamp      the writer's CLOCK_REALTIME ns in an event (the class's stamp key); a watcher
 *              measures propagation latency as now - stamp.
 *   too old    the answer (status set in the plan, 410 by default) meaning the resume point has
 *              left the server's history: the client re-lists, then watches from the list's
 *              version.
 *   backoff    the wait before a reconnect: immediate, fixed, exponential, or the jitter
 *              variants of "Exponential Backoff and Jitter" (AWS Architecture Blog, 2015).
 * Slices reach the framer at arbitrary boundaries (libcurl de-chunks and re-slices): events are
 * framed by content only. */
#ifndef SQUALL_WATCH_H
#define SQUALL_WATCH_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/rng.h"

/* The configuration the caller (the watches source) fills from its plan: the module knows no
 * plan type, as sched does not. */
enum watch_framing { WATCH_FRAME_NDJSON, WATCH_FRAME_SSE, WATCH_FRAME_RAW };
enum watch_policy {
    WATCH_POLICY_IMMEDIATE,
    WATCH_POLICY_FIXED,
    WATCH_POLICY_EXPONENTIAL,
    WATCH_POLICY_FULL_JITTER,
    WATCH_POLICY_EQUAL_JITTER,
    WATCH_POLICY_DECORRELATED
};

/* ---- framing ----------------------------------------------------------------------------- */

/* One framed event. Pointers are valid only during the callback. For NDJSON, data is the line
 * without its terminator; for SSE, the joined data lines (LF between them, no trailing LF), id
 * the event's id field (or the last one seen on the stream, as the spec's "last event ID
 * buffer"), type the event field ("message" when absent); for raw, data is the slice. */
typedef struct {
    const char *data;
    size_t len;
    const char *id; /* SSE only, else NULL */
    size_t id_len;
    const char *type; /* SSE only, else NULL */
    size_t type_len;
} watch_event_t;

typedef void (*watch_event_cb)(void *user, const watch_event_t *ev);

/* Framer counters since init. */
typedef struct {
    int64_t events;   /* events dispatched */
    int64_t bytes;    /* bytes fed */
    int64_t oversize; /* events (lines) longer than max_event: skipped whole, never dispatched */
    int64_t retry_ms; /* SSE: the last valid `retry` field, -1 if none */
} watch_framer_stats_t;

typedef struct {
    enum watch_framing framing;
    watch_event_cb on_event;
    void *user;
    size_t max_event;
    char *line; /* the current, unfinished line */
    size_t line_len, line_cap;
    bool skipping; /* the current line passed max_event: drop it up to its end */
    bool after_cr; /* SSE: the last byte was CR (a following LF belongs to it) */
    char *data;    /* SSE: the data buffer of the event being built */
    size_t data_len, data_cap;
    bool has_data; /* SSE: a data field was seen since the last dispatch */
    char id[256];  /* SSE: last event ID buffer */
    size_t id_len;
    char type[64]; /* SSE: event type buffer */
    size_t type_len;
    watch_framer_stats_t st;
} watch_framer_t;

/* Sets up a framer (caller-owned memory). max_event bounds one event's bytes (0 = 1 MiB): a
 * longer line or SSE event is skipped and counted, so a hostile stream cannot grow memory. */
void watch_framer_init(watch_framer_t *f, enum watch_framing framing, size_t max_event,
                       watch_event_cb on_event, void *user);
/* Feeds a slice; calls on_event for every event completed by it, in order. Returns 0 or
 * SQ_ENOMEM (the framer is then reset to the start of the next line). */
int watch_framer_feed(watch_framer_t *f, const char *data, size_t len);
/* The body ended. NDJSON: a last line without its LF is dispatched when it is not empty
 * (ndjson-spec: the final newline is optional in practice; counted like any line). SSE: an
 * unfinished event is discarded (WHATWG: "an event cut off at EOF is discarded"). Then the
 * framer is reset for a new stream, keeping the SSE last event ID. */
void watch_framer_end(watch_framer_t *f);
/* Frees the framer's buffers. */
void watch_framer_close(watch_framer_t *f);

/* ---- fields of an event -------------------------------------------------------------------- */

#define WATCH_VERSION_MAX 63 /* bytes of a version kept as a resume point */

typedef struct {
    bool has_version;
    char version[64]; /* as text, for the resume query; numbers printed in decimal */
    bool version_numeric;
    uint64_t version_num;
    bool has_stamp;
    int64_t stamp_ns;
    bool is_error; /* a JSON object with "type":"error" (the server ends the stream) */
} watch_fields_t;

/* Reads the version key and the stamp key (either may be NULL) from a JSON event text: each key
 * is looked up at the top level, then inside a member named "object" (the embedded target's
 * event shape {"path", "version", "object"}). A version may be a non-negative integer or a
 * string; a stamp an integer (ns). Returns 0, or SQ_EPARSE when the text is not JSON (f is then
 * all false). */
int watch_event_fields(const char *data, size_t len, const char *version_key, const char *stamp_key,
                       watch_fields_t *f);

/* ---- reconnect delays -------------------------------------------------------------------------
 */

/* Formulas ("Exponential Backoff and Jitter", AWS Architecture Blog, 2015), n = attempts since
 * the last success, expo(n) = min(cap, base * 2^n):
 *   immediate     0
 *   fixed         base
 *   exponential   expo(n)
 *   full jitter   U(0, expo(n))
 *   equal jitter  expo(n)/2 + U(0, expo(n)/2)
 *   decorrelated  sleep = min(cap, U(base, 3 * sleep)), sleep starting at base. */
typedef struct {
    enum watch_policy policy;
    int64_t base_ns, cap_ns;
    int attempt;      /* n */
    int64_t sleep_ns; /* decorrelated: the previous sleep */
} watch_backoff_t;

void watch_backoff_init(watch_backoff_t *b, enum watch_policy policy, int64_t base_ns,
                        int64_t cap_ns);
/* The next delay in ns (advancing n); random draws come from rng. */
int64_t watch_backoff_next(watch_backoff_t *b, rng_t *rng);
/* A stream opened and delivered: the next failure starts again at n = 0. */
void watch_backoff_reset(watch_backoff_t *b);
/* expo(n) = min(cap, base * 2^n), without overflow. */
int64_t watch_backoff_expo(int64_t base_ns, int64_t cap_ns, int n);

/* ---- a stream's lifecycle ------------------------------------------------------------------- */

enum watch_state {
    WATCH_IDLE,      /* not opened yet (spread opening waits here) */
    WATCH_OPENING,   /* the request is sent, no byte of the body yet */
    WATCH_OPEN,      /* body bytes are arriving */
    WATCH_RELISTING, /* too old: the relist request is in flight */
    WATCH_WAITING,   /* ended; waiting for the reconnect delay */
    WATCH_CLOSED,    /* the phase ended: no more requests */
    WATCH__STATES
};

/* What ended a stream, as the glue saw it. */
typedef struct {
    long status;     /* HTTP status, 0 if none */
    bool transport;  /* ended by a transport error or a reset (not a clean end) */
    bool got_events; /* at least one event arrived on this attempt */
} watch_end_t;

/* What the glue must do next. */
enum watch_action {
    WATCH_DO_RECONNECT, /* wait delay_ns, then open from the last version */
    WATCH_DO_RELIST,    /* send the relist request now, then open from its version */
    WATCH_DO_FRESH,     /* too old and no relist class: wait delay_ns, open without a version */
    WATCH_DO_NOTHING,   /* closed */
};

typedef struct {
    enum watch_state state;
    watch_backoff_t backoff;
    int too_old_status;
    bool can_relist;
    bool has_version;
    char version[64];
    uint64_t version_num; /* for duplicate detection when numeric */
    bool version_numeric;
    int64_t opens, drops, reconnects, relists, too_old, duplicates;
    int64_t bad_versions; /* versions refused: not 1..63 visible ASCII bytes (never sent back) */
    void (*on_state)(void *user, enum watch_state from, enum watch_state to); /* may be NULL */
    void *user;
} watch_stream_t;

/* A stream's reconnect policy and too-old handling. */
typedef struct {
    enum watch_policy policy;
    int64_t base_ns, cap_ns;
    int too_old_status; /* the answer meaning "resume point too old", e.g. 410 */
    bool can_relist;    /* a relist request exists to recover from it */
} watch_stream_cfg_t;

/* A stream in WATCH_IDLE with cfg's reconnect policy and too-old handling. */
void watch_stream_init(watch_stream_t *s, const watch_stream_cfg_t *cfg);
/* The one setter of s->state: every change goes through it (and on_state, when set). */
void watch_stream_set(watch_stream_t *s, enum watch_state to);
/* An event's fields arrived: records the version; returns true when the event is a duplicate
 * or out of order (numeric version not above the last one), which the caller counts and skips. */
bool watch_stream_event(watch_stream_t *s, const watch_fields_t *f);
/* The list's version after a relist (NULL when the list had none: the watch opens fresh). */
void watch_stream_relisted(watch_stream_t *s, const char *version);
/* The stream (or its relist) ended: decides the next action and its delay, and moves the state
 * (WAITING or RELISTING, or stays CLOSED). */
enum watch_action watch_stream_ended(watch_stream_t *s, const watch_end_t *end, rng_t *rng,
                                     int64_t *delay_ns);
const char *watch_state_name(enum watch_state st);

#endif
