/* Lifecycle of the embedded target on a libuv loop: libmicrohttpd runs in external-epoll mode,
 * its epoll descriptor watched by one uv_poll_t, its timeouts by one uv_timer_t. */
#include <arpa/inet.h>
#include <netinet/in.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

static void mhd_run(srv_server_t *sv);

static void on_tick(uv_timer_t *h)
{
    mhd_run(h->data);
}

static void on_idle(uv_idle_t *h)
{
    srv_server_t *sv = h->data;
    uv_idle_stop(h);
    if (sv->drop_pending) {
        sv->drop_pending = false;
        srv_stream_end_all(sv, true);
    }
    mhd_run(sv);
}

static void on_poll(uv_poll_t *h, int status, int events)
{
    (void)status;
    (void)events;
    mhd_run(h->data);
}

static void mhd_run(srv_server_t *sv)
{
    if (sv->stopping)
        return;
    sv->in_run = true;
    MHD_run(sv->mhd);
    sv->in_run = false;
    if (sv->kicked) {
        sv->kicked = false;
        uv_idle_start(&sv->idle, on_idle);
    }
    MHD_UNSIGNED_LONG_LONG ms;
    if (MHD_get_timeout(sv->mhd, &ms) == MHD_YES)
        uv_timer_start(&sv->tick, on_tick, ms, 0);
    else
        uv_timer_stop(&sv->tick);
}

/* Runs libmicrohttpd again soon: the hook (sv->kick) the files below call after resuming a
 * connection or when one ended, since libmicrohttpd acts on either only in its next run. */
static void kick(srv_server_t *sv)
{
    if (sv->stopping)
        return;
    if (sv->in_run)
        sv->kicked = true;
    else
        uv_idle_start(&sv->idle, on_idle);
}

/* Every 2 s: parked streams whose client left, and the access log's buffer to its file. */
static void on_sweep(uv_timer_t *h)
{
    srv_server_t *sv = h->data;
    srv_stream_sweep(sv);
    if (sv->access_log)
        fflush(sv->access_log);
}

static void mhd_log(void *cls, const char *fmt, va_list ap)
{
    srv_server_t *sv = cls;
    char line[512];
    vsnprintf(line, sizeof(line), fmt, ap);
    line[strcspn(line, "\n")] = '\0';
    out_debug(sv->out, "serve: libmicrohttpd: %s", line);
}

static int parse_addr(const server_opts_t *o, struct sockaddr_storage *ss)
{
    memset(ss, 0, sizeof(*ss));
    struct sockaddr_in *a4 = (struct sockaddr_in *)ss;
    struct sockaddr_in6 *a6 = (struct sockaddr_in6 *)ss;
    if (o->port < 0 || o->port > 65535)
        return SQ_EINVAL;
    if (inet_pton(AF_INET, o->host, &a4->sin_addr) == 1) {
        a4->sin_family = AF_INET;
        a4->sin_port = htons((uint16_t)o->port);
        return AF_INET;
    }
    if (inet_pton(AF_INET6, o->host, &a6->sin6_addr) == 1) {
        a6->sin6_family = AF_INET6;
        a6->sin6_port = htons((uint16_t)o->port);
        return AF_INET6;
    }
    return SQ_EINVAL;
}

/* Percent-decoding of the URL and its arguments in place, as libmicrohttpd's own does, except
 * that %00 stays as it is: decoded, a NUL would cut the path short ("/v1/a/gw-%00x" would be
 * served as "/v1/a/gw-"); kept, the path fails srv_path_valid and is answered 400. */
static size_t unescape(void *cls, struct MHD_Connection *conn, char *s)
{
    (void)cls;
    (void)conn;
    static const char hex[] = "0123456789abcdef";
    char *w = s;
    for (const char *r = s; *r; r++) {
        const char *a = r[0] == '%' && r[1] ? strchr(hex, r[1] | 0x20) : NULL;
        const char *b = a && r[2] ? strchr(hex, r[2] | 0x20) : NULL;
        int v = a && b ? (int)(a - hex) * 16 + (int)(b - hex) : -1;
        if (v > 0) {
            *w++ = (char)v;
            r += 2;
        } else {
            *w++ = *r;
        }
    }
    *w = '\0';
    return (size_t)(w - s);
}

static int start_mhd(srv_server_t *sv, struct sockaddr_storage *ss, int family)
{
    unsigned flags = MHD_USE_EPOLL | MHD_ALLOW_SUSPEND_RESUME | MHD_USE_TURBO | MHD_USE_ERROR_LOG;
    if (family == AF_INET6)
        flags |= MHD_USE_IPv6;
    sv->mhd = MHD_start_daemon(
        flags, 0, NULL, NULL, srv_http_access, sv, MHD_OPTION_SOCK_ADDR, (struct sockaddr *)ss,
        MHD_OPTION_NOTIFY_COMPLETED, srv_http_completed, sv, MHD_OPTION_NOTIFY_CONNECTION,
        srv_access_conn, sv, MHD_OPTION_URI_LOG_CALLBACK, srv_access_uri, sv,
        MHD_OPTION_EXTERNAL_LOGGER, mhd_log, sv, MHD_OPTION_CONNECTION_LIMIT, (unsigned)30000,
        MHD_OPTION_CONNECTION_TIMEOUT, (unsigned)sv->opts.idle_timeout_s,
        MHD_OPTION_CONNECTION_MEMORY_LIMIT, (size_t)8192, MHD_OPTION_LISTEN_BACKLOG_SIZE,
        (unsigned)4096, MHD_OPTION_UNESCAPE_CALLBACK, unescape, NULL, MHD_OPTION_END);
    if (!sv->mhd)
        return SQ_EIO;
    const union MHD_DaemonInfo *ep = MHD_get_daemon_info(sv->mhd, MHD_DAEMON_INFO_EPOLL_FD);
    const union MHD_DaemonInfo *pi = MHD_get_daemon_info(sv->mhd, MHD_DAEMON_INFO_BIND_PORT);
    if (!ep || !pi || uv_poll_init(sv->loop, &sv->poll, ep->epoll_fd) < 0) {
        MHD_stop_daemon(sv->mhd);
        return SQ_ELIBUV;
    }
    sv->port = pi->port;
    return 0;
}

int server_start(uv_loop_t *loop, const server_opts_t *opts, out_t *o, server_t **out)
{
    struct sockaddr_storage ss;
    int family = parse_addr(opts, &ss), rc = SQ_ENOMEM;
    if (family < 0) {
        out_error(o, "serve: '%s' port %d is not a numeric IP address and port", opts->host,
                  opts->port);
        return SQ_EINVAL;
    }
    server_t *t = calloc(1, sizeof(*t));
    if (!t)
        goto fail;
    srv_server_t *sv = &t->sv;
    sv->loop = loop;
    sv->out = o;
    sv->opts = *opts;
    sv->kick = kick;
    rng_seed(&sv->rng, opts->seed);
    if (srv_store_init(&sv->store, opts->history) < 0)
        goto fail_t;
    sv->store.on_event = srv_stream_publish;
    sv->store.on_event_arg = sv;
    if (hist_new_ns(&sv->latency) < 0)
        goto fail_store;
    if (opts->access_log && !(sv->access_log = fopen(opts->access_log, "a"))) {
        out_error(o, "serve: cannot open the access log %s", opts->access_log);
        rc = SQ_EIO;
        goto fail_hist;
    }
    rc = start_mhd(sv, &ss, family);
    if (rc < 0) {
        out_error(o, "serve: cannot listen on %s port %d (in use, or not an address here?)",
                  opts->host, opts->port);
        goto fail_hist;
    }
    sv->poll.data = sv->tick.data = sv->drop.data = sv->idle.data = sv->sweep.data = sv;
    uv_timer_init(loop, &sv->tick);
    uv_timer_init(loop, &sv->drop);
    uv_idle_init(loop, &sv->idle);
    uv_timer_init(loop, &sv->sweep);
    uv_timer_start(&sv->sweep, on_sweep, 2000, 2000);
    sv->handles_open = 5;
    uv_poll_start(&sv->poll, UV_READABLE, on_poll);
    srv_http_set_faults(sv, &opts->faults);
    mhd_run(sv);
    *out = t;
    return 0;
fail_hist:
    if (sv->access_log)
        fclose(sv->access_log);
    hist_free(sv->latency);
fail_store:
    srv_store_close(&sv->store);
fail_t:
    free(t);
fail:
    return rc;
}

int server_port(const server_t *t)
{
    return t->sv.port;
}

static void on_closed(uv_handle_t *h)
{
    srv_server_t *sv = h->data;
    if (--sv->handles_open > 0)
        return;
    void (*cb)(void *) = sv->on_stopped;
    void *arg = sv->on_stopped_arg;
    hist_free(sv->latency);
    srv_store_close(&sv->store);
    if (sv->access_log)
        fclose(sv->access_log);
    free((server_t *)sv); /* sv is the first member of server_t */
    if (cb)
        cb(arg);
}

void server_stop(server_t *t, void (*on_stopped)(void *), void *arg)
{
    srv_server_t *sv = &t->sv;
    sv->on_stopped = on_stopped;
    sv->on_stopped_arg = arg;
    /* libmicrohttpd forbids stopping with suspended connections: end streams and release held
     * requests, let it take them back once, then stop it. */
    sv->draining = true;
    srv_stream_end_all(sv, false);
    srv_http_release_all(sv);
    MHD_run(sv->mhd);
    sv->stopping = true;
    uv_close((uv_handle_t *)&sv->poll, on_closed);
    MHD_stop_daemon(sv->mhd);
    sv->mhd = NULL;
    uv_close((uv_handle_t *)&sv->tick, on_closed);
    uv_close((uv_handle_t *)&sv->drop, on_closed);
    uv_close((uv_handle_t *)&sv->idle, on_closed);
    uv_close((uv_handle_t *)&sv->sweep, on_closed);
}
