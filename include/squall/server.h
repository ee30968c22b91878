/* The embedded server: a control-plane-like HTTP server (`squall serve`, which users know as "the
 * embedded target") with fault injection.
 *
 * Concepts. The *store* holds JSON documents at paths under /v1/ (e.g.
 * /v1/sites/north/gateways/gw-17); an object's parent path is its *collection*. One global
 * *version* counter increases with every write and each object carries the version of its last
 * write. Every write becomes an *event* (create, update, delete) kept in a bounded *history*
 * window, from which *watch streams* (chunked NDJSON) resume after a given version. *Faults*
 * (added latency, error rate, stall window, dropping watches, an in-flight limit) apply to
 * every request under /v1/ and are set by flags or at run time through /admin/faults.
 *
 * The server runs on the caller's libuv loop (libmicrohttpd in external-epoll mode, its epoll
 * descriptor polled by one uv_poll_t). Everything happens on the loop's thread.
 * Glossary: "in flight" = a /v1/ request received and not yet fully answered, watches excluded;
 * "stall" = a window in which no /v1/ request is answered (they are held until it ends). */
#ifndef SQUALL_SERVER_H
#define SQUALL_SERVER_H

#include <stdbool.h>
#include <stdint.h>
#include <uv.h>

#include "squall/out.h"

/* Added latency: none, a fixed delay, uniform in [a, b], or exponential with mean a. */
enum server_delay_kind {
    SERVER_DELAY_NONE,
    SERVER_DELAY_FIXED,
    SERVER_DELAY_UNIFORM,
    SERVER_DELAY_EXP
};

/* A fault configuration: a small value struct. Times are nanoseconds; "at" times are relative
 * to the moment the configuration is applied (server start for flags, the POST for admin). */
typedef struct {
    enum server_delay_kind delay_kind;
    int64_t delay_a_ns, delay_b_ns;
    double fail_rate;       /* in [0, 1]: fraction of /v1/ requests answered fail_status */
    int fail_status;        /* 503 or 429 */
    int retry_after_s;      /* Retry-After on injected errors and on over-limit 429s */
    int64_t stall_at_ns;    /* stall window start, -1 = none */
    int64_t stall_for_ns;   /* stall window length */
    int64_t fail_at_ns;     /* error window start, -1 = none: every /v1/ request processed in */
    int64_t fail_for_ns;    /* [fail_at, fail_at + fail_for) is answered fail_status */
    int64_t drop_at_ns;     /* drop every open watch once at this time, -1 = never */
    int max_inflight;       /* 0 = unlimited */
    bool over_limit_reject; /* above max_inflight: true = answer 429, false = queue */
} server_faults_t;

typedef struct {
    const char *host;        /* a numeric IPv4 or IPv6 address */
    int port;                /* 0 = any free port (see server_port) */
    long long body_limit;    /* bytes; larger request bodies get 413 */
    int history;             /* events kept for watch resumption */
    long long stream_buffer; /* bytes queued per watch stream before it is closed */
    uint64_t seed;           /* for the random faults */
    const char *access_log;  /* a file the target appends one line per request to, or NULL */
    bool access_log_ndjson;  /* NDJSON lines (profile's default fields); else Common Log Format */
    int idle_timeout_s;      /* a connection idle this long is closed (suspended watch streams
                                never time out: libmicrohttpd's rule); 0 = never */
    server_faults_t faults;
} server_opts_t;

typedef struct server server_t;

/* Defaults: no faults, 1 MiB bodies, 10,000 events of history, 1 MiB per stream, seed 1. */
void server_opts_init(server_opts_t *opts);
void server_faults_init(server_faults_t *f);

/* Reads a duration (a delay, a stall or drop time) with value_parse_duration (squall/value.h),
 * the syntax plans use (`250ms`, `1.5s`, `2m15s`, `1h30m`), up to SERVER_DURATION_MAX_NS, which
 * keeps the server's time arithmetic far from overflowing. Returns 0, SQ_EPARSE when malformed,
 * SQ_ERANGE when negative or above the bound; *ns is left alone on failure. */
int server_duration_parse(const char *s, int64_t *ns);
#define SERVER_DURATION_MAX_NS INT64_C(3600000000000000) /* 1000h */
#define SERVER_DURATION_RANGE  "a duration from 0 to 1000h"

/* Parses a delay spec into f: "none", "fixed:D", "uniform:A..B" (A <= B) or "exp:MEAN", each
 * time a duration as above. Returns 0, or SQ_EPARSE and leaves f alone; SERVER_DELAY_EXPECTS
 * describes the syntax for error messages. */
int server_delay_parse(server_faults_t *f, const char *spec);
#define SERVER_DELAY_EXPECTS                                                                       \
    "one of none, fixed:D, uniform:A..B (A <= B) or exp:MEAN with durations like 50ms"

/* Creates a server on `loop` listening on opts->host:opts->port and starts serving.
 * Returns 0 and sets *out, or a negative code after printing one line to `o`
 * (SQ_EINVAL for a bad address, SQ_EIO when the port cannot be bound, SQ_ENOMEM). */
int server_start(uv_loop_t *loop, const server_opts_t *opts, out_t *o, server_t **out);
/* The port actually bound. */
int server_port(const server_t *t);
/* Ends every stream and connection, closes every libuv handle the server owns and frees it once
 * they are closed; the caller then runs the loop until it drains. `on_stopped` (may be NULL) is
 * called after the last handle closed. */
void server_stop(server_t *t, void (*on_stopped)(void *arg), void *arg);

#endif
