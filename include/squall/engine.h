/* The request engine: HTTP requests on one libuv loop through libcurl's multi_socket interface.
 *
 * Concepts. A caller submits requests (eng_submit); each one waits in the engine's own FIFO
 * admission queue until libcurl has a free slot for it, is then handed to libcurl ("admitted"),
 * sent on a pooled keep-alive connection, and finished with exactly one call of its on_done
 * callback carrying all its timestamps and its outcome. libcurl is never given more transfers
 * than it can run at once (connections for HTTP/1.1, connections x streams for HTTP/2), so
 * nothing ever waits inside libcurl where it cannot be seen: time spent in our queue is
 * generator-side waiting and is part of the response time (done - intended).
 *
 * Glossary.
 *   intended  the moment the caller meant the request to start (uv_hrtime() base, ns); the
 *             basis of response time, free of coordinated omission.
 *   admitted  the moment the request left our queue and was added to libcurl.
 *   sent      the moment libcurl was about to send it on its connection (PREREQFUNCTION).
 *   done      the moment the engine saw it finished.
 *   opener    (HTTP/2 over http://) a transfer that opens a new pooled connection with prior
 *             knowledge; later transfers reuse it (workaround for libcurl 7.88.1, curl issue
 *             #10634: a reused prior-knowledge connection failed; fixed in 8.0.0).
 *
 * Threading: none. Every function must be called on the loop's thread. Callbacks (on_done,
 * on_data, on_unreachable) run on the loop; on_done and on_unreachable may call eng_submit and
 * eng_stop, on_data may call eng_submit (the request is then admitted after the current
 * libcurl call returns). The engine never prints request headers, bodies or the bearer token. */
#ifndef SQUALL_ENGINE_H
#define SQUALL_ENGINE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <uv.h>

#include "squall/out.h"

typedef struct eng eng_t;

enum eng_http { ENG_HTTP_1_1 = 0, ENG_HTTP_2 = 1 };

/* Outcome of one request. Transport errors are split by kind (mapped from CURLcode).
 * "http-version": HTTP/2 was asked for and the answer came over HTTP/1.x (never counted as a
 * success: the plan's protocol is part of what is measured). */
#define ENG_OUTCOME_MAP(X)                                                                         \
    X(S2XX, "2xx")                                                                                 \
    X(S3XX, "3xx")                                                                                 \
    X(S4XX, "4xx")                                                                                 \
    X(S5XX, "5xx")                                                                                 \
    X(TIMEOUT, "timeout")                                                                          \
    X(REFUSED, "connect-refused")                                                                  \
    X(RESOLVE, "resolve")                                                                          \
    X(TLS, "tls")                                                                                  \
    X(RESET, "reset")                                                                              \
    X(VERSION, "http-version")                                                                     \
    X(OTHER, "transport-other")                                                                    \
    X(BODY, "body-too-large")                                                                      \
    X(CANCELLED, "cancelled")

enum eng_outcome {
#define ENG_OUTCOME_ENUM(name, text) ENG_OUT_##name,
    ENG_OUTCOME_MAP(ENG_OUTCOME_ENUM)
#undef ENG_OUTCOME_ENUM
        ENG_OUT_COUNT
};

/* The outcome's short name as above ("2xx", "timeout", ...); "unknown" when out of range. */
const char *eng_outcome_name(enum eng_outcome o);

typedef struct {
    /* "http://host:port" or "https://host:port" (a path prefix is allowed); copied. */
    const char *base_url;
    enum eng_http http;
    int connections;    /* connection cap, >= 1 */
    int streams;        /* HTTP/2 streams per connection, >= 1 (0 = 100); ignored for 1.1 */
    int64_t timeout_ms; /* default per-request timeout (0 = none) */
    /* A kept body (keep_body) longer than this many bytes ends its request at once with outcome
     * "body-too-large"; 0 = 16 MiB. Streamed bodies (on_data) are the caller's to bound. */
    int64_t max_body;
    /* TLS: files are paths (NULL = libcurl's defaults). Verification is on unless `insecure`;
     * the caller prints the warning. */
    const char *ca_file, *cert_file, *key_file;
    bool insecure;
    /* Sent as "Authorization: Bearer <token>" on every request; the caller reads it from a file
     * or the environment. Copied; never printed. NULL = none. */
    const char *bearer_token;
    /* Extra headers sent on every request, "Name: value"; copied. */
    const char *const *headers;
    size_t n_headers;
    /* Unreachability: after `unreachable_after` consecutive connect-refused or resolve outcomes
     * with no HTTP response in between (0 = 3), on_unreachable (if set) is called once; so it
     * is at the first TLS verification failure (why: "fails TLS verification: ..." with
     * libcurl's message). With
     * HTTP/2 the target is also unusable when it answers over HTTP/1.x (at once), or when
     * `unreachable_after` prior-knowledge openers in a row fail before any HTTP/2 answer was
     * ever seen (a server without cleartext HTTP/2 closes on the preface). eng_stats' why says
     * which. */
    int unreachable_after;
    void (*on_unreachable)(void *user);
    /* Called before the engine handles a socket's readiness (an answer arriving), with no
     * libcurl call in progress; it may call eng_submit and eng_flush. The conductor sends what
     * is due first, so a request planned for this instant does not wait behind the answers
     * that became ready with it. NULL: none. */
    void (*on_io)(void *user);
    /* libcurl's receive buffer of each transfer in bytes (CURLOPT_BUFFERSIZE, 1024..; 0 = its
     * default of 16 KiB). Watch streams use a small one: their events are small and each open
     * stream holds its buffer. */
    long recv_buffer;
    /* HTTP/1.1: split the connections over several libcurl multi handles (eng_split_multis:
     * at most 128, of at least 16 connections each), which costs less per request (libcurl
     * 7.88 looks through a multi handle's connection cache for every request, and checks every
     * idle connection of it at the first request after a second or more) but two descriptors
     * per extra multi handle (its wake-up socket pair). For many short requests; watch streams,
     * which hold their connections, use one. */
    bool split;
    void *user;
} eng_config_t;

/* What on_done receives. Times are uv_hrtime() ns; libcurl's split is in µs from its start of
 * the transfer (nested: connect <= appconnect <= starttransfer <= total; 0 on reused
 * connections). A cancelled request that never left the queue has admitted_ns = sent_ns = 0;
 * one that was never sent has sent_ns = 0. */
typedef struct {
    int64_t intended_ns, submitted_ns, admitted_ns, sent_ns, done_ns;
    int64_t connect_us, appconnect_us, starttransfer_us, total_us;
    long status; /* HTTP status, 0 if no response */
    enum eng_outcome outcome;
    int curl_code;         /* CURLcode, for diagnostics */
    int64_t retry_after_s; /* a 429 or 503 answer's Retry-After (seconds or a date, parsed by
                              libcurl's CURLINFO_RETRY_AFTER), else 0 */
    int64_t bytes_in;      /* response headers + body as received */
    int64_t bytes_in_body; /* response body after de-chunking */
    int64_t bytes_out;     /* request line + headers + body */
    const char *body;      /* kept response body (keep_body), else NULL; valid in on_done */
    size_t body_len;
    const char *content_type; /* with keep_body: the answer's Content-Type, else NULL; valid
                                 in on_done */
} eng_result_t;

/* Streams a response body while it arrives: slices are arbitrary (never frame by them).
 * Return 0 to continue, nonzero to abort the request (outcome "cancelled"). */
typedef int (*eng_data_cb)(void *user, const char *data, size_t len);
typedef void (*eng_done_cb)(void *user, const eng_result_t *res);

typedef struct {
    const char *method; /* NULL or "GET"; "POST", "PUT", "PATCH", "DELETE", ... */
    const char *path;   /* appended to base_url's path, never parsed as a URL: up to a '#'
                           (a fragment is never sent) it must pass value_path_problem
                           (squall/value.h); copied */
    const char *body;   /* copied; NULL = no body */
    size_t body_len;
    const char *const *headers; /* extra headers for this request only, "Name: value"; copied */
    size_t n_headers;
    int64_t timeout_ms;  /* 0 = the config's */
    int64_t intended_ns; /* 0 = now */
    /* Prepared now, sent later: with hold_until_ns > 0 the request is copied and its easy handle
     * set up at once, then held until eng_release is called at or after that instant (a storm
     * tick rendered ahead, so that at the tick only the writes remain). on_release, if set, is
     * called as it is released; a held request cancelled by eng_stop or eng_free gets on_done
     * (outcome "cancelled", admitted_ns = 0) without on_release. */
    int64_t hold_until_ns;
    void (*on_release)(void *user);
    bool keep_body;      /* keep the body for on_done (list pagination tokens) */
    eng_data_cb on_data; /* optional */
    /* Optional: called once when the final response's status line and headers have arrived
     * (1xx answers skipped), with its status, before any on_data. */
    void (*on_head)(void *user, long status);
    eng_done_cb on_done; /* required */
    void *user;
} eng_req_t;

/* The engine's own view, for the live line and saturation. Window figures (max_*) cover the time
 * since the previous eng_stats(..., true). */
typedef struct {
    int in_flight;                /* admitted to libcurl, not yet done */
    int queued;                   /* waiting in our admission queue */
    int capacity;                 /* how many may be in flight at once now */
    int connections;              /* sockets libcurl has open */
    int max_in_flight, max_queued; /* peaks of in_flight and queued in the window */
    int64_t max_queue_wait_ns;    /* longest wait in the admission queue in the window */
    int64_t max_loop_busy_ns;     /* longest single loop pass spent in callbacks (loop lag) */
    int64_t loop_busy_ns;         /* total time spent in callbacks in the window */
    int64_t window_ns;            /* length of the window */
    int64_t submitted, completed; /* totals since eng_new */
    int64_t by_outcome[ENG_OUT_COUNT];
    bool unreachable; /* the unreachable condition has been met (once: it stays set) */
    const char *why;  /* then: what the target did, e.g. "refuses connections" (valid while the
                         engine lives) */
} eng_stats_t;

/* eng_stats' why when the refused or unresolved streak made the target unreachable. */
#define ENG_WHY_REFUSED "refuses connections"
#define ENG_WHY_RESOLVE "does not resolve"

/* This machine's wall clock against the target's, from the Date header of its answers (RFC 9110
 * section 6.6.1: the origin's clock, whole seconds). An answer stamped D (its Date, in s) was
 * stamped between the request's send and the answer's arrival on our wall clock, so our clock
 * minus the target's lies in (sent - (D + 1 s), arrived - D]; the engine keeps the intersection
 * of those intervals over the first ENG_CLOCK_SAMPLES answers that carry a Date (answers that
 * straddle a change of the target's second narrow it toward their round-trip time). */
#define ENG_CLOCK_SAMPLES 20000
typedef struct {
    int64_t samples;     /* answers with a readable Date header */
    int64_t lo_ns, hi_ns; /* the offset lies in (lo, hi]; lo > hi: the bounds crossed (the
                             target's clock stepped during the run) */
} eng_clock_t;
void eng_clock(const eng_t *e, eng_clock_t *out);

/* Creates an engine on `loop`. Ignores SIGPIPE for the process (libcurl runs with NOSIGNAL=1).
 * Returns 0 and sets *out, or SQ_EINVAL (bad config, reason through `o`), SQ_ENOMEM,
 * SQ_ELIBCURL, SQ_ELIBUV. `o` must outlive the engine. */
int eng_new(uv_loop_t *loop, const eng_config_t *cfg, out_t *o, eng_t **out);
/* The libcurl multi handles cfg.split makes for `connections` HTTP/1.1 connections; each holds
 * two descriptors (its wake-up socket pair) beside the connections. */
int eng_split_multis(int connections);

/* Queues one request; its fields are copied. Returns 0, or SQ_EINVAL (no on_done, no path, a path
 * that is not one: a control byte, a space, no leading '/'),
 * SQ_ESTOPPED (after eng_stop), SQ_ENOMEM. A call that fails never calls on_done; a call that
 * succeeds calls it exactly once, never from inside eng_submit. */
int eng_submit(eng_t *e, const eng_req_t *req);

/* Caps the transfers in flight at n connections' worth (at most cfg.connections): a phase that
 * shares fewer connections than the engine holds keeps the others open and idle. */
void eng_set_connections(eng_t *e, int n);

/* Hands the held requests due at or before now_ns to admission (in their hold order), then
 * drives them as eng_flush does. Returns how many were released. */
int eng_release(eng_t *e, int64_t now_ns);

/* The earliest hold_until_ns of a held request; false when none is held. */
bool eng_held_next(const eng_t *e, int64_t *at_ns);

/* Drives the requests eng_submit handed to libcurl since it last acted, so they are written now
 * instead of on the loop's next pass (libcurl starts a new transfer on a 0 ms timeout). Call it
 * after submitting what is due at an instant, outside the engine's callbacks (there it does
 * nothing: the engine drives what those submit itself). It may finish transfers, so on_done
 * callbacks may run inside it. */
void eng_flush(eng_t *e);

/* Stops admitting: later eng_submit calls fail. Queued requests finish at once as "cancelled".
 * In-flight ones are cancelled after `grace_ms` (0 = at once, < 0 = let them finish on their
 * own timeouts). on_done callbacks may run from inside this call. */
void eng_stop(eng_t *e, int64_t grace_ms);

/* Fills *st; with `reset_window`, starts a new window for the max_* and busy figures. */
void eng_stats(eng_t *e, eng_stats_t *st, bool reset_window);

/* Cancels everything (as eng_stop(e, 0)), shuts libcurl down and closes all the engine's libuv
 * handles; memory is released in their close callbacks, so the caller must run the loop
 * afterwards (uv_run(loop, UV_RUN_DEFAULT)) before uv_loop_close(). NULL is allowed. */
void eng_free(eng_t *e);

#endif
