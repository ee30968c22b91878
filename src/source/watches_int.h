/* Internals the watch files share: a phase's watchers and their figures per class (watches.c),
 * the one-shot streams another source opens (watches_once.c), the phase's section at its end
 * (watches_section.c). */
#ifndef SQUALL_WATCHES_INT_H
#define SQUALL_WATCHES_INT_H

#include "squall/source.h"
#include "squall/watch.h"

/* A phase's watches, or one-shot streams (the same type as in watches_once.h). */
typedef struct watches_set watches_t;

#define WATCHES_LOG_MAX 20000 /* reconnects kept per phase in the results' reconnect log */

/* A stream's lifetime figures, summed per class. */
typedef struct {
    int64_t opens, drops, reconnects, relists, too_old, dup, over;
} watches_figs_t;

/* Per watch class of the phase. */
typedef struct {
    int cls;
    results_cell_t *events; /* (phase, class, "2xx"): count = events; open, propagation */
    int streams;
    watches_figs_t ended; /* one-shot streams already ended and freed */
    int64_t events_n, bytes, unparsed, oversize, server_errors, no_stamp, stamp_ahead;
    int open_at_end, waiting_at_end; /* streams answered / sent but unanswered at the end */
} watches_class_t;

/* One reconnect: when the stream ended, the delay drawn, when the next attempt was sent (ns
 * from the phase start; -1 until it is) and the backoff attempt it was. */
typedef struct {
    int64_t end, delay, sent;
    int attempt;
} watches_recon_t;

typedef struct watches_watcher {
    watches_t *ws;
    int index;
    watches_class_t *wc;
    watch_stream_t st;
    watch_framer_t fr;
    rng_t draws; /* the template draws of this watcher: its watch and relist paths agree */
    char *path;  /* the rendered watch path, without a resume point */
    int64_t due_ns;
    bool due_relist, busy, got_first, got_events, open_recorded;
    int64_t hold_ms; /* one-shot: squall closes the stream after this long (libcurl's timeout) */
    int64_t intended_ns, first_byte_ns;
    /* This attempt's share of the class figures, taken back when the answer is not a stream
     * (the engine streams every body, also a 410's: its status is known only at the end). */
    int64_t attempt_events, attempt_bytes, attempt_no_stamp;
    int log; /* reconnect log entry waiting for its send time, or -1 */
    /* A relist in flight: its pages. */
    char *list_base;
    int pages;
    int64_t list_intended_ns;
    char list_version[64];
} watches_watcher_t;

/* How a stream that ended is answered instead of a reconnect: set by watches_once_new for its
 * one-shot streams (held: squall closed it at its hold time). The callee frees w. */
typedef void watches_end_fn(watches_t *ws, watches_watcher_t *w, const watch_end_t *end, bool held);

struct watches_set {
    src_ctx_t ctx;
    const plan_phase_t *pp;
    rng_t rng;      /* reconnect delays */
    tmpl_buf_t buf; /* rendered paths */
    bool active;
    int64_t base_ns;
    eng_t *eng;
    watches_watcher_t *w;
    size_t n;
    watches_class_t *wcs;
    size_t n_wc;
    int64_t next_due_ns;
    watches_recon_t *log; /* reconnects, grown as they come, at most WATCHES_LOG_MAX */
    size_t n_log, cap_log;
    int64_t log_dropped;      /* reconnects past WATCHES_LOG_MAX: counted, not kept */
    watches_end_fn *once_end; /* one-shot streams (watches_once_*): no reconnects; else NULL */
    int once_max, once_open;
};

/* watches.c: the phase's watches (the source's entry points), and the parts one-shot streams
 * share with them. */
int watches_new(const src_ctx_t *ctx, void **self);
void watches_stop(void *self);
void watches_free(void *self);
/* Raises the soft open-files limit to the hard one and refuses (SQ_ELIMIT, said on ctx->o) a
 * phase that needs more for this many streams. */
int watches_check_files(const src_ctx_t *ctx, const plan_phase_t *pp, int watchers);
/* The watches' own engine, sized for this many streams. */
int watches_engine_new(watches_t *ws, int watchers);
results_cell_t *watches_cell(watches_t *ws, int cls, const char *outcome);
/* Sets up w's stream state and framer for the watch class pr (w->ws and w->wc set). */
void watches_stream_init(watches_watcher_t *w, const plan_req_t *pr);
/* Sends w's stream (from its resume point, if any) on the watches' engine. */
int watches_stream_open(watches_t *ws, watches_watcher_t *w, int64_t intended);

/* watches_section.c: the end of a phase. */
/* Adds a watcher's stream figures to f. */
void watches_figs_add(watches_figs_t *f, const watches_watcher_t *w);
/* Puts the phase's figures per class and its reconnect log in the "watches" section. */
void watches_section_put(watches_t *ws);

#endif
