/* The ceiling: a minimal raw epoll keep-alive HTTP/1.1 client (no libcurl) that shows what this
 * machine and server can do, so benchmarks report squall as a ratio to it.
 *
 * Usage: ceiling --port P [--host 127.0.0.1|::1] [--path /small.json] [--connections N]
 *                [--duration SECONDS] [--rate R]
 *   --connections N  keep-alive connections, default 1 (1..10000)
 *   --duration S     how long to send, default 5 (0 < S <= 600); the run always ends by then
 *   --rate R         open loop at R requests/s (intended starts i/R, 1 ms tick, requests that
 *                    find no free connection wait in a FIFO); without it, closed loop (each
 *                    connection sends its next request when the previous answer is complete)
 *   --host           loopback only: 127.0.0.0/8 or ::1; anything else is refused
 * Prints one line of JSON: mode, connections, duration_s, requests (complete responses),
 * rps, cpu_us_per_req (getrusage user+sys / requests), errors (non-2xx, closes, unparsable),
 * and for open loop target_rate, due (requests scheduled) and lag_ms {p50, p99, max} of
 * send time - intended start. Responses are parsed just enough: status line and Content-Length
 * (no chunked coding). */
#include <arpa/inet.h>
#include <errno.h>
#include <getopt.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/epoll.h>
#include <sys/resource.h>
#include <sys/socket.h>
#include <unistd.h>

#include "squall/clock.h"
#include "squall/hist.h"

struct conn {
    int fd;
    bool busy, connected;
    int64_t sent_ns;
    size_t len;
    char buf[65536];
};

struct ceiling {
    struct sockaddr_storage addr;
    socklen_t addr_len;
    char req[512];
    size_t req_len;
    int n_conns, ep;
    struct conn *conns;
    double duration, rate;
    int64_t requests, errors, due, next_due_index, queued, t0, t_end;
    hist_t *lag;
};

static int conn_open(struct ceiling *c, struct conn *k)
{
    k->fd = socket(c->addr.ss_family, SOCK_STREAM | SOCK_NONBLOCK | SOCK_CLOEXEC, 0);
    if (k->fd < 0)
        return -1;
    int one = 1;
    setsockopt(k->fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof(one));
    if (connect(k->fd, (struct sockaddr *)&c->addr, c->addr_len) < 0 && errno != EINPROGRESS) {
        close(k->fd);
        return -1;
    }
    k->busy = k->connected = false;
    k->len = 0;
    struct epoll_event ev = {.events = EPOLLIN | EPOLLOUT | EPOLLET, .data.ptr = k};
    return epoll_ctl(c->ep, EPOLL_CTL_ADD, k->fd, &ev);
}

static void conn_reopen(struct ceiling *c, struct conn *k)
{
    if (k->busy)
        c->errors++;
    close(k->fd);
    if (conn_open(c, k) < 0) {
        c->errors++;
        k->fd = -1;
    }
}

/* Sends one request; a keep-alive request this small always fits the socket buffer. */
static void conn_send(struct ceiling *c, struct conn *k, int64_t intended)
{
    int64_t t = clock_mono_ns();
    if (write(k->fd, c->req, c->req_len) != (ssize_t)c->req_len) {
        c->errors++;
        conn_reopen(c, k);
        return;
    }
    k->busy = true;
    k->sent_ns = t;
    if (intended)
        hist_record(c->lag, t - intended);
}

/* Length of one complete response at the start of buf, 0 if incomplete, -1 if unparsable. */
static long response_len(const char *buf, size_t len, int *status)
{
    const char *end = memmem(buf, len, "\r\n\r\n", 4);
    if (!end)
        return len > 32768 ? -1 : 0;
    if (len < 12 || strncmp(buf, "HTTP/1.", 7) != 0)
        return -1;
    *status = atoi(buf + 9);
    long cl = -1;
    for (const char *p = buf; p && p < end; p = memchr(p, '\n', (size_t)(end - p))) {
        p++;
        if (strncasecmp(p, "content-length:", 15) == 0)
            cl = strtol(p + 15, NULL, 10);
    }
    if (cl < 0)
        return -1;
    long total = (long)(end + 4 - buf) + cl;
    return (size_t)total <= len ? total : 0;
}

static bool next_due(struct ceiling *c, int64_t now, int64_t *intended)
{
    if (c->rate <= 0 || !c->queued)
        return false;
    *intended = c->t0 + (int64_t)((double)c->next_due_index * 1e9 / c->rate);
    if (*intended > now)
        return false;
    c->next_due_index++;
    c->queued--;
    return true;
}

static void on_readable(struct ceiling *c, struct conn *k, int64_t now)
{
    for (;;) {
        ssize_t n = read(k->fd, k->buf + k->len, sizeof(k->buf) - k->len);
        if (n == 0 || (n < 0 && errno != EAGAIN)) {
            conn_reopen(c, k);
            return;
        }
        if (n < 0)
            break;
        k->len += (size_t)n;
    }
    int status = 0;
    long r;
    while (k->busy && (r = response_len(k->buf, k->len, &status)) != 0) {
        if (r < 0) {
            c->errors++;
            conn_reopen(c, k);
            return;
        }
        memmove(k->buf, k->buf + r, k->len - (size_t)r);
        k->len -= (size_t)r;
        k->busy = false;
        c->requests++;
        if (status < 200 || status > 299)
            c->errors++;
        int64_t intended;
        if (now < c->t_end && c->rate <= 0)
            conn_send(c, k, 0);
        else if (now < c->t_end && next_due(c, now, &intended))
            conn_send(c, k, intended);
    }
}

/* Open loop: moves what is due into the FIFO and hands it to idle connections. */
static void dispatch(struct ceiling *c, int64_t now)
{
    if (c->rate <= 0)
        return;
    int64_t due_now = (int64_t)((double)(now - c->t0) * c->rate / 1e9) + 1;
    int64_t limit = (int64_t)(c->duration * c->rate);
    if (due_now > limit)
        due_now = limit;
    if (due_now > c->due) {
        c->queued += due_now - c->due;
        c->due = due_now;
    }
    int64_t intended;
    for (int i = 0; i < c->n_conns && c->queued; i++) {
        struct conn *k = &c->conns[i];
        if (k->fd >= 0 && k->connected && !k->busy && next_due(c, now, &intended))
            conn_send(c, k, intended);
    }
}

static void run_clients(struct ceiling *c)
{
    struct epoll_event evs[256];
    c->t0 = clock_mono_ns();
    c->t_end = c->t0 + (int64_t)(c->duration * 1e9);
    int64_t now = c->t0;
    /* Bounded: stops at t_end, plus at most 2 s for answers still in flight. */
    while (now < c->t_end + 2000000000LL) {
        int busy = 0;
        for (int i = 0; i < c->n_conns; i++)
            busy += c->conns[i].busy;
        if (now >= c->t_end && !busy)
            break;
        int n = epoll_wait(c->ep, evs, 256, c->rate > 0 ? 1 : 100);
        now = clock_mono_ns();
        for (int i = 0; i < n; i++) {
            struct conn *k = evs[i].data.ptr;
            if ((evs[i].events & EPOLLOUT) && !k->connected) {
                k->connected = true;
                if (c->rate <= 0 && now < c->t_end && !k->busy)
                    conn_send(c, k, 0);
            }
            if (evs[i].events & (EPOLLIN | EPOLLERR | EPOLLHUP))
                on_readable(c, k, now);
        }
        if (now < c->t_end)
            dispatch(c, now);
    }
}

static int parse_host(struct ceiling *c, const char *host, int port)
{
    struct sockaddr_in *a4 = (struct sockaddr_in *)&c->addr;
    struct sockaddr_in6 *a6 = (struct sockaddr_in6 *)&c->addr;
    if (inet_pton(AF_INET, host, &a4->sin_addr) == 1) {
        if ((ntohl(a4->sin_addr.s_addr) >> 24) != 127)
            return -1;
        a4->sin_family = AF_INET;
        a4->sin_port = htons((uint16_t)port);
        c->addr_len = sizeof(*a4);
        return 0;
    }
    if (inet_pton(AF_INET6, host, &a6->sin6_addr) == 1 && IN6_IS_ADDR_LOOPBACK(&a6->sin6_addr)) {
        a6->sin6_family = AF_INET6;
        a6->sin6_port = htons((uint16_t)port);
        c->addr_len = sizeof(*a6);
        return 0;
    }
    return -1;
}

static double cpu_us(void)
{
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    return ru.ru_utime.tv_sec * 1e6 + ru.ru_utime.tv_usec + ru.ru_stime.tv_sec * 1e6 +
           ru.ru_stime.tv_usec;
}

static void print_figures(const struct ceiling *c, double cpu)
{
    double secs = c->duration;
    printf("{\"mode\":\"%s\",\"connections\":%d,\"duration_s\":%.3f,\"requests\":%lld,"
           "\"rps\":%.1f,\"cpu_us_per_req\":%.2f,\"errors\":%lld",
           c->rate > 0 ? "open" : "closed", c->n_conns, secs, (long long)c->requests,
           (double)c->requests / secs, c->requests ? cpu / (double)c->requests : 0.0,
           (long long)c->errors);
    if (c->rate > 0)
        printf(",\"target_rate\":%.1f,\"due\":%lld,\"lag_ms\":{\"p50\":%.3f,\"p99\":%.3f,"
               "\"max\":%.3f}",
               c->rate, (long long)c->due, hist_value_at(c->lag, 50) / 1e6,
               hist_value_at(c->lag, 99) / 1e6, hist_max(c->lag) / 1e6);
    printf("}\n");
}

int main(int argc, char **argv)
{
    static struct ceiling c;
    static const struct option opts[] = {{"host", 1, 0, 'h'},
                                         {"port", 1, 0, 'p'},
                                         {"path", 1, 0, 'P'},
                                         {"connections", 1, 0, 'c'},
                                         {"duration", 1, 0, 'd'},
                                         {"rate", 1, 0, 'r'},
                                         {0, 0, 0, 0}};
    const char *host = "127.0.0.1", *path = "/small.json";
    int port = 0, ch;
    c.n_conns = 1;
    c.duration = 5;
    while ((ch = getopt_long(argc, argv, "", opts, NULL)) != -1) {
        switch (ch) {
        case 'h':
            host = optarg;
            break;
        case 'p':
            port = atoi(optarg);
            break;
        case 'P':
            path = optarg;
            break;
        case 'c':
            c.n_conns = atoi(optarg);
            break;
        case 'd':
            c.duration = atof(optarg);
            break;
        case 'r':
            c.rate = atof(optarg);
            break;
        default:
            return 2;
        }
    }
    if (port < 1 || port > 65535 || c.n_conns < 1 || c.n_conns > 10000 || c.duration <= 0 ||
        c.duration > 600 || c.rate < 0 || strlen(path) > 256 || path[0] != '/') {
        fprintf(stderr, "ceiling: bad arguments; see the header of tools/bench/ceiling.c\n");
        return 2;
    }
    if (parse_host(&c, host, port) < 0) {
        fprintf(stderr, "ceiling: refusing %s: loopback addresses only\n", host);
        return 2;
    }
    c.req_len = (size_t)snprintf(c.req, sizeof(c.req), "GET %s HTTP/1.1\r\nHost: %s:%d\r\n\r\n",
                                 path, host, port);
    c.conns = calloc((size_t)c.n_conns, sizeof(*c.conns));
    c.ep = epoll_create1(EPOLL_CLOEXEC);
    if (!c.conns || c.ep < 0 || hist_new_ns(&c.lag))
        return 1;
    for (int i = 0; i < c.n_conns; i++)
        if (conn_open(&c, &c.conns[i]) < 0) {
            fprintf(stderr, "ceiling: cannot open connection %d: %s\n", i, strerror(errno));
            return 1;
        }
    double cpu0 = cpu_us();
    run_clients(&c);
    print_figures(&c, cpu_us() - cpu0);
    for (int i = 0; i < c.n_conns; i++)
        if (c.conns[i].fd >= 0)
            close(c.conns[i].fd);
    close(c.ep);
    free(c.conns);
    hist_free(c.lag);
    return 0;
}
