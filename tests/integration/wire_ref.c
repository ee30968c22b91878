/* The wire test's reference sender: the best Poisson timing this machine allows a sender at
 * this moment, captured beside squall in the same seconds (tests/integration/wire.sh). It shares
 * no code with squall: CONNS blocking TCP connections to nginx used in turn, one GET per instant
 * of a Poisson process of the given rate, each written at its instant by sleeping on
 * CLOCK_MONOTONIC with an absolute deadline (clock_nanosleep(2)) until 100 µs before it and
 * spinning on clock_gettime(2) for the rest; answers are drained without blocking after each
 * request. A connection carries its next request CONNS requests later, so it never holds an
 * unsent one that the kernel could join to the next in one segment (with one connection, a
 * pause of the VM sent two requests in one packet).
 *
 * Usage: wire_ref PORT RATE_PER_S SECONDS SEED [CONNS]   (CONNS 16 unless given)
 *        wire_ref PORT --at FILE [CONNS]
 * The second form sends at the instants a file gives instead of a Poisson process, as the replay
 * test's reference (tests/integration/replay_nginx.sh): one line per request, "OFFSET_NS PATH",
 * OFFSET_NS from the sender's start in ascending order, PATH sent as "GET PATH".
 * Prints {"requests": N, "ports": [its connections' local ports]} (the last request of each
 * connection asks nginx to close, RFC 9112 section 9.6, so every answer has been read when it
 * ends) and exits 0; 1 on a connection error (printed). The ports let a capture of squall and
 * this sender together tell the two apart (pcap-filter(7) "src port ...").
 *
 * A host that delays this VM's timer wake-ups or takes its CPU in the middle of a gap makes
 * this sender's gaps miss the exponential law as it makes squall's. */
#ifndef _GNU_SOURCE
#define _GNU_SOURCE
#endif
#include <arpa/inet.h>
#include <errno.h>
#include <math.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <time.h>
#include <unistd.h>

#define SPIN_NS INT64_C(100000)

static int64_t now_ns(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (int64_t)ts.tv_sec * 1000000000 + ts.tv_nsec;
}

/* splitmix64 (Steele, Lea, Flood, "Fast splittable pseudorandom number generators", OOPSLA
 * 2014): a uniform in (0, 1) from 53 random bits. */
static double uniform(uint64_t *state)
{
    uint64_t z = (*state += UINT64_C(0x9E3779B97F4A7C15));
    z = (z ^ (z >> 30)) * UINT64_C(0xBF58476D1CE4E5B9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94D049BB133111EB);
    z ^= z >> 31;
    return ((double)(z >> 11) + 0.5) / 9007199254740992.0;
}

#define MAX_CONNS 64

/* Reads whatever answers have arrived, without waiting. Returns 0, or -1 when nginx closed the
 * connection or it failed. */
static int drain(int fd)
{
    char buf[65536];
    for (;;) {
        ssize_t n = recv(fd, buf, sizeof buf, MSG_DONTWAIT);
        if (n == 0)
            return -1;
        if (n < 0)
            return (errno == EAGAIN || errno == EWOULDBLOCK || errno == EINTR) ? 0 : -1;
    }
}

static int open_conn(int port)
{
    int fd = socket(AF_INET, SOCK_STREAM, 0);
    int one = 1;
    struct sockaddr_in sa = {.sin_family = AF_INET, .sin_port = htons((uint16_t)port)};
    sa.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    if (fd < 0 || setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one) != 0 ||
        connect(fd, (struct sockaddr *)&sa, sizeof sa) != 0) {
        perror("wire_ref: connect");
        return -1;
    }
    return fd;
}

static int local_port(int fd)
{
    struct sockaddr_in sa;
    socklen_t len = sizeof sa;
    return getsockname(fd, (struct sockaddr *)&sa, &len) == 0 ? ntohs(sa.sin_port) : -1;
}

/* Sends the closing request on fd and reads to the end, bounded by a 5 s receive timeout. */
static int finish(int fd, int port)
{
    char req[128], buf[65536];
    int len = snprintf(
        req, sizeof req,
        "GET /small.json HTTP/1.1\r\nHost: 127.0.0.1:%d\r\nConnection: close\r\n\r\n", port);
    struct timeval tv = {.tv_sec = 5};
    setsockopt(fd, SOL_SOCKET, SO_RCVTIMEO, &tv, sizeof tv);
    if (send(fd, req, (size_t)len, MSG_NOSIGNAL) != len) {
        perror("wire_ref: send");
        return -1;
    }
    ssize_t n;
    while ((n = recv(fd, buf, sizeof buf, 0)) > 0)
        ;
    if (n < 0) {
        perror("wire_ref: the last answers");
        return -1;
    }
    close(fd);
    return 0;
}

/* Where the next request goes and when: a Poisson process of a rate until an end, or the lines of
 * a schedule file. */
typedef struct {
    FILE *at; /* the schedule, or NULL for Poisson */
    double rate;
    uint64_t rng;
    int64_t start, end;
} instants_t;

/* The next instant (ns, CLOCK_MONOTONIC) into *t and its path into path; false at the end. */
static bool next_instant(instants_t *in, int64_t *t, char *path, size_t cap)
{
    if (!in->at) {
        *t += (int64_t)(-log(uniform(&in->rng)) / in->rate * 1e9);
        snprintf(path, cap, "/small.json");
        return *t < in->end;
    }
    long long off;
    char fmt[32];
    snprintf(fmt, sizeof fmt, "%%lld %%%zus", cap - 1);
    if (fscanf(in->at, fmt, &off, path) != 2)
        return false;
    *t = in->start + off;
    return true;
}

int main(int argc, char **argv)
{
    bool at = argc >= 4 && strcmp(argv[2], "--at") == 0;
    if (at ? argc != 4 && argc != 5 : argc != 5 && argc != 6) {
        fprintf(stderr, "usage: wire_ref PORT RATE_PER_S SECONDS SEED [CONNS]\n"
                        "       wire_ref PORT --at FILE [CONNS]\n");
        return 2;
    }
    int port = atoi(argv[1]);
    instants_t in = {0};
    double seconds = 1;
    if (at) {
        if (!(in.at = fopen(argv[3], "r"))) {
            perror("wire_ref: the schedule");
            return 2;
        }
    } else {
        in.rate = atof(argv[2]);
        seconds = atof(argv[3]);
        in.rng = strtoull(argv[4], NULL, 10);
    }
    int conns = argc == (at ? 5 : 6) ? atoi(argv[argc - 1]) : 16;
    if (port <= 0 || port > 65535 || (!at && !(in.rate > 0)) || !(seconds > 0) || conns < 1 ||
        conns > MAX_CONNS) {
        fprintf(stderr, "wire_ref: bad arguments\n");
        return 2;
    }
    int fds[MAX_CONNS];
    for (int i = 0; i < conns; i++)
        if ((fds[i] = open_conn(port)) < 0)
            return 1;
    char req[640], path[512];
    in.start = now_ns() + 1000000;
    in.end = in.start + (int64_t)(seconds * 1e9);
    int64_t t = in.start;
    long sent = 0;
    while (next_instant(&in, &t, path, sizeof path)) {
        int len =
            snprintf(req, sizeof req, "GET %s HTTP/1.1\r\nHost: 127.0.0.1:%d\r\n\r\n", path, port);
        int64_t wake = t - SPIN_NS;
        if (now_ns() < wake) {
            struct timespec ts = {.tv_sec = wake / 1000000000, .tv_nsec = wake % 1000000000};
            while (clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &ts, NULL) == EINTR)
                ;
        }
        while (now_ns() < t)
            ;
        int fd = fds[sent % conns];
        if (send(fd, req, (size_t)len, MSG_NOSIGNAL) != len) {
            perror("wire_ref: send");
            return 1;
        }
        sent++;
        if (drain(fd) != 0) {
            fprintf(stderr, "wire_ref: nginx closed a connection after %ld requests\n", sent);
            return 1;
        }
    }
    if (in.at)
        fclose(in.at);
    printf("{\"requests\": %ld, \"ports\": [", sent + conns);
    for (int i = 0; i < conns; i++)
        printf("%s%d", i ? ", " : "", local_port(fds[i]));
    printf("]}\n");
    for (int i = 0; i < conns; i++)
        if (finish(fds[i], port) != 0)
            return 1;
    return 0;
}
