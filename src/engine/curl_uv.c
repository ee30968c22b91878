/* The libcurl <-> libuv glue: sockets to uv_poll, libcurl's timer to one uv_timer (0 ms through
 * a uv_idle, never a 0 ms re-arm: libuv issues #4245/#4250), and the loop-lag probe. */
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <unistd.h>

#include "eng_int.h"
#include "squall/clock.h"
#include "squall/err.h"

/* Drains finished transfers; each is removed from libcurl here, never inside a callback. */
static void drain(struct eng_multi *mh)
{
    eng_t *e = mh->eng;
    CURLMsg *m;
    int left;
    while ((m = curl_multi_info_read(mh->m, &left))) {
        if (m->msg != CURLMSG_DONE)
            continue;
        struct eng_xfer *x = NULL;
        curl_easy_getinfo(m->easy_handle, CURLINFO_PRIVATE, (char **)&x);
        CURLcode rc = m->data.result;
        curl_multi_remove_handle(mh->m, m->easy_handle);
        e->glue->done(e, x, rc);
    }
}

/* One socket action on one multi (it also starts the transfers added to it: libcurl runs every
 * expired timer, and a new transfer expires at once), then its finished transfers. */
static void act(struct eng_multi *mh, curl_socket_t fd, int ev_bitmask)
{
    eng_t *e = mh->eng;
    int running;
    mh->dirty = false;
    e->in_curl++;
    curl_multi_socket_action(mh->m, fd, ev_bitmask, &running);
    e->in_curl--;
    drain(mh);
}

void eng_glue_added(struct eng_multi *mh)
{
    if (mh->dirty)
        return;
    mh->dirty = true;
    mh->eng->dirty[mh->eng->n_dirty++] = mh;
}

/* Transfers admitted while libcurl acted (a closed-loop answer's next request, a queued one
 * that found a free connection) are driven at once with a timeout action, so their requests are
 * written in this same wake-up rather than on the next loop pass's 0 ms timer. Bounded: each
 * round can only admit what the previous one freed. */
#define FLUSH_ROUNDS 8

static void flush_rounds(eng_t *e)
{
    for (int round = 0; round < FLUSH_ROUNDS && !e->closing; round++) {
        e->glue->after_action(e);
        if (!e->n_dirty)
            break;
        while (e->n_dirty && !e->closing) {
            struct eng_multi *mh = e->dirty[--e->n_dirty];
            if (mh->dirty)
                act(mh, CURL_SOCKET_TIMEOUT, 0);
        }
    }
}

void eng_glue_action(struct eng_multi *mh, curl_socket_t fd, int ev_bitmask)
{
    eng_t *e = mh->eng;
    e->acting++;
    act(mh, fd, ev_bitmask);
    flush_rounds(e);
    e->acting--;
}

void eng_glue_flush(eng_t *e)
{
    if (e->in_curl || e->acting || e->closing || !e->n_dirty)
        return;
    e->acting++;
    while (e->n_dirty && !e->closing) {
        struct eng_multi *mh = e->dirty[--e->n_dirty];
        if (mh->dirty)
            act(mh, CURL_SOCKET_TIMEOUT, 0);
    }
    flush_rounds(e);
    e->acting--;
}

static void sock_stop(struct eng_sock *s)
{
    if (s->parked)
        uv_ref((uv_handle_t *)&s->poll);
    s->parked = false;
    s->events = 0;
    uv_poll_stop(&s->poll);
}

static void on_poll(uv_poll_t *p, int status, int events)
{
    struct eng_sock *s = p->data;
    /* An idle connection woke up (the server closed it, or sent h2 frames): libcurl is not
     * watching it and will notice on reuse, so only stop polling. */
    if (s->parked) {
        sock_stop(s);
        return;
    }
    int flags = 0;
    if (status < 0) {
        s->events = 0; /* libuv stopped the handle before reporting the error */
        flags = CURL_CSELECT_ERR;
    }
    if (events & UV_READABLE)
        flags |= CURL_CSELECT_IN;
    if (events & UV_WRITABLE)
        flags |= CURL_CSELECT_OUT;
    eng_t *e = s->eng;
    if (e->cfg.on_io && !e->acting)
        e->cfg.on_io(e->cfg.user);
    /* The hook may have made libcurl close this socket (it drove other transfers). */
    if (e->socks[s->fd] != s || (!s->events && status >= 0))
        return;
    eng_glue_action(s->mh, s->fd, flags);
}

static struct eng_sock *sock_get(eng_t *e, curl_socket_t fd, bool create)
{
    if (fd < 0)
        return NULL;
    if ((size_t)fd >= e->n_socks_cap) {
        if (!create)
            return NULL;
        size_t cap = e->n_socks_cap ? e->n_socks_cap : 64;
        while (cap <= (size_t)fd)
            cap *= 2;
        struct eng_sock **n = realloc(e->socks, cap * sizeof(*n));
        if (!n)
            return NULL;
        memset(n + e->n_socks_cap, 0, (cap - e->n_socks_cap) * sizeof(*n));
        e->socks = n;
        e->n_socks_cap = cap;
    }
    if (!e->socks[fd] && create) {
        struct eng_sock *s = calloc(1, sizeof(*s));
        if (!s || uv_poll_init_socket(e->loop, &s->poll, fd) != 0) {
            free(s);
            return NULL;
        }
        s->eng = e;
        s->fd = fd;
        s->poll.data = s;
        e->socks[fd] = s;
    }
    return e->socks[fd];
}

static void sock_closed(uv_handle_t *h)
{
    free(h->data);
}

/* Forgets a socket's context; uv_close stops the poll synchronously, so the fd may close next. */
static void sock_drop(eng_t *e, struct eng_sock *s)
{
    e->socks[s->fd] = NULL;
    uv_close((uv_handle_t *)&s->poll, sock_closed);
}

/* uv_poll_start always removes the fd from epoll and adds it again (libuv 1.44 src/unix/poll.c),
 * and libcurl removes a keep-alive socket after every response and re-adds it for the next
 * request. So a socket stays polled for reading while idle ("parked", unref'd so it does not keep
 * the loop alive), and an unchanged request never touches epoll. */
static int on_socket(CURL *easy, curl_socket_t fd, int what, void *userp, void *socketp)
{
    (void)easy;
    (void)socketp;
    struct eng_multi *mh = userp;
    eng_t *e = mh->eng;
    if (what == CURL_POLL_REMOVE) {
        struct eng_sock *s = sock_get(e, fd, false);
        if (!s)
            return 0;
        if (!s->ours) {
            sock_drop(e, s); /* we will not see it close: forget it now */
        } else if (s->events == UV_READABLE && !s->parked) {
            s->parked = true;
            uv_unref((uv_handle_t *)&s->poll);
        } else if (!s->parked) {
            sock_stop(s);
        }
        return 0;
    }
    struct eng_sock *s = sock_get(e, fd, true);
    if (!s) {
        out_error(e->out, "engine: cannot watch socket %d", (int)fd);
        return -1;
    }
    s->mh = mh;
    int ev = 0;
    if (what & CURL_POLL_IN)
        ev |= UV_READABLE;
    if (what & CURL_POLL_OUT)
        ev |= UV_WRITABLE;
    if (s->parked) {
        s->parked = false;
        uv_ref((uv_handle_t *)&s->poll);
    }
    if (ev != s->events) {
        s->events = ev;
        uv_poll_start(&s->poll, ev, on_poll);
    }
    return 0;
}

curl_socket_t eng_glue_opensocket(void *clientp, curlsocktype purpose, struct curl_sockaddr *a)
{
    struct eng_xfer *x = clientp;
    eng_t *e = x->eng;
    if (purpose != CURLSOCKTYPE_IPCXN)
        return CURL_SOCKET_BAD;
    curl_socket_t fd = socket(a->family, a->socktype | SOCK_CLOEXEC, a->protocol);
    if (fd < 0)
        return CURL_SOCKET_BAD;
    struct eng_sock *s = sock_get(e, fd, true);
    if (!s) {
        close(fd);
        return CURL_SOCKET_BAD;
    }
    s->ours = true;
    s->mh = x->mh;
    e->n_socks++;
    if (x->opener) {
        x->opener = false;
        e->openers_pending--;
    }
    return fd;
}

int eng_glue_closesocket(void *clientp, curl_socket_t fd)
{
    eng_t *e = clientp;
    struct eng_sock *s = sock_get(e, fd, false);
    if (s && s->ours) {
        e->n_socks--;
        sock_drop(e, s);
    }
    return close(fd);
}

static void on_timer(uv_timer_t *t)
{
    eng_glue_action(t->data, CURL_SOCKET_TIMEOUT, 0);
}

static void on_zero(uv_idle_t *i)
{
    uv_idle_stop(i);
    eng_glue_action(i->data, CURL_SOCKET_TIMEOUT, 0);
}

static int on_curl_timer(CURLM *multi, long timeout_ms, void *userp)
{
    (void)multi;
    struct eng_multi *mh = userp;
    if (timeout_ms < 0) {
        uv_timer_stop(&mh->timer);
        uv_idle_stop(&mh->zero);
    } else if (timeout_ms == 0) {
        uv_timer_stop(&mh->timer);
        uv_idle_start(&mh->zero, on_zero);
    } else {
        uv_idle_stop(&mh->zero);
        uv_timer_start(&mh->timer, on_timer, (uint64_t)timeout_ms, 0);
    }
    return 0;
}

/* A loop pass polls between prepare and check; the callbacks between check and the next prepare
 * are the pass's work, which delays every event that became ready meanwhile. */
static void on_check(uv_check_t *c)
{
    eng_t *e = c->data;
    e->pass_start_ns = clock_mono_ns();
}

static void on_prepare(uv_prepare_t *p)
{
    eng_t *e = p->data;
    if (!e->pass_start_ns)
        return;
    int64_t busy = clock_mono_ns() - e->pass_start_ns;
    e->busy_ns += busy;
    if (busy > e->max_busy_ns)
        e->max_busy_ns = busy;
}

static int multi_init(eng_t *e, struct eng_multi *mh, int conns)
{
    mh->eng = e;
    mh->cap = e->cfg.http == ENG_HTTP_2 ? conns * e->streams : conns;
    if (!(mh->m = curl_multi_init()))
        return SQ_ELIBCURL;
    curl_multi_setopt(mh->m, CURLMOPT_SOCKETFUNCTION, on_socket);
    curl_multi_setopt(mh->m, CURLMOPT_SOCKETDATA, mh);
    curl_multi_setopt(mh->m, CURLMOPT_TIMERFUNCTION, on_curl_timer);
    curl_multi_setopt(mh->m, CURLMOPT_TIMERDATA, mh);
    curl_multi_setopt(mh->m, CURLMOPT_MAX_HOST_CONNECTIONS, (long)conns);
    curl_multi_setopt(mh->m, CURLMOPT_MAX_TOTAL_CONNECTIONS, (long)conns);
    curl_multi_setopt(mh->m, CURLMOPT_MAXCONNECTS, (long)conns);
    if (e->cfg.http == ENG_HTTP_2) {
        curl_multi_setopt(mh->m, CURLMOPT_PIPELINING, CURLPIPE_MULTIPLEX);
        curl_multi_setopt(mh->m, CURLMOPT_MAX_CONCURRENT_STREAMS, (long)e->streams);
    } else {
        curl_multi_setopt(mh->m, CURLMOPT_PIPELINING, CURLPIPE_NOTHING);
    }
    return 0;
}

/* Connections per multi handle when split. */
static int split_per(int conns)
{
    int per = (conns + ENG_MAX_MULTIS - 1) / ENG_MAX_MULTIS;
    return per < ENG_MULTI_CONNS ? ENG_MULTI_CONNS : per;
}

int eng_split_multis(int connections)
{
    int per = split_per(connections);
    return (connections + per - 1) / per;
}

int eng_glue_start(eng_t *e, const eng_glue_ops_t *ops)
{
    e->glue = ops;
    int conns = e->cfg.connections;
    int per = e->cfg.split && e->cfg.http == ENG_HTTP_1_1 ? split_per(conns) : conns;
    int n = (conns + per - 1) / per;
    e->multis = calloc((size_t)n, sizeof(*e->multis));
    e->dirty = calloc((size_t)n, sizeof(*e->dirty));
    if (!e->multis || !e->dirty)
        return SQ_ENOMEM;
    /* libcurl first: on failure no loop handle exists yet, and the caller frees plain memory. */
    for (int i = 0; i < n; i++) {
        int left = conns - i * per;
        if (multi_init(e, &e->multis[i], left < per ? left : per)) {
            for (int j = 0; j < i; j++)
                curl_multi_cleanup(e->multis[j].m);
            return SQ_ELIBCURL;
        }
    }
    e->n_multis = n;
    for (int i = 0; i < n; i++) {
        struct eng_multi *mh = &e->multis[i];
        uv_timer_init(e->loop, &mh->timer);
        uv_idle_init(e->loop, &mh->zero);
        mh->timer.data = mh->zero.data = mh;
    }
    uv_prepare_init(e->loop, &e->prepare);
    uv_check_init(e->loop, &e->check);
    uv_timer_init(e->loop, &e->grace);
    e->prepare.data = e->check.data = e->grace.data = e;
    e->open_handles = 3 + 2 * n;
    uv_prepare_start(&e->prepare, on_prepare);
    uv_check_start(&e->check, on_check);
    /* The lag probe alone must not keep the loop alive. */
    uv_unref((uv_handle_t *)&e->prepare);
    uv_unref((uv_handle_t *)&e->check);
    return 0;
}

/* Shutdown order: transfers are already removed; cleaning up a multi closes its connections
 * through our closesocket (closing their polls), and the socket callback may run during it
 * (libcurl docs, CURLMOPT_SOCKETFUNCTION: "likely to happen during a call to curl_multi_cleanup
 * when cached connections are closed"); then our own handles close with uv_close and the last
 * close callback frees the engine (libuv 1.44 docs, handle.rst: memory only after the close
 * callback). */
void eng_glue_close(eng_t *e)
{
    for (int i = 0; i < e->n_multis; i++) {
        struct eng_multi *mh = &e->multis[i];
        if (mh->m) {
            e->in_curl++;
            curl_multi_cleanup(mh->m);
            e->in_curl--;
            mh->m = NULL;
        }
    }
    for (size_t fd = 0; fd < e->n_socks_cap; fd++)
        if (e->socks[fd])
            sock_drop(e, e->socks[fd]);
    for (int i = 0; i < e->n_multis; i++) {
        struct eng_multi *mh = &e->multis[i];
        mh->timer.data = mh->zero.data = e; /* the close callback frees through the engine */
        uv_close((uv_handle_t *)&mh->timer, e->glue->closed);
        uv_close((uv_handle_t *)&mh->zero, e->glue->closed);
    }
    uv_close((uv_handle_t *)&e->prepare, e->glue->closed);
    uv_close((uv_handle_t *)&e->check, e->glue->closed);
    uv_close((uv_handle_t *)&e->grace, e->glue->closed);
}
