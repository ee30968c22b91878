/* What libcurl 7.88's dead-connection check costs here (issue 12, RESULTS.md "Aligned ticks"):
 * before the first request a second or more after its last check, a multi handle polls each of
 * its idle connections once with a zero timeout (url.c, prune_dead_connections). This opens N
 * idle keep-alive connections to a loopback target and times N such polls, 7 rounds 0.3 s
 * apart (the connections cool down between rounds, as between ticks). Not a test.
 *   pollcost PORT N      (N connections to 127.0.0.1:PORT; raise `ulimit -n` for N > 1,000) */
#include <arpa/inet.h>
#include <poll.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/socket.h>
#include <time.h>
#include <unistd.h>

static double now_us(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec * 1e6 + (double)t.tv_nsec / 1e3;
}

int main(int argc, char **argv)
{
    if (argc != 3) {
        fprintf(stderr, "usage: pollcost PORT N\n");
        return 2;
    }
    int port = atoi(argv[1]), n = atoi(argv[2]);
    if (port < 1 || port > 65535 || n < 1 || n > 100000) {
        fprintf(stderr, "pollcost: PORT 1..65535, N 1..100000\n");
        return 2;
    }
    int *fd = malloc((size_t)n * sizeof(*fd));
    struct sockaddr_in a = {.sin_family = AF_INET, .sin_port = htons((uint16_t)port)};
    inet_pton(AF_INET, "127.0.0.1", &a.sin_addr);
    for (int i = 0; fd && i < n; i++) {
        fd[i] = socket(AF_INET, SOCK_STREAM, 0);
        if (fd[i] < 0 || connect(fd[i], (struct sockaddr *)&a, sizeof a) != 0) {
            perror("pollcost: connect");
            return 1;
        }
    }
    for (int r = 0; fd && r < 7; r++) {
        usleep(300000);
        double t0 = now_us();
        for (int i = 0; i < n; i++) {
            /* The events libcurl 7.88 asks for (strace of squall run, a storm tick). */
            struct pollfd p = {fd[i], POLLIN | POLLPRI | POLLRDNORM | POLLRDBAND, 0};
            poll(&p, 1, 0);
        }
        double t1 = now_us();
        printf("%d polls: %.0f us (%.2f us each)\n", n, t1 - t0, (t1 - t0) / n);
    }
    for (int i = 0; fd && i < n; i++)
        close(fd[i]);
    free(fd);
    return 0;
}
