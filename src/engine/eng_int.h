/* Internals shared by the engine's files: the engine, a transfer, a socket's poll context. */
#ifndef SQUALL_ENG_INT_H
#define SQUALL_ENG_INT_H

#include <curl/curl.h>

#include "squall/engine.h"

/* A grow-only byte buffer reused across requests. */
struct eng_buf {
    char *data;
    size_t len, cap;
};

/* With cfg.split, HTTP/1.1 connections go to multi handles of at least ENG_MULTI_CONNS each,
 * at most ENG_MAX_MULTIS of them (eng_split_multis). libcurl 7.88 looks through a multi
 * handle's connection cache for every request (conncache.c), and a request that starts a second
 * or more after the multi handle's last check first checks every idle connection it holds, one
 * poll(2) each (url.c, prune_dead_connections): so a multi handle of a few connections costs
 * less per request than one of them all (callgrind figures in tools/bench/RESULTS.md), and the
 * first request of an aligned tick, after a quiet period, waits for its own multi handle's
 * idle connections only (5,000 agents on their own connections: 40 polls instead of 313; issue
 * 12, "Aligned ticks"). Each multi handle holds a socket pair (libcurl's wake-up), so their
 * number is bounded. */
#define ENG_MULTI_CONNS 16
#define ENG_MAX_MULTIS 128

/* One libcurl multi handle with its own timer and connections; HTTP/2 uses one. */
struct eng_multi {
    CURLM *m;
    eng_t *eng;
    uv_timer_t timer; /* libcurl's one timer */
    uv_idle_t zero;   /* libcurl asked for a 0 ms timeout */
    int cap;          /* transfers it may run at once (its connections; x streams for h2) */
    int in_flight;
    bool dirty; /* transfers were added since it last acted */
};

/* One request from submit to on_done. Transfers and their buffers are pooled and reused. */
struct eng_xfer {
    struct eng_xfer *next, *prev; /* queue, in-flight list (doubly linked) or free list */
    eng_t *eng;
    CURL *easy;    /* attached at admission, returned to the pool when done */
    struct eng_multi *mh; /* the multi handle it was added to */
    eng_req_t req; /* copy; strings point into the buffers below */
    struct eng_buf url, method, body, resp;
    CURLU *uh; /* the base URL parsed once; path and query set per request (xfer.c) */
    struct curl_slist *headers; /* per-request list, or NULL to use the engine's */
    eng_result_t res;
    int64_t queued_ns; /* when it joined the admission queue: queue waits count from it */
    bool opener;     /* HTTP/2 h2c: opens a fresh connection with prior knowledge */
    bool was_opener; /* was admitted as an opener (opener is cleared once its socket opens) */
    bool aborted;    /* the caller's on_data asked to stop */
    bool too_big;    /* a kept body went past cfg.max_body */
    bool head_seen;  /* on_head was called */
    bool cancelled;  /* eng_stop/eng_free removed it */
    bool set_up;     /* its easy handle was set up while it was held (eng_submit) */
    char errbuf[CURL_ERROR_SIZE]; /* libcurl's own message for a failed transfer */
};

/* A socket libcurl uses; kept (with its uv_poll) until the socket really closes. */
struct eng_sock {
    uv_poll_t poll;
    eng_t *eng;
    struct eng_multi *mh; /* whose socket it is */
    curl_socket_t fd;
    int events;  /* UV_READABLE/UV_WRITABLE the poll is started with, 0 when stopped */
    bool ours;   /* opened through our OPENSOCKETFUNCTION, so we see its close */
    bool parked; /* libcurl removed it but we still poll it for reading (see curl_uv.c) */
};

/* What the libcurl <-> libuv glue (curl_uv.c) reports upward. The glue sits below engine.c and
 * never calls it: engine.c hands these callbacks to eng_glue_start. */
typedef struct {
    /* A transfer left libcurl (removed from the multi handle) with this result. */
    void (*done)(eng_t *e, struct eng_xfer *x, CURLcode rc);
    /* libcurl returned from a socket action: queued requests may be admitted now. */
    void (*after_action)(eng_t *e);
    /* One of the engine's own handles closed (its data is the engine). */
    uv_close_cb closed;
} eng_glue_ops_t;

struct eng {
    uv_loop_t *loop;
    out_t *out;
    eng_config_t cfg; /* strings owned below */
    char *base_url, *ca_file, *cert_file, *key_file;
    struct curl_slist *headers; /* config headers + bearer token */
    bool h2c;                   /* HTTP/2 over http:// (prior knowledge) */
    size_t origin_len;          /* length of base_url's "scheme://authority" */
    int streams;
    int conns; /* eng_set_connections' cap, <= cfg.connections */

    struct eng_multi *multis; /* ENG_MULTI_CONNS connections each over HTTP/1.1, one for h2 */
    int n_multis, next_multi;  /* next_multi: where admission looks for room first */
    struct eng_multi **dirty;  /* multis with transfers added since they last acted */
    int n_dirty;
    const eng_glue_ops_t *glue; /* how the glue reports to engine.c */
    uv_prepare_t prepare;       /* loop lag: a pass's callbacks run between check and prepare */
    uv_check_t check;
    uv_timer_t grace; /* eng_stop's grace period */
    int open_handles; /* engine handles not yet closed; memory is freed at 0 */
    bool closing, stopped;
    int in_curl; /* > 0 while inside a libcurl call (no multi calls allowed then) */
    int acting; /* > 0 while inside eng_glue_action (it flushes what is admitted meanwhile) */

    struct eng_sock **socks; /* indexed by fd */
    size_t n_socks_cap;
    int n_socks;         /* open sockets we created */
    int openers_pending; /* openers admitted that have not opened their socket yet */

    struct eng_xfer *queue_head, *queue_tail, *flight, *free_xfers;
    struct eng_xfer *held_head, *held_tail; /* hold_until_ns order (doubly linked) */
    int queued, in_flight, held;
    int max_queued, max_in_flight; /* peaks in the stats window */
    CURL **easy_pool;
    int n_easy_pool, easy_pool_cap;

    eng_clock_t clock; /* our wall clock against the target's Date headers (xfer.c) */

    /* Statistics. */
    int64_t submitted, completed, by_outcome[ENG_OUT_COUNT];
    int64_t window_start_ns, max_queue_wait_ns, max_busy_ns, busy_ns, pass_start_ns;
    int unreachable_streak;
    int h2_opener_fails; /* h2c openers failed in a row before any HTTP/2 answer */
    bool h2_seen;        /* some answer came over HTTP/2 */
    bool unreachable;
    const char *unreachable_why;
    char tls_why[CURL_ERROR_SIZE + 64]; /* the why of a TLS verification failure */
};

/* curl_uv.c: the libcurl <-> libuv glue (reports back through eng_glue_ops_t). */
int eng_glue_start(eng_t *e, const eng_glue_ops_t *ops);
void eng_glue_close(eng_t *e);
/* Runs curl_multi_socket_action on one multi, drains finished transfers, admits queued ones,
 * and drives the multis that got transfers meanwhile so their requests are written before it
 * returns. */
void eng_glue_action(struct eng_multi *mh, curl_socket_t fd, int ev_bitmask);
/* Drives every multi handle that got transfers since it last acted (outside callbacks). */
void eng_glue_flush(eng_t *e);
/* Marks a multi as having new transfers to drive. */
void eng_glue_added(struct eng_multi *mh);
/* Easy-handle callbacks installed by xfer.c. */
curl_socket_t eng_glue_opensocket(void *clientp, curlsocktype purpose, struct curl_sockaddr *a);
int eng_glue_closesocket(void *clientp, curl_socket_t fd);

/* xfer.c: one transfer's easy handle and result. */
CURL *eng_easy_new(eng_t *e);
int eng_xfer_prepare(struct eng_xfer *x, const eng_req_t *req);
int eng_xfer_setup(struct eng_xfer *x);
/* The HTTP version options, which depend on x->opener (set by eng_xfer_setup too). */
void eng_xfer_set_version(struct eng_xfer *x);
void eng_xfer_finish(struct eng_xfer *x, CURLcode rc);
void eng_xfer_release(struct eng_xfer *x);
enum eng_outcome eng_outcome_of(CURLcode rc, long status);

#endif
