/* Unit tests for the conductor (src/run/) over a fake engine (fake_engine.c): phases in order
 * with exact counts, the teardown after everything drained, a signal, an unreachable target,
 * a brake, an internal failure (exit 6), closed-loop clients that never overlap, and the
 * planned starts in series.csv matching what was sent. Counts and order are asserted, never
 * times: the machine is shared. */
#include <pthread.h>
#include <setjmp.h>
#include <signal.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include <cmocka.h>

#include "../../src/cli/cli_run.h"
#include "fake_engine.h"
#include "squall/err.h"
#include "squall/results.h"
#include "squall/run.h"
#include "squall/source.h"
#include <jansson.h>
#include <math.h>

typedef struct {
    char dir[64];
    char plan_path[128];
    plan_t *plan;
    out_t *o;
    run_result_t res;
    int rc;
    results_t *results;
} run_case_t;

/* Loads `yaml`, runs it into a fresh directory with seed 1 and the given options. */
static void run_yaml(run_case_t *c, const char *yaml, const run_opts_t *extra)
{
    snprintf(c->dir, sizeof c->dir, "/tmp/squall-run-XXXXXX");
    assert_non_null(mkdtemp(c->dir));
    snprintf(c->plan_path, sizeof c->plan_path, "%s/plan.yaml", c->dir);
    FILE *f = fopen(c->plan_path, "w");
    assert_non_null(f);
    fputs(yaml, f);
    fclose(f);
    c->o = out_new_capture();
    int rc = plan_load(c->plan_path, NULL, 0, &c->plan, c->o);
    if (rc)
        fail_msg("plan: %s", out_captured_diag(c->o));
    char out[160];
    snprintf(out, sizeof out, "%s/out", c->dir);
    run_opts_t ro = extra ? *extra : (run_opts_t){0};
    ro.results_dir = out;
    ro.quiet = true;
    ro.has_seed = true;
    ro.seed = 1;
    ro.grace_ns = ro.grace_ns ? ro.grace_ns : 200000000;
    fake.n_log = fake.completed = fake.engines = 0;
    c->rc = run_plan(c->plan, &ro, c->o, &c->res);
    if (c->rc == 0 && results_read(out, &c->results, c->o))
        fail_msg("results: %s", out_captured_diag(c->o));
}

static void case_close(run_case_t *c)
{
    /* Every libuv handle was closed: run_plan says so when uv_loop_close fails. */
    assert_null(strstr(out_captured_diag(c->o), "handles still open"));
    results_free(c->results);
    plan_free(c->plan);
    out_free(c->o);
    char cmd[200];
    snprintf(cmd, sizeof cmd, "rm -rf %s", c->dir);
    assert_int_equal(system(cmd), 0);
    fake.answer = NULL;
    fake.delay_ns = 0;
}

static int64_t count(const run_case_t *c, const char *phase, const char *cls, const char *oc)
{
    results_cell_t *cell = results_cell_find(c->results, phase, cls, oc);
    return cell ? results_cell_counters(cell)->count : 0;
}

static int cmp_ms(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static int logged(const char *method, const char *prefix)
{
    int n = 0;
    for (int i = 0; i < fake.n_log; i++)
        n += !strcmp(fake.log[i].method, method) &&
             !strncmp(fake.log[i].path, prefix, strlen(prefix));
    return n;
}

/* Even arrivals are at Λ⁻¹(k), k = 0, 1, ...: 50/s over 1 s is exactly 50 starts, 100/s over
 * 0.5 s exactly 50; every start of the second phase comes after every start of the first. */
static void test_phases_in_order(void **state)
{
    (void)state;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: /a}\n  b: {kind: get, path: /b}\n"
             "phases:\n  - {name: one, rate: 50/s, duration: 1s, mix: {a: 1}}\n"
             "  - {name: two, rate: 100/s, duration: 500ms, mix: {b: 1}}\n",
             NULL);
    assert_int_equal(c.rc, 0);
    assert_int_equal(c.res.end, RUN_END_DONE);
    assert_int_equal(c.res.outcome, JUDGE_OUTCOME_PASS);
    assert_false(c.res.write_failed);
    assert_int_equal(count(&c, "one", "a", "2xx"), 50);
    assert_int_equal(count(&c, "two", "b", "2xx"), 50);
    int64_t last_a = 0, first_b = INT64_MAX;
    for (int i = 0; i < fake.n_log; i++) {
        if (fake.log[i].path[1] == 'a' && fake.log[i].intended_ns > last_a)
            last_a = fake.log[i].intended_ns;
        if (fake.log[i].path[1] == 'b' && fake.log[i].intended_ns < first_b)
            first_b = fake.log[i].intended_ns;
    }
    assert_true(last_a < first_b);
    assert_int_equal(cli_run_exit(c.rc, &c.res), SQ_EXIT_OK);
    case_close(&c);
}

static void answer_created(const char *method, const char *path, fake_answer_t *a)
{
    (void)path;
    a->status = !strcmp(method, "PUT") ? 201 : !strcmp(method, "DELETE") ? 204 : 200;
    a->body = "{\"version\": 3}";
}

/* A class that creates: every object answered 201 is deleted after the last phase, and only
 * once every create has its answer (the teardown waits for the drain). */
static void test_teardown_after_drain(void **state)
{
    (void)state;
    fake.answer = answer_created;
    fake.delay_ns = 30000000;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\", headers: {X-Site: north}}\n"
             "requests:\n  make: {kind: write, method: PUT, path: \"/gw/{{seq}}\", "
             "body: '{}', creates: true}\n"
             "phases:\n  - {name: fill, rate: 20/s, duration: 300ms, mix: {make: 1}}\n",
             NULL);
    assert_int_equal(c.res.end, RUN_END_DONE);
    assert_int_equal(logged("PUT", "/gw/"), 6);
    assert_int_equal(logged("DELETE", "/gw/"), 6);
    /* The teardown has an engine of its own, made from the same target settings. */
    assert_int_equal(fake.engines, 2);
    assert_string_equal(fake.headers, "X-Site: north");
    int64_t last_put = 0;
    for (int i = 0; i < fake.n_log; i++)
        if (!strcmp(fake.log[i].method, "PUT") && fake.log[i].submitted_ns > last_put)
            last_put = fake.log[i].submitted_ns;
    for (int i = 0; i < fake.n_log; i++)
        if (!strcmp(fake.log[i].method, "DELETE"))
            assert_true(fake.log[i].submitted_ns >= last_put + fake.delay_ns);
    json_t *life = results_section(c.results, "lifecycle");
    assert_int_equal(json_integer_value(json_object_get(life, "created")), 6);
    json_t *td = json_object_get(life, "teardown");
    assert_int_equal(json_integer_value(json_object_get(td, "deleted")), 6);
    case_close(&c);
}

static void *interrupt_soon(void *arg)
{
    (void)arg;
    nanosleep(&(struct timespec){.tv_nsec = 300000000}, NULL);
    kill(getpid(), SIGINT);
    return NULL;
}

/* SIGINT stops new starts; results are still written, marked stopped, and the phase counts
 * the time it actually ran (far less than its planned 20 s). */
static void test_signal(void **state)
{
    (void)state;
    pthread_t th;
    assert_int_equal(pthread_create(&th, NULL, interrupt_soon, NULL), 0);
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: /a}\n"
             "phases:\n  - {name: long, rate: 20/s, duration: 20s, mix: {a: 1}}\n",
             NULL);
    pthread_join(th, NULL);
    assert_int_equal(c.res.end, RUN_END_SIGNAL);
    assert_int_equal(cli_run_exit(c.rc, &c.res), SQ_EXIT_INTERRUPTED);
    assert_true(results_meta(c.results)->interrupted);
    assert_true(count(&c, "long", "a", "2xx") < 400);
    json_t *ph = json_array_get(json_object_get(results_section(c.results, "phases"), "phases"), 0);
    assert_true(json_real_value(json_object_get(ph, "elapsed_s")) < 20);
    case_close(&c);
}

static void answer_refused(const char *method, const char *path, fake_answer_t *a)
{
    (void)method;
    (void)path;
    a->refused = true;
}

/* A target that refuses connections ends the run as unreachable (exit 4). */
static void test_unreachable(void **state)
{
    (void)state;
    fake.answer = answer_refused;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: /a}\n"
             "phases:\n  - {name: p, rate: 50/s, duration: 20s, mix: {a: 1}}\n",
             NULL);
    assert_int_equal(c.res.end, RUN_END_UNREACHABLE);
    assert_int_equal(cli_run_exit(c.rc, &c.res), SQ_EXIT_UNREACHABLE);
    case_close(&c);
}

static void answer_503(const char *method, const char *path, fake_answer_t *a)
{
    (void)method;
    (void)path;
    a->status = 503;
}

/* Every answer a 503: the plan's error-rate brake (over 1 s, at least 20 answers) stops it. */
static void test_brake(void **state)
{
    (void)state;
    fake.answer = answer_503;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: /a}\n"
             "phases:\n  - {name: p, rate: 100/s, duration: 20s, mix: {a: 1}}\n"
             "brakes:\n  - {error-rate: 5%, for: 1s}\n",
             NULL);
    assert_int_equal(c.res.end, RUN_END_BRAKE);
    assert_int_equal(cli_run_exit(c.rc, &c.res), SQ_EXIT_BRAKE);
    assert_non_null(strstr(results_meta(c.results)->stop_reason, "brake: error rate"));
    case_close(&c);
}

/* A request the generator cannot build (a list path longer than squall's 4 KiB URL buffer once
 * its page size is added) is an internal failure: exit 6, not "interrupted by a signal". */
static void test_internal_failure(void **state)
{
    (void)state;
    char yaml[6000], seg[4200];
    memset(seg, 'x', sizeof seg - 1);
    seg[sizeof seg - 1] = '\0';
    snprintf(yaml, sizeof yaml,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  l: {kind: list, path: \"/%s\", page: 10}\n"
             "phases:\n  - {name: p, rate: 10/s, duration: 2s, mix: {l: 1}}\n",
             seg);
    run_case_t c = {0};
    run_yaml(&c, yaml, NULL);
    assert_int_equal(c.res.end, RUN_END_FAILED);
    assert_int_equal(cli_run_exit(c.rc, &c.res), SQ_EXIT_FAILURE);
    case_close(&c);
}

/* Closed-loop clients without think time: each client's next request starts when its last
 * answer arrives, so one client's requests never overlap (2 clients, 40 ms answers). */
static void test_closed_loop(void **state)
{
    (void)state;
    fake.delay_ns = 40000000;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: \"/c/{{agent}}\"}\n"
             "phases:\n  - {name: p, duration: 1s, clients: {count: 2}, mix: {a: 1}}\n",
             NULL);
    assert_int_equal(c.res.end, RUN_END_DONE);
    for (int k = 0; k < 2; k++) {
        char who[16];
        snprintf(who, sizeof who, "/c/%d", k);
        int64_t prev = 0;
        int n = 0;
        for (int i = 0; i < fake.n_log; i++) {
            if (strcmp(fake.log[i].path, who))
                continue;
            if (n++)
                assert_true(fake.log[i].submitted_ns >= prev + fake.delay_ns);
            prev = fake.log[i].submitted_ns;
        }
        assert_true(n >= 2 && n <= 26); /* at most one per 40 ms answer over 1 s, plus one */
    }
    case_close(&c);
}

/* Closed-loop clients with think time: a client's next start (its answer + 30 ms) must wake the
 * loop although the answer came from a timer callback, before the loop went to sleep: 2
 * clients, 20 ms answers, 30 ms think, 1 s: about 20 each. A wake-up armed only after the next
 * I/O would let each client start about once a second (counts, not times, are asserted). */
static void test_closed_loop_think(void **state)
{
    (void)state;
    fake.delay_ns = 20000000;
    run_case_t c = {0};
    run_yaml(
        &c,
        "target: {url: \"http://127.0.0.1:9\"}\n"
        "requests:\n  a: {kind: get, path: \"/c/{{agent}}\"}\n"
        "phases:\n  - {name: p, duration: 1s, clients: {count: 2, think: 30ms}, mix: {a: 1}}\n",
        NULL);
    assert_int_equal(c.res.end, RUN_END_DONE);
    for (int k = 0; k < 2; k++) {
        char who[16];
        snprintf(who, sizeof who, "/c/%d", k);
        int n = 0;
        for (int i = 0; i < fake.n_log; i++)
            n += !strcmp(fake.log[i].path, who);
        assert_true(n >= 8 && n <= 21); /* 1 s / (20 + 30 ms) = 20, plus the one at t = 0 */
    }
    case_close(&c);
}

/* Sums series.csv's started and planned columns over every row. */
static void series_totals(const run_case_t *c, double *planned, long *started)
{
    char path[200], line[512];
    snprintf(path, sizeof path, "%s/out/series.csv", c->dir);
    FILE *f = fopen(path, "r");
    assert_non_null(f);
    *planned = 0;
    *started = 0;
    assert_non_null(fgets(line, sizeof line, f)); /* header */
    while (fgets(line, sizeof line, f)) {
        char *fld[13] = {0};
        int n = 0;
        for (char *t = strtok(line, ",\n"); t && n < 13; t = strtok(NULL, ",\n"))
            fld[n++] = t;
        assert_int_equal(n, 13);
        /* unix_ms: the second's wall-clock start, within the run (results.json's start). */
        int64_t unix_ms = atoll(fld[12]), start = results_meta(c->results)->start_unix_ms;
        assert_true(unix_ms >= start - 1000 && unix_ms <= start + 10000);
        *started += atol(fld[3]);
        *planned += atof(fld[11]);
    }
    fclose(f);
}

/* series.csv's planned column: the sources' own model, second by second, adds up to what the
 * plan sends (even 40/s over 1.5 s = 60) and to what was started. */
static void test_planned_in_series(void **state)
{
    (void)state;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  a: {kind: get, path: /a}\n"
             "phases:\n  - {name: p, rate: 40/s, duration: 1500ms, mix: {a: 1}}\n",
             NULL);
    double planned;
    long started;
    series_totals(&c, &planned, &started);
    assert_int_equal(started, 60);
    assert_true(planned > 59.999 && planned < 60.001);
    case_close(&c);
}

/* Writes a log to a fresh temporary file; returns its path (static). */
static const char *write_log(const char *text)
{
    static char path[64];
    snprintf(path, sizeof path, "/tmp/squall-replay-XXXXXX");
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    assert_int_equal(write(fd, text, strlen(text)), (ssize_t)strlen(text));
    close(fd);
    return path;
}

/* The intended starts (ms after the first) of the logged requests whose path starts with
 * prefix, in log order, into ms; returns how many. */
static int starts_ms(const char *prefix, double *ms, int cap)
{
    int n = 0;
    int64_t first = INT64_MAX;
    for (int i = 0; i < fake.n_log; i++)
        if (!strncmp(fake.log[i].path, prefix, strlen(prefix)) && fake.log[i].intended_ns < first)
            first = fake.log[i].intended_ns;
    for (int i = 0; i < fake.n_log && n < cap; i++)
        if (!strncmp(fake.log[i].path, prefix, strlen(prefix)))
            ms[n++] = (double)(fake.log[i].intended_ns - first) / 1e6;
    qsort(ms, (size_t)n, sizeof(*ms), cmp_ms);
    return n;
}

/* A Common Log Format log (1 s times: Apache httpd docs, "Log Files") of 4 requests in its
 * first second, 2 in the next and 1 two seconds later: spread evenly over each second (the k-th
 * of n at k/n s), at speed 2 every instant halves; a write without a body rule and a watch are
 * skipped and counted; HEAD goes out as HEAD; `copies: 2` with `offset: 5ms` sends each twice,
 * the second copy 5 ms later with its own {{copy}}. */
static const char clf_log[] =
    "10.0.0.1 - gw-1 [10/Oct/2000:13:55:36 -0700] \"GET /api/gw/1 HTTP/1.1\" 200 10\n"
    "10.0.0.2 - gw-2 [10/Oct/2000:13:55:36 -0700] \"GET /api/gw/2 HTTP/1.1\" 200 10\n"
    "10.0.0.3 - gw-3 [10/Oct/2000:13:55:36 -0700] \"HEAD /api/gw/3 HTTP/1.1\" 200 -\n"
    "10.0.0.4 - gw-4 [10/Oct/2000:13:55:36 -0700] \"GET /api/gateways HTTP/1.1\" 200 10\n"
    "10.0.0.5 - gw-5 [10/Oct/2000:13:55:37 -0700] \"PUT /api/leases/5 HTTP/1.1\" 200 10\n"
    "10.0.0.6 - gw-6 [10/Oct/2000:13:55:37 -0700] \"GET /api/gw/6 HTTP/1.1\" 200 10\n"
    "10.0.0.7 - gw-7 [10/Oct/2000:13:55:37 -0700] \"POST /api/events HTTP/1.1\" 201 10\n"
    "10.0.0.8 - gw-8 [10/Oct/2000:13:55:37 -0700] \"GET /api/gateways?watch=1 HTTP/1.1\" 200 10\n"
    "10.0.0.9 - gw-9 [10/Oct/2000:13:55:39 -0700] \"GET /api/gw/9 HTTP/1.1\" 200 10\n";

static void replay_case(run_case_t *c, const char *log, const char *extra)
{
    char yaml[1024];
    snprintf(yaml, sizeof yaml,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n"
             "  renew: {kind: write, method: PUT, path: /, body: '{\"a\":{{agent}}}'}\n"
             "phases:\n  - name: r\n    replay:\n      log: %s\n"
             "      rewrite: [{match: \"^/api/\", to: \"/c{{copy}}/\"}]\n"
             "      classify: [{match: \"^/api/leases/\", class: renew}]\n%s",
             log, extra);
    run_yaml(c, yaml, NULL);
    assert_int_equal(c->rc, 0);
    assert_int_equal(c->res.end, RUN_END_DONE);
}

static void test_replay_clf(void **state)
{
    (void)state;
    const char *log = write_log(clf_log);
    static const double want[] = {0, 250, 500, 750, 1000, 1500, 3000};
    double ms[16];
    for (int speed = 1; speed <= 2; speed++) {
        run_case_t c = {0};
        replay_case(&c, log, speed == 1 ? "" : "      speed: 2\n");
        assert_int_equal(starts_ms("/c0/", ms, 16), 7);
        for (int i = 0; i < 7; i++)
            assert_true(fabs(ms[i] - want[i] / speed) < 1e-6);
        assert_int_equal(count(&c, "r", "renew", "2xx"), 1);
        assert_int_equal(count(&c, "r", "replay-get", "2xx"), 5);
        assert_int_equal(count(&c, "r", "replay-list", "2xx"), 1);
        assert_int_equal(logged("HEAD", "/c0/gw/3"), 1);
        assert_int_equal(logged("PUT", "/c0/leases/5"), 1);
        json_t *r = json_object_get(results_section(c.results, "replay"), "r");
        assert_int_equal(json_integer_value(json_object_get(r, "sent")), 7);
        assert_int_equal(json_integer_value(json_object_get(r, "skipped_writes")), 1);
        assert_int_equal(json_integer_value(json_object_get(r, "skipped_watches")), 1);
        assert_string_equal(json_string_value(json_object_get(r, "spread")), "even");
        double planned;
        long started;
        series_totals(&c, &planned, &started); /* the model second by second, as sent */
        assert_int_equal(started, 7);
        assert_true(fabs(planned - 7) < 1e-6);
        case_close(&c);
    }
    run_case_t c = {0};
    replay_case(&c, log, "      copies: 2\n      offset: 5ms\n");
    assert_int_equal(fake.n_log, 14);
    assert_int_equal(starts_ms("/c1/", ms, 16), 7);
    int64_t a = 0, b = 0;
    for (int i = 0; i < fake.n_log; i++) {
        a = !strcmp(fake.log[i].path, "/c0/gw/9") ? fake.log[i].intended_ns : a;
        b = !strcmp(fake.log[i].path, "/c1/gw/9") ? fake.log[i].intended_ns : b;
    }
    assert_int_equal(b - a, 5000000);
    case_close(&c);
    unlink(log);
}

/* A replayed write the target answers 201 Created made an object of the run's: it is journaled
 * and deleted after the last phase, like any other write's. */
static void test_replay_teardown(void **state)
{
    (void)state;
    const char *log = write_log(clf_log);
    fake.answer = answer_created;
    run_case_t c = {0};
    replay_case(&c, log, "");
    assert_int_equal(logged("PUT", "/c0/leases/5"), 1);
    assert_int_equal(logged("DELETE", "/c0/leases/5"), 1);
    assert_int_equal(logged("DELETE", "/"), 1); /* nothing else was deleted */
    case_close(&c);
    unlink(log);
}

/* The window counts whole seconds from the log's first: from 1s to 3s keeps the second one
 * (its GET; the PUT too), and `methods` keeps only what it names. The model `check` prints
 * (the source's expected counts) agrees with what was sent. */
static void test_replay_window(void **state)
{
    (void)state;
    const char *log = write_log(clf_log);
    run_case_t c = {0};
    replay_case(&c, log, "      from: 1s\n      to: 3s\n      methods: [GET]\n");
    assert_int_equal(fake.n_log, 1);
    assert_int_equal(logged("GET", "/c0/gw/6"), 1);
    src_estimate_t e[1];
    assert_int_equal(src_estimate(c.plan, 1, 0, c.o, e), 0);
    assert_true(fabs(e[0].requests - 1) < 1e-9);
    case_close(&c);
    unlink(log);
}

/* Recorded watches (NDJSON with ms times and durations in seconds): a request marked watch=1 or
 * watch=true that lasted at least watch-min opens as a stream at its recorded instant, held for
 * its recorded duration divided by the speed (the engine's timeout of the request, as the fake
 * logs it), of `replay-watch` or of the watch class a classify rule names; watch=0 is a plain
 * read; a marked request with no duration or a shorter one is skipped and counted. The
 * streams' events are counted per class as any watch's, and a stream squall closed at its
 * hold time is not an error. */
static const char watch_log[] =
    "{\"time\":1764672000000,\"method\":\"GET\",\"path\":\"/api/gw/1\"}\n"
    "{\"time\":1764672000100,\"method\":\"GET\",\"path\":\"/api/gateways?watch=1\","
    "\"duration\":0.4}\n"
    "{\"time\":1764672000200,\"method\":\"GET\",\"path\":\"/api/gateways?watch=true\","
    "\"duration\":0.05}\n"
    "{\"time\":1764672000300,\"method\":\"GET\",\"path\":\"/api/gw/2?watch=0\",\"duration\":2}\n"
    "{\"time\":1764672000300,\"method\":\"GET\",\"path\":\"/api/gateways?watch=1\"}\n"
    "{\"time\":1764672000400,\"method\":\"GET\",\"path\":\"/api/sites/n?watch=1\","
    "\"duration\":0.3}\n";

static void answer_stream(const char *method, const char *path, fake_answer_t *a)
{
    (void)method;
    if (strstr(path, "watch=") && !strstr(path, "watch=0")) {
        a->stream = true;
        a->body = "{\"type\":\"create\",\"version\":1}\n{\"type\":\"update\",\"version\":2}\n";
    }
}

static const fake_req_t *logged_req(const char *path)
{
    for (int i = 0; i < fake.n_log; i++)
        if (!strcmp(fake.log[i].path, path))
            return &fake.log[i];
    return NULL;
}

static void test_replay_watches(void **state)
{
    (void)state;
    const char *log = write_log(watch_log);
    for (int speed = 1; speed <= 2; speed++) {
        char yaml[1024];
        snprintf(yaml, sizeof yaml,
                 "target: {url: \"http://127.0.0.1:9\"}\n"
                 "requests:\n  site-watch: {kind: watch, path: /}\n"
                 "phases:\n  - name: r\n    replay:\n      log: %s\n      time-unit: ms\n"
                 "      speed: %d\n      watch-min: 100ms\n"
                 "      rewrite: [{match: \"^/api/\", to: \"/c{{copy}}/\"}]\n"
                 "      classify: [{match: \"^/api/sites/\", class: site-watch}]\n",
                 log, speed);
        fake.answer = answer_stream;
        run_case_t c = {0};
        run_yaml(&c, yaml, NULL);
        assert_int_equal(c.rc, 0);
        assert_int_equal(c.res.end, RUN_END_DONE);
        assert_int_equal(fake.n_log, 4);
        const fake_req_t *get = logged_req("/c0/gw/1"), *w1 = logged_req("/c0/gateways?watch=1"),
                         *w2 = logged_req("/c0/sites/n?watch=1");
        assert_non_null(get);
        assert_non_null(logged_req("/c0/gw/2?watch=0"));
        assert_non_null(w1);
        assert_non_null(w2);
        /* Opened at their recorded instants and held for their recorded durations, scaled. */
        assert_int_equal(w1->intended_ns - get->intended_ns, 100000000 / speed);
        assert_int_equal(w2->intended_ns - get->intended_ns, 400000000 / speed);
        assert_int_equal(w1->timeout_ms, 400 / speed);
        assert_int_equal(w2->timeout_ms, 300 / speed);
        assert_int_equal(count(&c, "r", "replay-watch", "2xx"), 2); /* events */
        assert_int_equal(count(&c, "r", "site-watch", "2xx"), 2);
        assert_int_equal(count(&c, "r", "replay-watch", "timeout"), 0);
        assert_int_equal(count(&c, "r", "replay-get", "2xx"), 2);
        json_t *r = json_object_get(results_section(c.results, "replay"), "r");
        assert_int_equal(json_integer_value(json_object_get(r, "sent")), 2);
        assert_int_equal(json_integer_value(json_object_get(r, "watches")), 2);
        assert_int_equal(json_integer_value(json_object_get(r, "skipped_watches")), 2);
        json_t *wc = json_object_get(
            json_object_get(json_object_get(results_section(c.results, "watches"), "r"), "classes"),
            "replay-watch");
        assert_int_equal(json_integer_value(json_object_get(wc, "streams")), 1);
        assert_int_equal(json_integer_value(json_object_get(wc, "events")), 2);
        assert_int_equal(json_integer_value(json_object_get(wc, "drops")), 0);
        assert_int_equal(json_integer_value(json_object_get(wc, "reconnects")), 0);
        case_close(&c);
    }
    unlink(log);
}

/* An aligned tick of at least 1,000 agents is rendered ahead (src/source/fleet.c) and held in
 * the engine until its instant: every fleet request was handed over held, none was sent before
 * its intended start, and each was counted once (1,000 agents x 3 ticks of a 400 ms period in
 * 1.2 s, give or take the tick that lands on the phase's edges); a tick of 40 is not held. */
static void test_fleet_ahead(void **state)
{
    (void)state;
    fake.held = 0;
    run_case_t c = {0};
    run_yaml(&c,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  renew: {kind: get, path: \"/l/{{agent}}\"}\n"
             "phases:\n  - {name: p, duration: 1200ms,"
             " fleet: {agents: 1000, every: 400ms, timing: aligned, send: renew}}\n",
             NULL);
    assert_int_equal(c.res.end, RUN_END_DONE);
    int n = logged("GET", "/l/");
    assert_true(n >= 2000 && n <= 3000 && n % 1000 == 0);
    assert_int_equal(count(&c, "p", "renew", "2xx"), n);
    assert_true(fake.held >= n - 1000); /* a tick at the phase's very start cannot be ahead */
    for (int i = 0; i < fake.n_log; i++)
        assert_true(fake.log[i].submitted_ns >= fake.log[i].intended_ns);
    case_close(&c);
    fake.held = 0;
    run_case_t small = {0};
    run_yaml(&small,
             "target: {url: \"http://127.0.0.1:9\"}\n"
             "requests:\n  renew: {kind: get, path: \"/l/{{agent}}\"}\n"
             "phases:\n  - {name: p, duration: 1200ms,"
             " fleet: {agents: 40, every: 400ms, timing: aligned, send: renew}}\n",
             NULL);
    assert_int_equal(small.res.end, RUN_END_DONE);
    assert_int_equal(fake.held, 0);
    case_close(&small);
}

/* fleet.connections: one connection per agent for the main engine when asked, or by default
 * for an aligned fleet over HTTP/1.1 that fits the open-file limit; shared keeps
 * target.connections; spread and HTTP/2 fleets share by default. A shard (`--shard I/N`) keeps
 * connections for its own agents only: agents k with k mod N = I - 1 (round-robin ownership,
 * DEVELOPERS.md), so of 300 agents shard 1/4 runs 75, shard 2/7 runs 43 (k = 1, 8, ..., 295)
 * and shard 1/32 runs 10, fewer than target.connections, so by default it shares those. */
static void test_fleet_connections(void **state)
{
    (void)state;
    static const struct {
        const char *target, *fleet;
        sched_shard_t shard;
        int want;
    } cases[] = {
        {"", "timing: aligned, connections: per-agent", {0, 0}, 300},
        {"", "timing: aligned, connections: shared", {0, 0}, 16},
        {"", "timing: aligned", {0, 0}, 300},
        {"", "timing: spread", {0, 0}, 16},
        {"", "timing: spread, connections: per-agent", {0, 0}, 300},
        {", http: \"2\"", "timing: aligned", {0, 0}, 16},
        {"", "timing: aligned", {1, 1}, 300},
        {"", "timing: aligned", {1, 4}, 75},
        {"", "timing: aligned, connections: per-agent", {2, 7}, 43},
        {"", "timing: aligned", {1, 32}, 16},
        {"", "timing: aligned, connections: per-agent", {1, 32}, 16},
        {"", "timing: aligned, connections: shared", {1, 4}, 16},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char yaml[512];
        snprintf(yaml, sizeof yaml,
                 "target: {url: \"http://127.0.0.1:9\", connections: 16%s}\n"
                 "requests:\n  renew: {kind: get, path: \"/l/{{agent}}\"}\n"
                 "phases:\n  - {name: p, duration: 1s,"
                 " fleet: {agents: 300, every: 1s, %s, send: renew}}\n",
                 cases[i].target, cases[i].fleet);
        char path[] = "/tmp/squall-fleet-XXXXXX";
        int fd = mkstemp(path);
        assert_true(fd >= 0 && write(fd, yaml, strlen(yaml)) == (ssize_t)strlen(yaml));
        close(fd);
        out_t *o = out_new_capture();
        plan_t *plan = NULL;
        if (plan_load(path, NULL, 0, &plan, o))
            fail_msg("plan: %s", out_captured_diag(o));
        unlink(path);
        assert_int_equal(src_fleet_connections(plan, cases[i].shard), cases[i].want);
        assert_int_equal(src_phase_connections(plan, 0, cases[i].shard), cases[i].want);
        plan_free(plan);
        out_free(o);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_phases_in_order),
        cmocka_unit_test(test_teardown_after_drain),
        cmocka_unit_test(test_signal),
        cmocka_unit_test(test_unreachable),
        cmocka_unit_test(test_brake),
        cmocka_unit_test(test_internal_failure),
        cmocka_unit_test(test_closed_loop),
        cmocka_unit_test(test_closed_loop_think),
        cmocka_unit_test(test_planned_in_series),
        cmocka_unit_test(test_replay_clf),
        cmocka_unit_test(test_replay_window),
        cmocka_unit_test(test_replay_teardown),
        cmocka_unit_test(test_replay_watches),
        cmocka_unit_test(test_fleet_ahead),
        cmocka_unit_test(test_fleet_connections),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
