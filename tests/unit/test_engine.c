/* Unit tests of the engine's contracts that need no HTTP server: config checks, the submit and
 * callback contract, cancellation of queued and in-flight requests, unreachability, and a clean
 * shutdown (uv_loop_close() == 0). Traffic goes only to loopback sockets this test owns. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <cmocka.h>

#include <netinet/in.h>
#include <stdio.h>
#include <string.h>
#include <sys/socket.h>
#include <unistd.h>

#include "squall/engine.h"
#include "squall/err.h"

struct seen {
    int done, by_outcome[ENG_OUT_COUNT], unreachable, never_admitted, sent;
    eng_t *eng;
    bool stop_on_unreachable;
};

/* A loopback TCP socket bound to a kernel-chosen port, listening or not. A SYN to a port bound
 * but not listening is answered with RST (RFC 9293 §3.10.7.1), i.e. ECONNREFUSED; a listening
 * socket that never accepts completes handshakes from its backlog, so requests hang. */
static int loopback_socket(bool listening, int *port)
{
    int fd = socket(AF_INET, SOCK_STREAM, 0);
    struct sockaddr_in a = {.sin_family = AF_INET, .sin_addr.s_addr = htonl(INADDR_LOOPBACK)};
    socklen_t len = sizeof(a);
    assert_true(fd >= 0);
    assert_int_equal(bind(fd, (struct sockaddr *)&a, sizeof(a)), 0);
    if (listening)
        assert_int_equal(listen(fd, 16), 0);
    assert_int_equal(getsockname(fd, (struct sockaddr *)&a, &len), 0);
    *port = ntohs(a.sin_port);
    return fd;
}

static void on_done(void *user, const eng_result_t *r)
{
    struct seen *s = user;
    s->done++;
    s->by_outcome[r->outcome]++;
    if (!r->admitted_ns)
        s->never_admitted++;
    if (r->sent_ns)
        s->sent++;
    assert_true(r->done_ns >= r->intended_ns);
}

static void on_unreachable(void *user)
{
    struct seen *s = user;
    s->unreachable++;
    if (s->stop_on_unreachable)
        eng_stop(s->eng, 0);
}

static eng_t *engine(uv_loop_t *loop, out_t *o, int port, int conns, struct seen *s)
{
    char url[64];
    snprintf(url, sizeof(url), "http://127.0.0.1:%d", port);
    eng_config_t c = {.base_url = url,
                      .connections = conns,
                      .timeout_ms = 5000,
                      .on_unreachable = on_unreachable,
                      .user = s};
    eng_t *e = NULL;
    assert_int_equal(eng_new(loop, &c, o, &e), 0);
    s->eng = e;
    return e;
}

static void close_all(uv_loop_t *loop, eng_t *e)
{
    eng_free(e);
    uv_run(loop, UV_RUN_DEFAULT);
    /* Every handle the engine opened was closed through uv_close (libuv docs, handle.rst). */
    assert_int_equal(uv_loop_close(loop), 0);
}

static void test_config_rejected(void **state)
{
    (void)state;
    uv_loop_t loop;
    uv_loop_init(&loop);
    out_t *o = out_new_capture();
    eng_t *e = NULL;
    eng_config_t bad_scheme = {.base_url = "ftp://127.0.0.1:21", .connections = 1};
    eng_config_t no_conns = {.base_url = "http://127.0.0.1:1", .connections = 0};
    eng_config_t cert_only = {
        .base_url = "https://127.0.0.1:1", .connections = 1, .cert_file = "client.pem"};
    assert_int_equal(eng_new(&loop, &bad_scheme, o, &e), SQ_EINVAL);
    assert_int_equal(eng_new(&loop, &no_conns, o, &e), SQ_EINVAL);
    assert_int_equal(eng_new(&loop, &cert_only, o, &e), SQ_EINVAL);
    assert_null(e);
    assert_int_equal(out_errors(o), 3);
    assert_non_null(strstr(out_captured_diag(o), "http:// or https://"));
    out_free(o);
    assert_int_equal(uv_loop_close(&loop), 0);
}

static void test_submit_contract(void **state)
{
    (void)state;
    uv_loop_t loop;
    uv_loop_init(&loop);
    out_t *o = out_new_capture();
    struct seen s = {0};
    int port, fd = loopback_socket(false, &port);
    eng_t *e = engine(&loop, o, port, 1, &s);
    eng_req_t no_cb = {.path = "/small.json", .user = &s};
    eng_req_t no_path = {.on_done = on_done, .user = &s};
    assert_int_equal(eng_submit(e, &no_cb), SQ_EINVAL);
    assert_int_equal(eng_submit(e, &no_path), SQ_EINVAL);
    eng_stop(e, 0);
    eng_req_t ok = {.path = "/small.json", .on_done = on_done, .user = &s};
    assert_int_equal(eng_submit(e, &ok), SQ_ESTOPPED);
    /* A call that fails never calls the callback (engine.h). */
    assert_int_equal(s.done, 0);
    close_all(&loop, e);
    assert_int_equal(s.done, 0);
    close(fd);
    out_free(o);
}

/* With one connection, one request is admitted and the other four wait in our queue; stopping
 * at once cancels all five, the queued ones never having reached libcurl. */
static void test_stop_cancels_queue(void **state)
{
    (void)state;
    uv_loop_t loop;
    uv_loop_init(&loop);
    out_t *o = out_new_capture();
    struct seen s = {0};
    int port, fd = loopback_socket(false, &port);
    eng_t *e = engine(&loop, o, port, 1, &s);
    eng_req_t r = {.path = "/small.json", .on_done = on_done, .user = &s};
    for (int i = 0; i < 5; i++)
        assert_int_equal(eng_submit(e, &r), 0);
    assert_int_equal(s.done, 0); /* never from inside eng_submit */
    eng_stats_t st;
    eng_stats(e, &st, false);
    assert_int_equal(st.in_flight, 1);
    assert_int_equal(st.queued, 4);
    assert_int_equal(st.capacity, 1);
    eng_stop(e, 0);
    assert_int_equal(s.done, 5);
    assert_int_equal(s.by_outcome[ENG_OUT_CANCELLED], 5);
    assert_int_equal(s.never_admitted, 4);
    close_all(&loop, e);
    close(fd);
    out_free(o);
}

/* Three refused connects in a row make the target unreachable, reported once. */
static void test_refused_is_unreachable(void **state)
{
    (void)state;
    uv_loop_t loop;
    uv_loop_init(&loop);
    out_t *o = out_new_capture();
    struct seen s = {.stop_on_unreachable = true};
    int port, fd = loopback_socket(false, &port);
    eng_t *e = engine(&loop, o, port, 2, &s);
    eng_req_t r = {.path = "/small.json", .on_done = on_done, .user = &s};
    for (int i = 0; i < 50; i++)
        assert_int_equal(eng_submit(e, &r), 0);
    uv_run(&loop, UV_RUN_DEFAULT);
    assert_int_equal(s.unreachable, 1);
    assert_int_equal(s.done, 50);
    assert_true(s.by_outcome[ENG_OUT_REFUSED] >= 3);
    assert_int_equal(s.by_outcome[ENG_OUT_REFUSED] + s.by_outcome[ENG_OUT_CANCELLED], 50);
    eng_stats_t st;
    eng_stats(e, &st, true);
    assert_true(st.unreachable);
    assert_string_equal(st.why, "refuses connections");
    assert_int_equal(st.completed, 50);
    close_all(&loop, e);
    close(fd);
    out_free(o);
}

/* A server that never answers: in-flight requests are cancelled when the grace ends. */
static void test_grace_cancels_in_flight(void **state)
{
    (void)state;
    uv_loop_t loop;
    uv_loop_init(&loop);
    out_t *o = out_new_capture();
    struct seen s = {0};
    int port, fd = loopback_socket(true, &port);
    eng_t *e = engine(&loop, o, port, 2, &s);
    eng_req_t r = {.path = "/small.json", .on_done = on_done, .user = &s};
    assert_int_equal(eng_submit(e, &r), 0);
    assert_int_equal(eng_submit(e, &r), 0);
    /* Let both connect and send: non-blocking passes 1 ms apart, at most 2,000 until both
     * sockets exist and 20 more for the requests to be written. */
    eng_stats_t st = {0};
    for (int i = 0, extra = 0; i < 2000 && extra < 20; i++) {
        uv_run(&loop, UV_RUN_NOWAIT);
        usleep(1000);
        eng_stats(e, &st, false);
        extra += st.connections == 2;
    }
    assert_int_equal(st.connections, 2);
    eng_stop(e, 20);
    assert_int_equal(s.done, 0);
    uv_run(&loop, UV_RUN_DEFAULT);
    assert_int_equal(s.done, 2);
    assert_int_equal(s.by_outcome[ENG_OUT_CANCELLED], 2);
    assert_int_equal(s.never_admitted, 0);
    assert_int_equal(s.sent, 2); /* both reached the wire before they were cancelled */
    close_all(&loop, e);
    close(fd);
    out_free(o);
}

static void test_outcome_names(void **state)
{
    (void)state;
    assert_string_equal(eng_outcome_name(ENG_OUT_S2XX), "2xx");
    assert_string_equal(eng_outcome_name(ENG_OUT_REFUSED), "connect-refused");
    assert_string_equal(eng_outcome_name(ENG_OUT_CANCELLED), "cancelled");
    assert_string_equal(eng_outcome_name(ENG_OUT_VERSION), "http-version");
    assert_string_equal(eng_outcome_name(ENG_OUT_COUNT), "unknown");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_config_rejected),
        cmocka_unit_test(test_submit_contract),
        cmocka_unit_test(test_stop_cancels_queue),
        cmocka_unit_test(test_refused_is_unreachable),
        cmocka_unit_test(test_grace_cancels_in_flight),
        cmocka_unit_test(test_outcome_names),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
