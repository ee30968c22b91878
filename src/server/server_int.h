/* Internals of the embedded server ("the embedded target" to users), shared by the files of
 * src/server/ only. Its layers, each file calling only files to its right (tools/layers checks):
 * server.c -> http.c -> api.c -> stream.c -> reply.c -> report.c -> fault.c -> store.c -> buf.c -> access.c
 *
 * server.c: lifecycle on the libuv loop. http.c: libmicrohttpd's handlers, the request
 * lifecycle, fault steps, admin and report routes. api.c: the /v1/ routes. stream.c: watch
 * streams. reply.c: answers and their counts. access.c: the access log (--access-log). report.c: /stats, /metrics, fault counts.
 * fault.c: fault settings and draws. store.c: objects, collections, versions, history. buf.c: a
 * growable byte buffer. Where a lower file must reach up it calls a hook installed from above:
 * sv->kick (run libmicrohttpd again soon) and store.on_event (publish a write to watchers).
 * Internal names carry the prefix srv_; the public API (squall/server.h) uses server_. */
#ifndef SQUALL_SERVER_INT_H
#define SQUALL_SERVER_INT_H

#include <jansson.h>
#include <microhttpd.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "squall/hist.h"
#include "squall/rng.h"
#include "squall/server.h"

/* ---- buf.c: a growable byte buffer, always NUL-terminated when p != NULL. */
typedef struct {
    char *p;
    size_t len, cap;
} srv_buf_t;

int srv_buf_add(srv_buf_t *b, const char *s, size_t n);
int srv_buf_str(srv_buf_t *b, const char *s);
int srv_buf_printf(srv_buf_t *b, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
/* Appends s as a JSON string literal (quotes and escapes). */
int srv_buf_json_str(srv_buf_t *b, const char *s);
void srv_buf_free(srv_buf_t *b);

/* ---- store.c */
typedef struct srv_stream srv_stream_t;

typedef struct srv_coll {
    char *path;
    struct srv_obj **items; /* sorted by name (strcmp); the list order and continuation key */
    size_t n, cap;
    srv_stream_t *streams; /* watchers of this collection (stream.c owns the list nodes) */
} srv_coll_t;

typedef struct srv_obj {
    char *path;
    const char *name; /* last segment, inside path */
    uint64_t version;
    json_t *doc;
    char *item; /* cached JSON {"path":..,"version":..,"object":..} */
    size_t item_len;
    srv_coll_t *coll;
} srv_obj_t;

typedef struct {
    uint64_t version;
    srv_coll_t *coll;
    char *line; /* one NDJSON event, newline included */
    size_t len;
} srv_event_t;

typedef struct srv_map srv_map_t;

typedef struct {
    uint64_t version; /* global: the version of the last write */
    srv_map_t *objs, *colls;
    srv_event_t *ring; /* history window */
    int ring_cap, ring_head, ring_len;
    uint64_t evicted_upto; /* highest version no longer in the window (0 = none evicted) */
    uint64_t n_objects, creates, replaces, patches, deletes, conflicts, expired;
    /* Called after every write with its event (the store keeps ownership). */
    void (*on_event)(void *arg, const srv_event_t *ev);
    void *on_event_arg;
} srv_store_t;

enum srv_op { SRV_OP_PUT, SRV_OP_PATCH, SRV_OP_DELETE };

int srv_store_init(srv_store_t *s, int history);
void srv_store_close(srv_store_t *s);
srv_obj_t *srv_store_get(srv_store_t *s, const char *path);
srv_coll_t *srv_store_coll(srv_store_t *s, const char *path);
/* The collection at the first len bytes of path, created empty when new; NULL on no memory.
 * Collections are never removed: once known they stay listable and watchable. */
srv_coll_t *srv_store_coll_add(srv_store_t *s, const char *path, size_t len);
/* Index of the first member whose name sorts after `name` (strcmp order). */
size_t srv_coll_after(const srv_coll_t *c, const char *name);
/* Applies a write; body is borrowed (PATCH: the merge patch; DELETE: NULL). expect >= 0 makes
 * it conditional on the object's current version (0 = must not exist). Returns the HTTP status:
 * 201 created, 200 replaced/patched, 204 deleted, 404 absent (PATCH, DELETE), 409 version
 * conflict, 500 out of memory. *obj is the object written (NULL after DELETE or on error). */
int srv_store_write(srv_store_t *s, enum srv_op op, const char *path, json_t *body, int64_t expect,
                    srv_obj_t **obj);
/* Index into the history ring of the first event after `since`, or ring_len when none; -1 when
 * events after `since` were evicted (the answer is then 410). */
int srv_store_history_after(const srv_store_t *s, uint64_t since);
const srv_event_t *srv_store_history_at(const srv_store_t *s, int i);
/* RFC 7386 merge patch: returns a new value (target is not modified), NULL on no memory. */
json_t *srv_merge_patch(const json_t *target, const json_t *patch);
/* A path is /v1/ followed by 1..16 segments of [A-Za-z0-9._~-] (not "." or ".."), length <=
 * 512, no trailing slash. True when valid. */
bool srv_path_valid(const char *path);

/* ---- stream.c: watch streams */
typedef struct srv_server srv_server_t;

/* Opens a watch on collection path `cpath` for events after `since`; the caller checked the
 * history (srv_store_history_after >= 0). Returns the MHD result of queueing the response. */
enum MHD_Result srv_stream_open(srv_server_t *sv, struct MHD_Connection *conn, const char *cpath,
                                int first);
/* Fans out one event to the collection's watchers. */
void srv_stream_publish(void *server, const srv_event_t *ev);
/* Ends parked streams whose client closed its end (libmicrohttpd does not watch a suspended
 * connection, so without this a vanished watcher would hold its socket until the next event). */
void srv_stream_sweep(srv_server_t *sv);
/* Ends every stream abruptly (the "drop watches" fault) or, when graceful, with its end. */
void srv_stream_end_all(srv_server_t *sv, bool drop);

/* ---- fault.c */
typedef struct {
    uint64_t delayed, delay_ns_total, failed, stalled, queued, rejected, drops, dropped_streams;
} srv_fault_counts_t;

/* Parses an admin JSON body into f (fields absent = off). */
int srv_faults_from_json(server_faults_t *f, const json_t *j, char *err, size_t errlen);
json_t *srv_faults_to_json(const server_faults_t *f);
/* A delay drawn from f, in ns (0 when none). */
/* Whether now_ns (uv_hrtime) lies in the error window of faults applied at applied_ns. */
bool srv_fault_in_error_window(const server_faults_t *f, uint64_t applied_ns, uint64_t now_ns);
int64_t srv_fault_delay(const server_faults_t *f, rng_t *r);

/* ---- server.c / http.c: the server */
typedef struct srv_req srv_req_t;

enum {
    SRV_M_GET,
    SRV_M_HEAD,
    SRV_M_PUT,
    SRV_M_POST,
    SRV_M_PATCH,
    SRV_M_DELETE,
    SRV_M_OTHER,
    SRV_M_COUNT
};

struct srv_server {
    uv_loop_t *loop;
    out_t *out;
    struct MHD_Daemon *mhd;
    uv_poll_t poll;
    uv_timer_t tick;  /* MHD's own timeouts */
    uv_timer_t drop;  /* the drop-watches fault */
    uv_idle_t idle;   /* runs libmicrohttpd again soon after a connection was resumed */
    uv_timer_t sweep; /* finds parked watch streams whose client went away */
    /* Asks for libmicrohttpd to run again soon (after a resume, or once a connection ended):
     * server.c's hook, so that the files below it never call server.c. */
    void (*kick)(srv_server_t *sv);
    bool in_run, kicked;
    bool drop_pending; /* POST /admin/drop-watches: drop from the idle callback */
    int handles_open;
    int port;
    bool stopping;
    bool draining; /* stopping soon: held requests are answered 503 */
    void (*on_stopped)(void *);
    void *on_stopped_arg;
    server_opts_t opts;
    server_faults_t faults;
    uint64_t faults_at; /* uv_hrtime() when the faults were applied */
    rng_t rng;
    srv_store_t store;
    hist_t *latency; /* server-side, receipt to last byte, /v1/ requests except watches */
    double latency_sum_s;
    srv_fault_counts_t fc;
    uint64_t requests[SRV_M_COUNT][600]; /* by method and status */
    uint64_t bad_json, bad_path, too_large, bad_method;
    uint64_t streams_open, streams_opened, events_sent, slow_closed, streams_gone;
    int inflight;
    srv_req_t *held; /* suspended requests (stalled, delayed, queued), for shutdown */
    srv_req_t *queue_head, *queue_tail; /* waiting for an in-flight slot, FIFO */
    srv_stream_t *all_streams;
    FILE *access_log; /* --access-log, or NULL */
};

struct server {
    srv_server_t sv;
};

/* access.c: the access log (the connection's request target and status, kept per connection). */
typedef struct srv_conn_log srv_conn_log_t;
void srv_access_conn(void *cls, struct MHD_Connection *conn, void **socket_context,
                     enum MHD_ConnectionNotificationCode code);
void *srv_access_uri(void *cls, const char *uri, struct MHD_Connection *conn);
void srv_access_status(struct MHD_Connection *conn, unsigned status);
/* One line for a request that ended: received at wall_ns (CLOCK_REALTIME), dur_ns long. */
void srv_access_write(srv_server_t *sv, struct MHD_Connection *conn, const char *method,
                      int64_t wall_ns, int64_t dur_ns);

/* http.c */
enum MHD_Result srv_http_access(void *cls, struct MHD_Connection *conn, const char *url,
                                const char *method, const char *version, const char *upload,
                                size_t *upload_size, void **con_cls);
void srv_http_completed(void *cls, struct MHD_Connection *conn, void **con_cls,
                        enum MHD_RequestTerminationCode code);
/* Resumes every suspended request (shutdown). */
void srv_http_release_all(srv_server_t *sv);
/* Applies a new fault configuration now (and arms the drop-watches timer, sv->drop). */
void srv_http_set_faults(srv_server_t *sv, const server_faults_t *f);

/* api.c: serves one /v1/ request (faults already applied). Sets *watch when it opened a
 * watch stream. */
enum MHD_Result srv_api_serve(srv_server_t *sv, struct MHD_Connection *conn, int method,
                              const char *url, const char *body, size_t len, bool *watch);

/* reply.c: answers and their counts. A method of -1 is not counted (routes outside /v1/). */
void srv_reply_count(srv_server_t *sv, int method, unsigned status);
/* Queues a response with a body copied from (body, len) and counts it. */
enum MHD_Result srv_reply(srv_server_t *sv, struct MHD_Connection *conn, int method,
                          unsigned status, const char *ctype, const char *body, size_t len);
/* Queues an error answer {"error": CODE, "message": MSG} and counts it. */
enum MHD_Result srv_reply_error(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                unsigned status, const char *code, const char *msg);
/* The same with a Retry-After of retry_after seconds (none when negative). */
enum MHD_Result srv_reply_error_retry(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                      unsigned status, const char *code, const char *msg,
                                      int retry_after);

/* report.c */
int srv_report_stats(srv_server_t *sv, srv_buf_t *b);
int srv_report_metrics(srv_server_t *sv, srv_buf_t *b);
json_t *srv_report_faults(srv_server_t *sv);

#endif
