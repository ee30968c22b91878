/* The server unit tests' fixture and client (see server_fixture.h). */
#include <stddef.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "server_fixture.h"

/* ---- The server on a thread */

/* The fixture started and not yet stopped: a test that failed left it running. */
static fixture_t *live;

static void on_stop(uv_async_t *a)
{
    fixture_t *s = a->data;
    server_stop(s->sv, NULL, NULL);
    uv_close((uv_handle_t *)a, NULL);
}

static void *fixture_thread(void *arg)
{
    fixture_t *s = arg;
    if (server_start(&s->loop, &s->opts, s->out, &s->sv) < 0) {
        uv_close((uv_handle_t *)&s->stop, NULL);
        uv_run(&s->loop, UV_RUN_DEFAULT);
        s->loop_close_rc = uv_loop_close(&s->loop);
        atomic_store(&s->port, -1);
        return NULL;
    }
    atomic_store(&s->port, server_port(s->sv));
    uv_run(&s->loop, UV_RUN_DEFAULT);
    s->loop_close_rc = uv_loop_close(&s->loop);
    return NULL;
}

/* Stops the server if it runs and joins its thread; returns uv_loop_close's result. */
static int fixture_end(fixture_t *s)
{
    if (atomic_load(&s->port) > 0)
        uv_async_send(&s->stop);
    pthread_join(s->thread, NULL);
    int rc = s->loop_close_rc;
    out_free(s->out);
    if (live == s)
        live = NULL;
    free(s);
    return rc;
}

void fixture_end_all(void)
{
    if (live)
        fixture_end(live);
}

fixture_t *fixture_new(void)
{
    fixture_end_all();
    fixture_t *s = calloc(1, sizeof(*s));
    assert_non_null(s);
    server_opts_init(&s->opts);
    s->opts.port = 0;
    return s;
}

void fixture_start(fixture_t *s)
{
    s->out = out_new_capture();
    atomic_store(&s->port, 0);
    /* The loop and its stop signal exist before the thread does: a leftover can always be
     * signalled once it listens. */
    assert_int_equal(uv_loop_init(&s->loop), 0);
    assert_int_equal(uv_async_init(&s->loop, &s->stop, on_stop), 0);
    s->stop.data = s;
    assert_int_equal(pthread_create(&s->thread, NULL, fixture_thread, s), 0);
    live = s;
    /* Bounded: 5,000 waits of 1 ms for the server to listen (or fail to). */
    for (int i = 0; i < 5000 && atomic_load(&s->port) == 0; i++)
        usleep(1000);
    assert_true(atomic_load(&s->port) > 0);
}

void fixture_stop(fixture_t *s)
{
    /* Every handle closed: libuv's own check (docs/src/loop.rst, uv_loop_close). */
    assert_int_equal(fixture_end(s), 0);
}

/* ---- A small libcurl client */
typedef struct {
    char *p;
    size_t len;
} body_t;

static size_t on_data(char *p, size_t sz, size_t n, void *arg)
{
    body_t *b = arg;
    char *q = realloc(b->p, b->len + sz * n + 1);
    if (!q)
        return 0; /* libcurl ends the transfer: the caller sees an error, no assertion here */
    memcpy(q + b->len, p, sz * n);
    b->p = q;
    b->len += sz * n;
    b->p[b->len] = '\0';
    return sz * n;
}

long http_try(CURL *c, int port, const char *method, const char *path, const char *body, char **out,
              long timeout_ms)
{
    char url[1200];
    body_t b = {0};
    long status = 0;
    snprintf(url, sizeof(url), "http://127.0.0.1:%d%s", port, path);
    curl_easy_reset(c);
    curl_easy_setopt(c, CURLOPT_URL, url);
    curl_easy_setopt(c, CURLOPT_CUSTOMREQUEST, method);
    curl_easy_setopt(c, CURLOPT_NOSIGNAL, 1L);
    curl_easy_setopt(c, CURLOPT_PATH_AS_IS, 1L);
    curl_easy_setopt(c, CURLOPT_TIMEOUT_MS, timeout_ms);
    curl_easy_setopt(c, CURLOPT_WRITEFUNCTION, on_data);
    curl_easy_setopt(c, CURLOPT_WRITEDATA, &b);
    if (strcmp(method, "HEAD") == 0)
        curl_easy_setopt(c, CURLOPT_NOBODY, 1L);
    if (body) {
        curl_easy_setopt(c, CURLOPT_POSTFIELDS, body);
        curl_easy_setopt(c, CURLOPT_POSTFIELDSIZE, (long)strlen(body));
    }
    CURLcode rc = curl_easy_perform(c);
    curl_easy_getinfo(c, CURLINFO_RESPONSE_CODE, &status);
    if (out)
        *out = b.p;
    else
        free(b.p);
    return rc == CURLE_OK ? status : -(long)rc;
}

long http_t(CURL *c, int port, const char *method, const char *path, const char *body, char **out,
            long timeout_ms)
{
    long st = http_try(c, port, method, path, body, out, timeout_ms);
    if (st < 0 && st != -CURLE_OPERATION_TIMEDOUT)
        fail_msg("%s %s: libcurl error %ld (%s)", method, path, -st,
                 curl_easy_strerror((CURLcode)-st));
    return st;
}

long http(CURL *c, int port, const char *method, const char *path, const char *body, char **out)
{
    return http_t(c, port, method, path, body, out, 10000);
}

json_t *http_json(CURL *c, int port, const char *method, const char *path, const char *body,
                  long want)
{
    char *out = NULL;
    long st = http(c, port, method, path, body, &out);
    if (st != want)
        fail_msg("%s %s: status %ld, expected %ld; body: %s", method, path, st, want,
                 out ? out : "");
    json_error_t e;
    json_t *j = json_loads(out ? out : "", JSON_DECODE_ANY, &e);
    if (!j)
        fail_msg("%s %s: body is not JSON: %s", method, path, out ? out : "");
    free(out);
    return j;
}

json_int_t jint(const json_t *j, const char *k)
{
    const json_t *v = json_object_get(j, k);
    assert_true(json_is_integer(v));
    return json_integer_value(v);
}