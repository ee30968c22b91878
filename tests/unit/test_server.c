/* Unit tests of the embedded server (squall serve), driven over real HTTP with libcurl against a
 * server started in-process on its own thread and libuv loop (server_fixture.h). */
#include <arpa/inet.h>
#include <netinet/in.h>
#include <pthread.h>
#include <sys/socket.h>
#include <sys/time.h>
#include <unistd.h>
#include <stdarg.h>
#include <stdatomic.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <curl/curl.h>
#include <jansson.h>

#include "squall/err.h"
#include "squall/server.h"
#include "server_fixture.h"

/* ---- CRUD and status codes (RFC 9110: 201 Created for a new resource, §15.3.2; 200 OK with a
 * representation, §15.3.1; 204 No Content, §15.3.5; 404, §15.5.5; 409 Conflict, §15.5.10). */
static void test_crud(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    const char *gw = "/v1/sites/north/gateways/gw-1";
    assert_int_equal(http(c, p, "GET", gw, NULL, NULL), 404);
    json_t *j = http_json(c, p, "PUT", gw, "{\"model\":\"t-a\"}", 201);
    assert_int_equal(jint(j, "version"), 1);
    assert_string_equal(json_string_value(json_object_get(j, "path")), gw);
    json_decref(j);
    j = http_json(c, p, "POST", gw, "{\"model\":\"t-b\"}", 200);
    assert_int_equal(jint(j, "version"), 2);
    json_decref(j);
    j = http_json(c, p, "GET", gw, NULL, 200);
    assert_string_equal(json_string_value(json_object_get(json_object_get(j, "object"), "model")),
                        "t-b");
    json_decref(j);
    /* Compare-and-swap: the object is at version 2. */
    j = http_json(c, p, "PUT", "/v1/sites/north/gateways/gw-1?version=1", "{}", 409);
    assert_string_equal(json_string_value(json_object_get(j, "error")), "conflict");
    json_decref(j);
    j = http_json(c, p, "PUT", "/v1/sites/north/gateways/gw-1?version=2", "{\"n\":1}", 200);
    assert_int_equal(jint(j, "version"), 3);
    json_decref(j);
    /* version=0 means "must not exist": create-only. */
    assert_int_equal(http(c, p, "PUT", "/v1/sites/north/gateways/gw-1?version=0", "{}", NULL), 409);
    assert_int_equal(http(c, p, "PUT", "/v1/sites/north/gateways/gw-2?version=0", "{}", NULL), 201);
    assert_int_equal(http(c, p, "DELETE", "/v1/sites/north/gateways/gw-2?version=1", NULL, NULL),
                     409);
    assert_int_equal(http(c, p, "DELETE", "/v1/sites/north/gateways/gw-2", NULL, NULL), 204);
    assert_int_equal(http(c, p, "DELETE", "/v1/sites/north/gateways/gw-2", NULL, NULL), 404);
    assert_int_equal(http(c, p, "PATCH", "/v1/sites/north/gateways/gw-9", "{}", NULL), 404);
    assert_int_equal(http(c, p, "HEAD", gw, NULL, NULL), 200);
    /* The counts in /stats match what this test sent, exactly. */
    j = http_json(c, p, "GET", "/stats", NULL, 200);
    json_t *st = json_object_get(j, "store");
    assert_int_equal(jint(st, "creates"), 2);
    assert_int_equal(jint(st, "replaces"), 2);
    assert_int_equal(jint(st, "deletes"), 1);
    assert_int_equal(jint(st, "conflicts"), 3);
    assert_int_equal(jint(j, "objects"), 1);
    assert_int_equal(jint(j, "version"), 5);
    json_t *req = json_object_get(j, "requests");
    assert_int_equal(jint(json_object_get(req, "PUT"), "201"), 2);
    assert_int_equal(jint(json_object_get(req, "PUT"), "409"), 2);
    assert_int_equal(jint(json_object_get(req, "PUT"), "200"), 1);
    assert_int_equal(jint(json_object_get(req, "GET"), "404"), 1);
    assert_int_equal(jint(json_object_get(req, "DELETE"), "204"), 1);
    assert_int_equal(jint(json_object_get(req, "DELETE"), "404"), 1);
    assert_int_equal(jint(json_object_get(req, "DELETE"), "409"), 1);
    assert_int_equal(jint(json_object_get(j, "latency"), "count"), 13);
    json_decref(j);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- JSON merge patch: every example of RFC 7386, Appendix A, in the RFC's order. */
static void test_merge_patch_rfc7386(void **state)
{
    (void)state;
    static const char *const ex[][3] = {
        {"{\"a\":\"b\"}", "{\"a\":\"c\"}", "{\"a\":\"c\"}"},
        {"{\"a\":\"b\"}", "{\"b\":\"c\"}", "{\"a\":\"b\",\"b\":\"c\"}"},
        {"{\"a\":\"b\"}", "{\"a\":null}", "{}"},
        {"{\"a\":\"b\",\"b\":\"c\"}", "{\"a\":null}", "{\"b\":\"c\"}"},
        {"{\"a\":[\"b\"]}", "{\"a\":\"c\"}", "{\"a\":\"c\"}"},
        {"{\"a\":\"c\"}", "{\"a\":[\"b\"]}", "{\"a\":[\"b\"]}"},
        {"{\"a\":{\"b\":\"c\"}}", "{\"a\":{\"b\":\"d\",\"c\":null}}", "{\"a\":{\"b\":\"d\"}}"},
        {"{\"a\":[{\"b\":\"c\"}]}", "{\"a\":[1]}", "{\"a\":[1]}"},
        {"[\"a\",\"b\"]", "[\"c\",\"d\"]", "[\"c\",\"d\"]"},
        {"{\"a\":\"b\"}", "[\"c\"]", "[\"c\"]"},
        {"{\"a\":\"foo\"}", "null", "null"},
        {"{\"a\":\"foo\"}", "\"bar\"", "\"bar\""},
        {"{\"e\":null}", "{\"a\":1}", "{\"e\":null,\"a\":1}"},
        {"[1,2]", "{\"a\":\"b\",\"c\":null}", "{\"a\":\"b\"}"},
        {"{}", "{\"a\":{\"bb\":{\"ccc\":null}}}", "{\"a\":{\"bb\":{}}}"},
    };
    fixture_t *s = fixture_new();
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    for (size_t i = 0; i < sizeof(ex) / sizeof(ex[0]); i++) {
        char path[64];
        snprintf(path, sizeof(path), "/v1/rfc7386/ex-%zu", i);
        assert_int_equal(http(c, p, "PUT", path, ex[i][0], NULL), 201);
        json_t *got = http_json(c, p, "PATCH", path, ex[i][1], 200);
        json_t *want = json_loads(ex[i][2], JSON_DECODE_ANY, NULL);
        if (!json_equal(json_object_get(got, "object"), want))
            fail_msg("RFC 7386 Appendix A example %zu: %s + %s gave %s", i + 1, ex[i][0], ex[i][1],
                     json_dumps(json_object_get(got, "object"), JSON_ENCODE_ANY));
        json_decref(got);
        json_decref(want);
    }
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- Bad input gets the right 4xx and the server keeps serving (RFC 9110: 400 §15.5.1, 405
 * with Allow §15.5.6, 413 Content Too Large §15.5.14). */
static void test_bad_input(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    s->opts.body_limit = 1024;
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    assert_int_equal(http(c, p, "PUT", "/v1/a/b", "{\"x\":", NULL), 400);
    assert_int_equal(http(c, p, "PUT", "/v1/a/b", "", NULL), 400);
    assert_int_equal(http(c, p, "PATCH", "/v1/a/b", "nope", NULL), 400);
    char *big = malloc(4096);
    memset(big, 'x', 4095);
    big[0] = '"';
    big[4094] = '"';
    big[4095] = '\0';
    assert_int_equal(http(c, p, "PUT", "/v1/a/b", big, NULL), 413);
    free(big);
    assert_int_equal(http(c, p, "GET", "/v1/a/b%20c", NULL, NULL), 400);
    assert_int_equal(http(c, p, "GET", "/v1//b", NULL, NULL), 400);
    assert_int_equal(http(c, p, "GET", "/v1/a/./b", NULL, NULL), 400);
    assert_int_equal(http(c, p, "GET", "/v1/a/b?limit=x", NULL, NULL), 404);
    assert_int_equal(http(c, p, "GET", "/elsewhere", NULL, NULL), 404);
    assert_int_equal(http(c, p, "BREW", "/v1/a/b", NULL, NULL), 405);
    assert_int_equal(http(c, p, "PUT", "/v1/a/", "{}", NULL), 400);
    assert_int_equal(http(c, p, "GET", "/v1/a/b?watch=1&since=-3", NULL, NULL), 400);
    /* Still serving, and the rejections were counted. */
    assert_int_equal(http(c, p, "PUT", "/v1/a/b", "{\"ok\":true}", NULL), 201);
    json_t *j = http_json(c, p, "GET", "/stats", NULL, 200);
    json_t *r = json_object_get(j, "rejected_input");
    assert_int_equal(jint(r, "bad_json"), 3);
    assert_int_equal(jint(r, "too_large"), 1);
    assert_int_equal(jint(r, "bad_path"), 4);
    assert_int_equal(jint(r, "bad_method"), 1);
    json_decref(j);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- Pagination under concurrent writes: objects that exist throughout appear exactly once.
 * No assertion runs while the writer thread does: a failed one would leave the test by longjmp
 * with the writer still using this frame (problems are kept and reported after the join). */
typedef struct {
    int port;
    atomic_int stop, ops;
} writer_t;

static void *writer_main(void *arg)
{
    writer_t *w = arg;
    CURL *c = curl_easy_init();
    char path[96];
    /* Bounded: at most 3000 writes, or until the lister is done. */
    for (int i = 0; i < 3000 && !atomic_load(&w->stop); i++, atomic_fetch_add(&w->ops, 1)) {
        int k = i % 3;
        if (k == 0)
            snprintf(path, sizeof(path), "/v1/sites/south/gateways/gw-%03d-tmp", (i * 7) % 200);
        else if (k == 1)
            snprintf(path, sizeof(path), "/v1/sites/south/gateways/gw-%03d", (i * 13) % 200);
        else
            snprintf(path, sizeof(path), "/v1/sites/south/gateways/gw-%03d-tmp",
                     ((i - 2) * 7) % 200);
        long st = http_try(c, w->port, k == 2 ? "DELETE" : "PUT", path, k == 2 ? NULL : "{\"v\":1}",
                           NULL, 10000);
        if (st != 200 && st != 201 && st != 204 && st != 404)
            break;
    }
    curl_easy_cleanup(c);
    return NULL;
}

/* One full list in pages of 7; counts the permanent gw-NNN in seen[]. Returns false with a
 * message in err when a page failed or a name came twice. */
static bool list_once(CURL *c, int p, int seen[200], int *pages, char *err, size_t errlen)
{
    char path[160], token[64] = "";
    bool ok = true;
    json_t *names = json_object();
    memset(seen, 0, 200 * sizeof(int));
    do {
        snprintf(path, sizeof(path), "/v1/sites/south/gateways?limit=7%s%s",
                 token[0] ? "&continue=" : "", token);
        char *out = NULL;
        long st = http_try(c, p, "GET", path, NULL, &out, 10000);
        json_t *j = st == 200 ? json_loads(out ? out : "", 0, NULL) : NULL;
        free(out);
        if (!j) {
            snprintf(err, errlen, "page %d: status %ld or not JSON", *pages, st);
            ok = false;
            break;
        }
        json_t *it, *items = json_object_get(j, "items");
        size_t i;
        json_array_foreach(items, i, it)
        {
            const char *op = json_string_value(json_object_get(it, "path"));
            const char *name = op && strrchr(op, '/') ? strrchr(op, '/') + 1 : "";
            if (json_object_get(names, name)) {
                snprintf(err, errlen, "page %d: %s listed twice", *pages, name);
                ok = false;
            }
            json_object_set_new(names, name, json_true());
            int n;
            if (strlen(name) == 6 && sscanf(name, "gw-%d", &n) == 1)
                seen[n]++;
        }
        const char *t = json_string_value(json_object_get(j, "continue"));
        snprintf(token, sizeof(token), "%s", t ? t : "");
        json_decref(j);
        ++*pages;
    } while (ok && token[0] && *pages < 100000);
    json_decref(names);
    return ok;
}

static void test_pagination_concurrent(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    char path[160], err[200] = "";
    for (int i = 0; i < 200; i++) {
        snprintf(path, sizeof(path), "/v1/sites/south/gateways/gw-%03d", i);
        assert_int_equal(http(c, p, "PUT", path, "{\"v\":0}", NULL), 201);
    }
    writer_t w = {.port = p};
    pthread_t wt;
    assert_int_equal(pthread_create(&wt, NULL, writer_main, &w), 0);
    int seen[200], pages = 0;
    /* At least 5 rounds, and more (up to 200) until the writer made 20 writes during them: on a
     * loaded machine the lister may finish 5 rounds before the writer's thread ran much. */
    for (int round = 0; round < 200 && (round < 5 || atomic_load(&w.ops) <= 20); round++) {
        if (!list_once(c, p, seen, &pages, err, sizeof err))
            break;
        for (int i = 0; i < 200 && !err[0]; i++)
            if (seen[i] != 1)
                snprintf(err, sizeof err, "round %d: gw-%03d (present throughout) seen %d times",
                         round, i, seen[i]);
        if (err[0])
            break;
    }
    atomic_store(&w.stop, 1);
    pthread_join(wt, NULL);
    if (err[0])
        fail_msg("%s", err);
    /* The check means something only if writes really happened during the lists. */
    assert_true(atomic_load(&w.ops) > 20);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- Watches: resumption from a version delivers every later event once, in order; a version
 * older than the history window gets 410 Gone (RFC 9110 §15.5.11: no longer available; using it
 * for an expired resume point is common practice of watchable stores, not a standard). */
static int count_lines(const char *s)
{
    int n = 0;
    for (; s && *s; s++)
        n += *s == '\n';
    return n;
}

static void test_watch_resume_and_expiry(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    s->opts.history = 64;
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    char path[160];
    /* 30 writes in two collections, interleaved: versions 1..30. */
    for (int i = 0; i < 30; i++) {
        snprintf(path, sizeof(path), "/v1/sites/%s/gateways/gw-%d", i % 2 ? "harbor" : "north",
                 i % 5);
        long st = http(c, p, "PUT", path, "{\"k\":1}", NULL);
        assert_true(st == 201 || st == 200);
    }
    assert_int_equal(http(c, p, "DELETE", "/v1/sites/harbor/gateways/gw-1", NULL, NULL), 204);
    char *out = NULL;
    long st = http_t(c, p, "GET", "/v1/sites/harbor/gateways?watch=1&since=10", NULL, &out, 400);
    assert_int_equal(st, -28); /* a stream stays open; the client timed out */
    /* Expected: harbor writes are the odd i at version i+1 (creates of gw-0..4 up to version
     * 10, updates after), so updates at 12,14..30, then the delete at 31: 11 events, each once,
     * increasing. */
    int n = 0;
    long last = 10;
    for (char *line = out; line && *line; n++) {
        char *nl = strchr(line, '\n');
        assert_non_null(nl);
        json_t *e = json_loadb(line, (size_t)(nl - line), 0, NULL);
        assert_non_null(e);
        long v = (long)jint(e, "version");
        assert_int_equal(v, n < 10 ? 12 + 2 * n : 31);
        assert_true(v > last);
        last = v;
        assert_string_equal(json_string_value(json_object_get(e, "type")),
                            n == 10 ? "delete" : "update");
        json_decref(e);
        line = nl + 1;
    }
    assert_int_equal(n, 11);
    free(out);
    /* A watch from the current version sees nothing old. */
    st = http_t(c, p, "GET", "/v1/sites/harbor/gateways?watch=1&since=31", NULL, &out, 300);
    assert_int_equal(st, -28);
    assert_int_equal(count_lines(out), 0);
    free(out);
    /* Push version 10 out of the 64-event window, then ask for it. */
    for (int i = 0; i < 60; i++)
        http(c, p, "PUT", "/v1/sites/north/gateways/gw-0", "{\"k\":2}", NULL);
    json_t *j = http_json(c, p, "GET", "/v1/sites/harbor/gateways?watch=1&since=10", NULL, 410);
    assert_string_equal(json_string_value(json_object_get(j, "error")), "expired");
    json_decref(j);
    /* Version 91 - 64 = 27 is the oldest resumable one. */
    st = http_t(c, p, "GET", "/v1/sites/harbor/gateways?watch=1&since=27", NULL, &out, 300);
    assert_int_equal(st, -28);
    assert_int_equal(count_lines(out), 3); /* versions 28, 30, 31 */
    free(out);
    assert_int_equal(http(c, p, "GET", "/v1/sites/harbor/gateways?watch=1&since=26", NULL, NULL),
                     410);
    j = http_json(c, p, "GET", "/stats", NULL, 200);
    assert_int_equal(jint(json_object_get(j, "store"), "expired"), 2);
    json_decref(j);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- OpenMetrics 1.0 text (OpenMetrics specification 1.0, "Histogram" and "Overall
 * structure"): the exposition ends with "# EOF", bucket counts are cumulative (non-decreasing),
 * and the le="+Inf" bucket equals _count. */
static void test_metrics_wellformed(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    for (int i = 0; i < 25; i++)
        http(c, p, i % 2 ? "GET" : "PUT", "/v1/m/x", "{}", NULL);
    char *m = NULL;
    assert_int_equal(http(c, p, "GET", "/metrics", NULL, &m), 200);
    size_t len = strlen(m);
    assert_true(len > 6 && strcmp(m + len - 6, "# EOF\n") == 0);
    long prev = -1, inf = -1, count = -1;
    int buckets = 0;
    for (char *line = strtok(m, "\n"); line; line = strtok(NULL, "\n")) {
        long v;
        if (line[0] == '#')
            continue;
        if (sscanf(line, "squall_target_request_seconds_bucket{le=\"+Inf\"} %ld", &v) == 1) {
            inf = v;
        } else if (strncmp(line, "squall_target_request_seconds_bucket", 36) == 0) {
            assert_int_equal(sscanf(strchr(line, '}') + 1, " %ld", &v), 1);
            assert_true(v >= prev);
            prev = v;
            buckets++;
        } else if (sscanf(line, "squall_target_request_seconds_count %ld", &v) == 1) {
            count = v;
        }
    }
    assert_true(buckets > 5);
    assert_true(inf >= prev);
    assert_int_equal(inf, count);
    assert_int_equal(count, 25);
    free(m);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* ---- A slow watcher: a client that does not read is bounded by the per-stream buffer, then
 * closed with a final error event; the server keeps serving everyone else. */
static void test_slow_watcher_bounded(void **state)
{
    (void)state;
    fixture_t *s = fixture_new();
    s->opts.stream_buffer = 8192;
    fixture_start(s);
    int p = atomic_load(&s->port);
    CURL *c = curl_easy_init();
    int fd = socket(AF_INET, SOCK_STREAM, 0);
    int small = 2048;
    assert_int_equal(setsockopt(fd, SOL_SOCKET, SO_RCVBUF, &small, sizeof(small)), 0);
    struct sockaddr_in a = {.sin_family = AF_INET, .sin_port = htons((uint16_t)p)};
    a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    assert_int_equal(connect(fd, (struct sockaddr *)&a, sizeof(a)), 0);
    const char req[] = "GET /v1/slow/items?watch=1 HTTP/1.1\r\nHost: t\r\n\r\n";
    assert_int_equal(write(fd, req, sizeof(req) - 1), (ssize_t)sizeof(req) - 1);
    json_t *j = NULL;
    for (int i = 0; i < 200; i++) {
        json_decref(j);
        j = http_json(c, p, "GET", "/stats", NULL, 200);
        if (jint(json_object_get(j, "streams"), "open") == 1)
            break;
        usleep(10000);
    }
    assert_int_equal(jint(json_object_get(j, "streams"), "open"), 1);
    json_decref(j);
    /* 5,000 events of ~1 KiB: far more than the socket buffers and the 8 KiB stream limit. */
    char body[1100];
    memset(body, 'a', sizeof(body));
    memcpy(body, "{\"pad\":\"", 8);
    memcpy(body + sizeof(body) - 3, "\"}", 3);
    for (int i = 0; i < 5000; i++)
        assert_true(http(c, p, "PUT", "/v1/slow/items/one", body, NULL) / 100 == 2);
    j = http_json(c, p, "GET", "/stats", NULL, 200);
    assert_int_equal(jint(json_object_get(j, "streams"), "slow_closed"), 1);
    assert_true(jint(json_object_get(j, "streams"), "events_sent") < 5000);
    json_decref(j);
    /* Read what the stream holds: it must end with the slow-watcher error event. */
    struct timeval tv = {.tv_sec = 5};
    setsockopt(fd, SOL_SOCKET, SO_RCVTIMEO, &tv, sizeof(tv));
    size_t cap = 1 << 24, len = 0;
    char *all = malloc(cap);
    ssize_t n;
    while (len < cap - 1 && (n = read(fd, all + len, cap - 1 - len)) > 0)
        len += (size_t)n;
    all[len] = '\0';
    close(fd);
    const char *err = strstr(all, "{\"type\":\"error\",\"code\":\"slow-watcher\"");
    assert_non_null(err);
    assert_null(strstr(err + 1, "{\"type\":"));    /* nothing after the error event */
    assert_non_null(strstr(all, "\r\n0\r\n\r\n")); /* and the chunked stream ended properly */
    free(all);
    assert_int_equal(http(c, p, "GET", "/v1/slow/items/one", NULL, NULL), 200);
    curl_easy_cleanup(c);
    fixture_stop(s);
}

/* Fault times are read with the plan's duration syntax (units by the SI and its accepted minute
 * and hour: BIPM SI Brochure, 9th ed., Tables 7 and 8), also inside delay specs; a spec that is
 * refused leaves the faults as they were. */
static void test_delay_spec(void **state)
{
    (void)state;
    server_faults_t f;
    server_faults_init(&f);
    assert_int_equal(server_delay_parse(&f, "uniform:10ms..1m30s"), 0);
    assert_int_equal(f.delay_kind, SERVER_DELAY_UNIFORM);
    assert_true(f.delay_a_ns == 10000000 && f.delay_b_ns == INT64_C(90000000000));
    assert_int_equal(server_delay_parse(&f, "exp:2m15s"), 0); /* 135 s */
    assert_true(f.delay_kind == SERVER_DELAY_EXP && f.delay_a_ns == INT64_C(135000000000));
    assert_int_equal(server_delay_parse(&f, "fixed:1.5s"), 0);
    assert_true(f.delay_kind == SERVER_DELAY_FIXED && f.delay_a_ns == 1500000000);
    static const char *const bad[] = {
        "bogus",   "fixed:",      "fixed:2m15",   "fixed:1s..2s", "uniform:1s", "uniform:2s..1s",
        "exp:-1s", "fixed:1001h", "uniform:..1s", "Fixed:1s",     "fixed: 1s",  "none:1s"};
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        if (server_delay_parse(&f, bad[i]) != SQ_EPARSE)
            fail_msg("delay '%s' accepted", bad[i]);
        assert_true(f.delay_kind == SERVER_DELAY_FIXED && f.delay_a_ns == 1500000000);
    }
    assert_int_equal(server_delay_parse(&f, "none"), 0);
    assert_int_equal(f.delay_kind, SERVER_DELAY_NONE);
    int64_t ns = 7;
    assert_int_equal(server_duration_parse("1h30m", &ns), 0);
    assert_true(ns == INT64_C(5400000000000)); /* 3600 + 1800 s */
    assert_int_equal(server_duration_parse("1000h", &ns), 0);
    assert_true(ns == SERVER_DURATION_MAX_NS);
    assert_int_equal(server_duration_parse("1000h1ns", &ns), SQ_ERANGE);
    assert_int_equal(server_duration_parse("-1s", &ns), SQ_ERANGE);
    assert_int_equal(server_duration_parse("10", &ns), SQ_EPARSE);
    assert_true(ns == SERVER_DURATION_MAX_NS);
}

int main(void)
{
    curl_global_init(CURL_GLOBAL_DEFAULT);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_delay_spec),
        cmocka_unit_test(test_crud),
        cmocka_unit_test(test_merge_patch_rfc7386),
        cmocka_unit_test(test_bad_input),
        cmocka_unit_test(test_pagination_concurrent),
        cmocka_unit_test(test_watch_resume_and_expiry),
        cmocka_unit_test(test_metrics_wellformed),
        cmocka_unit_test(test_slow_watcher_bounded),
    };
    int rc = cmocka_run_group_tests(tests, NULL, NULL);
    fixture_end_all();
    curl_global_cleanup();
    return rc;
}
