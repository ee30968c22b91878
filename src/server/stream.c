/* Watch streams of the embedded target: chunked NDJSON events per collection, each stream with
 * a bounded queue; a stream that falls behind its bound ends with a final error event. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>

#include "squall/err.h"
#include "server_int.h"

enum { STREAM_OPEN, STREAM_END, STREAM_DROP };

struct srv_stream {
    srv_server_t *sv;
    struct MHD_Connection *conn;
    srv_coll_t *coll;
    srv_buf_t buf; /* queued bytes not yet handed to libmicrohttpd start at off */
    size_t off;
    bool suspended;
    int state;
    srv_stream_t *prev, *next;   /* in coll->streams */
    srv_stream_t *aprev, *anext; /* in sv->all_streams */
};

static const char slow_event[] =
    "{\"type\":\"error\",\"code\":\"slow-watcher\",\"message\":\"this stream fell behind its "
    "buffer limit and was closed; re-list and watch again from the list's version\"}\n";

static void stream_wake(srv_stream_t *st)
{
    if (!st->suspended)
        return;
    st->suspended = false;
    MHD_resume_connection(st->conn);
    st->sv->kick(st->sv);
}

static ssize_t stream_read(void *cls, uint64_t pos, char *out, size_t max)
{
    srv_stream_t *st = cls;
    (void)pos;
    size_t avail = st->buf.len - st->off;
    if (avail > 0) {
        size_t n = avail < max ? avail : max;
        memcpy(out, st->buf.p + st->off, n);
        st->off += n;
        if (st->off == st->buf.len) {
            st->off = st->buf.len = 0;
        } else if (st->off > st->buf.len / 2) {
            memmove(st->buf.p, st->buf.p + st->off, st->buf.len - st->off);
            st->buf.len -= st->off;
            st->off = 0;
        }
        return (ssize_t)n;
    }
    if (st->state == STREAM_DROP) {
        /* An abrupt end, as a crashing server would give: shut the socket down now, since
         * libmicrohttpd may close a failed connection's socket only later. */
        const union MHD_ConnectionInfo *ci =
            MHD_get_connection_info(st->conn, MHD_CONNECTION_INFO_CONNECTION_FD);
        if (ci)
            shutdown(ci->connect_fd, SHUT_RDWR);
        return MHD_CONTENT_READER_END_WITH_ERROR;
    }
    if (st->state == STREAM_END)
        return MHD_CONTENT_READER_END_OF_STREAM;
    /* Nothing to send: park the connection until the next event (libmicrohttpd allows
     * suspending from a content reader callback). */
    MHD_suspend_connection(st->conn);
    st->suspended = true;
    return 0;
}

static void stream_free(void *cls)
{
    srv_stream_t *st = cls;
    srv_server_t *sv = st->sv;
    if (st->prev)
        st->prev->next = st->next;
    else
        st->coll->streams = st->next;
    if (st->next)
        st->next->prev = st->prev;
    if (st->aprev)
        st->aprev->anext = st->anext;
    else
        sv->all_streams = st->anext;
    if (st->anext)
        st->anext->aprev = st->aprev;
    sv->streams_open--;
    srv_buf_free(&st->buf);
    free(st);
    /* libmicrohttpd closes the socket of a finished connection on its next MHD_run; without
     * another run a dropped stream's client would not notice until other traffic came. */
    sv->kick(sv);
}

/* Queues one event line, or ends the stream when the line would pass its buffer limit. */
static void stream_push(srv_stream_t *st, const char *line, size_t len)
{
    srv_server_t *sv = st->sv;
    if (st->state != STREAM_OPEN)
        return;
    if ((long long)(st->buf.len - st->off + len) > sv->opts.stream_buffer ||
        srv_buf_add(&st->buf, line, len) < 0) {
        /* The final error event may pass the limit by its own size, once. */
        srv_buf_add(&st->buf, slow_event, sizeof(slow_event) - 1);
        st->state = STREAM_END;
        sv->slow_closed++;
    } else {
        sv->events_sent++;
    }
    stream_wake(st);
}

void srv_stream_publish(void *server, const srv_event_t *ev)
{
    for (srv_stream_t *st = ev->coll->streams; st; st = st->next)
        stream_push(st, ev->line, ev->len);
    (void)server;
}

static srv_stream_t *stream_new(srv_server_t *sv, struct MHD_Connection *conn, srv_coll_t *c)
{
    srv_stream_t *st = calloc(1, sizeof(*st));
    if (!st)
        return NULL;
    st->sv = sv;
    st->conn = conn;
    st->coll = c;
    st->next = c->streams;
    if (st->next)
        st->next->prev = st;
    c->streams = st;
    st->anext = sv->all_streams;
    if (st->anext)
        st->anext->aprev = st;
    sv->all_streams = st;
    sv->streams_open++;
    sv->streams_opened++;
    return st;
}

enum MHD_Result srv_stream_open(srv_server_t *sv, struct MHD_Connection *conn, const char *cpath,
                                int first)
{
    srv_store_t *s = &sv->store;
    srv_coll_t *c = srv_store_coll_add(s, cpath, strlen(cpath));
    srv_stream_t *st = c ? stream_new(sv, conn, c) : NULL;
    if (!st)
        return srv_reply_error(sv, conn, SRV_M_GET, 500, "no-memory", "out of memory");
    for (int i = first; i < s->ring_len; i++) {
        const srv_event_t *ev = srv_store_history_at(s, i);
        if (ev->coll == c)
            stream_push(st, ev->line, ev->len);
    }
    struct MHD_Response *r =
        MHD_create_response_from_callback(MHD_SIZE_UNKNOWN, 4096, stream_read, st, stream_free);
    if (!r) {
        stream_free(st);
        return MHD_NO;
    }
    MHD_add_response_header(r, "Content-Type", "application/x-ndjson");
    MHD_add_response_header(r, "Cache-Control", "no-store");
    char v[32];
    snprintf(v, sizeof(v), "%llu", (unsigned long long)s->version);
    MHD_add_response_header(r, "X-Squall-Version", v);
    srv_access_status(conn, 200);
    enum MHD_Result rc = MHD_queue_response(conn, 200, r);
    MHD_destroy_response(r);
    srv_reply_count(sv, SRV_M_GET, 200);
    return rc;
}

void srv_stream_sweep(srv_server_t *sv)
{
    char c;
    for (srv_stream_t *st = sv->all_streams; st; st = st->anext) {
        if (!st->suspended || st->state != STREAM_OPEN)
            continue;
        const union MHD_ConnectionInfo *ci =
            MHD_get_connection_info(st->conn, MHD_CONNECTION_INFO_CONNECTION_FD);
        if (!ci || recv(ci->connect_fd, &c, 1, MSG_PEEK | MSG_DONTWAIT) != 0)
            continue; /* still there (EAGAIN) or sending us bytes */
        st->state = STREAM_DROP;
        st->buf.len = st->off = 0;
        sv->streams_gone++;
        stream_wake(st);
    }
}

void srv_stream_end_all(srv_server_t *sv, bool drop)
{
    for (srv_stream_t *st = sv->all_streams; st; st = st->anext) {
        if (drop) {
            if (st->state == STREAM_DROP)
                continue;
            st->state = STREAM_DROP;
            st->buf.len = st->off = 0;
            sv->fc.dropped_streams++;
        } else if (st->state == STREAM_OPEN) {
            st->state = STREAM_END;
        }
        stream_wake(st);
    }
}
