/* libFuzzer target for the embedded target's request handling (src/server/): the server runs
 * in this process on a loopback port (its own libuv loop on a thread), and every input is sent
 * as raw bytes on a new connection: request lines, headers, bodies, several requests in one.
 * The reply is read until the server closes or 200 ms pass. A crash or a sanitizer report in
 * the server is the finding. Loopback only. */
#include <arpa/inet.h>
#include <netinet/in.h>
#include <poll.h>
#include <pthread.h>
#include <string.h>
#include <sys/socket.h>

#include "fuzz_util.h"
#include "squall/server.h"

static int port;

static void *serve(void *arg)
{
    (void)arg;
    static uv_loop_t loop;
    server_opts_t opts;
    server_t *sv;
    out_t *o = out_new_capture();
    server_opts_init(&opts);
    opts.host = "127.0.0.1";
    opts.port = 0;
    opts.history = 100;
    if (!o || uv_loop_init(&loop) || server_start(&loop, &opts, o, &sv))
        abort();
    __atomic_store_n(&port, server_port(sv), __ATOMIC_RELEASE);
    uv_run(&loop, UV_RUN_DEFAULT);
    return NULL;
}

static void start(void)
{
    pthread_t t;
    if (pthread_create(&t, NULL, serve, NULL))
        abort();
    while (!__atomic_load_n(&port, __ATOMIC_ACQUIRE))
        usleep(1000);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (!port)
        start();
    int fd = socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
    struct sockaddr_in a = {.sin_family = AF_INET, .sin_port = htons((uint16_t)port)};
    a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    if (fd < 0 || connect(fd, (struct sockaddr *)&a, sizeof a))
        abort();
    for (size_t at = 0; at < size;) {
        ssize_t n = send(fd, data + at, size - at, MSG_NOSIGNAL);
        if (n <= 0)
            break;
        at += (size_t)n;
    }
    shutdown(fd, SHUT_WR);
    char buf[65536];
    struct pollfd p = {.fd = fd, .events = POLLIN};
    while (poll(&p, 1, 200) == 1 && recv(fd, buf, sizeof buf, 0) > 0)
        ;
    close(fd);
    return 0;
}
