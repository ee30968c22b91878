/* Internals of the embedded target, shared by the files of src/target/ only.
 *
 * Layout: buf.c (a growable byte buffer), store.c (objects, collections, versions, history),
 * stream.c (watch streams), fault.c (fault parsing and decisions), report.c (/stats, /metrics),
 * http.c (libmicrohttpd handlers and routing), server.c (lifecycle on the libuv loop).
 * Internal names carry the prefix tgt_; the public API (squall/target.h) uses target_. */
#ifndef SQUALL_TARGET_INT_H
#define SQUALL_TARGET_INT_H

#include <jansson.h>
#include <microhttpd.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/hist.h"
#include "squall/rng.h"
#include "squall/target.h"

/* ---- buf.c: a growable byte buffer, always NUL-terminated when p != NULL. */
typedef struct {
    char *p;
    size_t len, cap;
} tgt_buf_t;

int tgt_buf_add(tgt_buf_t *b, const char *s, size_t n);
int tgt_buf_str(tgt_buf_t *b, const char *s);
int tgt_buf_printf(tgt_buf_t *b, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Appends s as a JSON string literal (quotes and escapes). */
int tgt_buf_json_str(tgt_buf_t *b, const char *s);
void tgt_buf_free(tgt_buf_t *b);

/* ---- store.c */
typedef struct tgt_stream tgt_stream_t;

typedef struct tgt_coll {
    char *path;
    struct tgt_obj **items; /* sorted by name (strcmp); the list order and continuation key */
    size_t n, cap;
    tgt_stream_t *streams; /* watchers of this collection (stream.c owns the list nodes) */
} tgt_coll_t;

typedef struct tgt_obj {
    char *path;
    const char *name; /* last segment, inside path */
    uint64_t version;
    json_t *doc;
    char *item; /* cached JSON {"path":..,"version":..,"object":..} */
    size_t item_len;
    tgt_coll_t *coll;
} tgt_obj_t;

typedef struct {
    uint64_t version;
    tgt_coll_t *coll;
    char *line; /* one NDJSON event, newline included */
    size_t len;
} tgt_event_t;

typedef struct tgt_map tgt_map_t;

typedef struct {
    uint64_t version; /* global: the version of the last write */
    tgt_map_t *objs, *colls;
    tgt_event_t *ring; /* history window */
    int ring_cap, ring_head, ring_len;
    uint64_t evicted_upto; /* highest version no longer in the window (0 = none evicted) */
    uint64_t n_objects, creates, replaces, patches, deletes, conflicts, expired;
    /* Called after every write with its event (the store keeps ownership). */
    void (*on_event)(void *arg, const tgt_event_t *ev);
    void *on_event_arg;
} tgt_store_t;

enum tgt_op { TGT_OP_PUT, TGT_OP_PATCH, TGT_OP_DELETE };

int tgt_store_init(tgt_store_t *s, int history);
void tgt_store_close(tgt_store_t *s);
tgt_obj_t *tgt_store_get(tgt_store_t *s, const char *path);
tgt_coll_t *tgt_store_coll(tgt_store_t *s, const char *path);
/* The collection at the first len bytes of path, created empty when new; NULL on no memory.
 * Collections are never removed: once known they stay listable and watchable. */
tgt_coll_t *tgt_store_coll_add(tgt_store_t *s, const char *path, size_t len);
/* Index of the first member whose name sorts after `name` (strcmp order). */
size_t tgt_coll_after(const tgt_coll_t *c, const char *name);
/* Applies a write; body is borrowed (PATCH: the merge patch; DELETE: NULL). expect >= 0 makes
 * it conditional on the object's current version (0 = must not exist). Returns the HTTP status:
 * 201 created, 200 replaced/patched, 204 deleted, 404 absent (PATCH, DELETE), 409 version
 * conflict, 500 out of memory. *obj is the object written (NULL after DELETE or on error). */
int tgt_store_write(tgt_store_t *s, enum tgt_op op, const char *path, json_t *body, int64_t expect,
                    tgt_obj_t **obj);
/* Index into the history ring of the first event after `since`, or ring_len when none; -1 when
 * events after `since` were evicted (the answer is then 410). */
int tgt_store_history_after(const tgt_store_t *s, uint64_t since);
const tgt_event_t *tgt_store_history_at(const tgt_store_t *s, int i);
/* RFC 7386 merge patch: returns a new value (target is not modified), NULL on no memory. */
json_t *tgt_merge_patch(const json_t *target, const json_t *patch);
/* A path is /v1/ followed by 1..16 segments of [A-Za-z0-9._~-] (not "." or ".."), length <=
 * 512, no trailing slash. True when valid. */
bool tgt_path_valid(const char *path);

/* ---- stream.c: watch streams */
typedef struct tgt_server tgt_server_t;

/* Opens a watch on collection path `cpath` for events after `since`; the caller checked the
 * history (tgt_store_history_after >= 0). Returns the MHD result of queueing the response. */
enum MHD_Result tgt_stream_open(tgt_server_t *sv, struct MHD_Connection *conn, const char *cpath,
                                int first);
/* Fans out one event to the collection's watchers. */
void tgt_stream_publish(void *server, const tgt_event_t *ev);
/* Ends parked streams whose client closed its end (libmicrohttpd does not watch a suspended
 * connection, so without this a vanished watcher would hold its socket until the next event). */
void tgt_stream_sweep(tgt_server_t *sv);
/* Ends every stream abruptly (the "drop watches" fault) or, when graceful, with its end. */
void tgt_stream_end_all(tgt_server_t *sv, bool drop);

/* ---- fault.c */
typedef struct {
    uint64_t delayed, delay_ns_total, failed, stalled, queued, rejected, drops, dropped_streams;
} tgt_fault_counts_t;

/* Parses an admin JSON body into f (fields absent = off). */
int tgt_faults_from_json(target_faults_t *f, const json_t *j, char *err, size_t errlen);
json_t *tgt_faults_to_json(const target_faults_t *f);
/* A delay drawn from f, in ns (0 when none). */
int64_t tgt_fault_delay(const target_faults_t *f, rng_t *r);

/* ---- server.c / http.c: the server */
typedef struct tgt_req tgt_req_t;

enum {
    TGT_M_GET,
    TGT_M_HEAD,
    TGT_M_PUT,
    TGT_M_POST,
    TGT_M_PATCH,
    TGT_M_DELETE,
    TGT_M_OTHER,
    TGT_M_COUNT
};

struct tgt_server {
    uv_loop_t *loop;
    out_t *out;
    struct MHD_Daemon *mhd;
    uv_poll_t poll;
    uv_timer_t tick;  /* MHD's own timeouts */
    uv_timer_t drop;  /* the drop-watches fault */
    uv_idle_t idle;   /* runs libmicrohttpd again soon after a connection was resumed */
    uv_timer_t sweep; /* finds parked watch streams whose client went away */
    bool in_run, kicked;
    bool drop_pending; /* POST /admin/drop-watches: drop from the idle callback */
    int handles_open;
    int port;
    bool stopping;
    bool draining; /* stopping soon: held requests are answered 503 */
    void (*on_stopped)(void *);
    void *on_stopped_arg;
    target_opts_t opts;
    target_faults_t faults;
    uint64_t faults_at; /* uv_hrtime() when the faults were applied */
    rng_t rng;
    tgt_store_t store;
    hist_t *latency; /* server-side, receipt to last byte, /v1/ requests except watches */
    double latency_sum_s;
    tgt_fault_counts_t fc;
    uint64_t requests[TGT_M_COUNT][600]; /* by method and status */
    uint64_t bad_json, bad_path, too_large, bad_method;
    uint64_t streams_open, streams_opened, events_sent, slow_closed, streams_gone;
    int inflight;
    tgt_req_t *held; /* suspended requests (stalled, delayed, queued), for shutdown */
    tgt_req_t *queue_head, *queue_tail; /* waiting for an in-flight slot, FIFO */
    tgt_stream_t *all_streams;
};

struct target {
    tgt_server_t sv;
};

/* http.c */
enum MHD_Result tgt_http_access(void *cls, struct MHD_Connection *conn, const char *url,
                                const char *method, const char *version, const char *upload,
                                size_t *upload_size, void **con_cls);
void tgt_http_completed(void *cls, struct MHD_Connection *conn, void **con_cls,
                        enum MHD_RequestTerminationCode code);
/* Queues a response with a body copied from (body, len) and counts it. */
enum MHD_Result tgt_http_reply(tgt_server_t *sv, struct MHD_Connection *conn, int method,
                               unsigned status, const char *ctype, const char *body, size_t len);
enum MHD_Result tgt_http_error(tgt_server_t *sv, struct MHD_Connection *conn, int method,
                               unsigned status, const char *code, const char *msg);
void tgt_http_count(tgt_server_t *sv, int method, unsigned status);
/* Resumes every suspended request (shutdown). */
void tgt_http_release_all(tgt_server_t *sv);
/* Applies a new fault configuration now. */
void tgt_server_set_faults(tgt_server_t *sv, const target_faults_t *f);
/* Ask libmicrohttpd to run soon (after a resume). */
void tgt_server_drop_soon(tgt_server_t *sv);
void tgt_server_kick(tgt_server_t *sv);

/* api.c: serves one /v1/ request (faults already applied). Sets *watch when it opened a
 * watch stream. */
enum MHD_Result tgt_api_serve(tgt_server_t *sv, struct MHD_Connection *conn, int method,
                              const char *url, const char *body, size_t len, bool *watch);

/* report.c */
int tgt_report_stats(tgt_server_t *sv, tgt_buf_t *b);
int tgt_report_metrics(tgt_server_t *sv, tgt_buf_t *b);
json_t *tgt_report_faults(tgt_server_t *sv);

#endif
