/* Unit tests for squall profile's analysis (src/profile/) on synthetic logs whose traffic is
 * known by construction: even vs Poisson arrivals, rate steps, spread vs aligned fleets (also at
 * the 1 s resolution of the Common Log Format), path shapes, kinds and methods. Each derived
 * plan is read back with plan_load, the loader `squall check` uses, and its values compared with
 * what generated the log. Fixed seeds. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/plan.h"
#include "squall/profile.h"
#include "squall/rng.h"

#define T0 1700000000.0 /* 2023-11-14T22:13:20Z */

static char dir[] = "/tmp/squall-profile-XXXXXX";

typedef struct {
    double t;
    char line[256];
} entry_t;

typedef struct {
    entry_t *e;
    size_t n, cap;
} log_t;

static int by_time(const void *a, const void *b)
{
    double x = ((const entry_t *)a)->t, y = ((const entry_t *)b)->t;
    return (x > y) - (x < y);
}

/* One request as an NDJSON line (time in unix seconds with ms) or, clf, a Common Log Format
 * line. */
static void add(log_t *l, bool clf, double t, const char *method, const char *path, int status,
                const char *client)
{
    if (l->n == l->cap) {
        l->cap = l->cap ? 2 * l->cap : 1024;
        l->e = realloc(l->e, l->cap * sizeof *l->e);
        assert_non_null(l->e);
    }
    entry_t *e = &l->e[l->n++];
    e->t = t;
    if (!clf) {
        snprintf(e->line, sizeof e->line,
                 "{\"time\":%.3f,\"method\":\"%s\",\"path\":\"%s\",\"status\":%d,"
                 "\"duration\":0.002,\"client\":\"%s\"}",
                 t, method, path, status, client);
        return;
    }
    time_t s = (time_t)t;
    struct tm tm;
    gmtime_r(&s, &tm);
    char stamp[64];
    strftime(stamp, sizeof stamp, "%d/%b/%Y:%H:%M:%S +0000", &tm);
    snprintf(e->line, sizeof e->line, "%s - - [%s] \"%s %s HTTP/1.1\" %d 12", client, stamp, method,
             path, status);
}

/* Writes the log in time order, profiles it, writes the plan and loads it back. */
static plan_t *derive(log_t *l, const char *name, prof_config_t *cfg, char *yaml, size_t len)
{
    qsort(l->e, l->n, sizeof *l->e, by_time);
    char path[600], plan_path[600];
    snprintf(path, sizeof path, "%s/%s.log", dir, name);
    snprintf(plan_path, sizeof plan_path, "%s/%s.yaml", dir, name);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    for (size_t i = 0; i < l->n; i++)
        fprintf(f, "%s\n", l->e[i].line);
    fclose(f);
    free(l->e);
    *l = (log_t){0};
    prof_config_t def;
    prof_config_init(&def);
    out_t *o = out_new_capture();
    prof_t *p;
    int rc = prof_analyze(path, cfg ? cfg : &def, &p, o);
    if (rc)
        fprintf(stderr, "%s", out_captured_diag(o));
    assert_int_equal(rc, 0);
    f = fopen(plan_path, "w");
    assert_int_equal(prof_write_plan(p, f), 0);
    fclose(f);
    prof_free(p);
    f = fopen(plan_path, "r");
    size_t n = fread(yaml, 1, len - 1, f);
    yaml[n] = '\0';
    fclose(f);
    plan_t *plan;
    rc = plan_load(plan_path, NULL, 0, &plan, o);
    if (rc)
        fprintf(stderr, "%s\n%s", yaml, out_captured_diag(o));
    assert_int_equal(rc, 0);
    out_free(o);
    return plan;
}

static const plan_req_t *req(const plan_t *p, enum plan_kind k, const char *method)
{
    for (size_t i = 0; i < p->n_reqs; i++)
        if (p->reqs[i].kind == k && (!method || strcmp(p->reqs[i].write.method, method) == 0))
            return &p->reqs[i];
    return NULL;
}

/* 20/s even for 60 s: exactly one request each 50 ms, to objects picked at random (so no
 * client repeats an object at a regular period). */
static void test_even_arrivals(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 2);
    log_t l = {0};
    char path[64], yaml[1 << 16];
    for (int i = 0; i < 1200; i++) {
        snprintf(path, sizeof path, "/v1/gateways/gw-%d", (int)rng_below(&g, 40));
        add(&l, false, T0 + i * 0.05, "GET", path, 200, "c");
    }
    plan_t *p = derive(&l, "even", NULL, yaml, sizeof yaml);
    const plan_phase_t *ph = &p->phases[0];
    assert_int_equal(ph->arrivals, PLAN_ARRIVALS_EVEN);
    assert_int_equal(ph->shape, PLAN_LOAD_CONSTANT);
    assert_true(fabs(ph->rate - 20) < 0.5);
    assert_int_equal(ph->duration_ns, INT64_C(60000000000));
    assert_false(ph->fleet.on);
    assert_string_equal(p->reqs[0].path, "/v1/gateways/gw-{{pick:0..39}}");
    plan_free(p);
}

/* Poisson at 10/s for 40 s, then 40/s for 40 s: two steps, Poisson arrivals. */
static void test_steps_poisson(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 4);
    log_t l = {0};
    char yaml[1 << 16];
    for (double t = rng_exp(&g, 10); t < 80; t += rng_exp(&g, t < 40 ? 10 : 40))
        add(&l, false, T0 + t, "GET", "/v1/sites/north/status", 200, "c");
    plan_t *p = derive(&l, "steps", NULL, yaml, sizeof yaml);
    const plan_phase_t *ph = &p->phases[0];
    assert_int_equal(ph->arrivals, PLAN_ARRIVALS_POISSON);
    assert_int_equal(ph->shape, PLAN_LOAD_STEPS);
    assert_int_equal(ph->n_steps, 2);
    assert_true(fabs(ph->steps[0].rate - 10) < 1.5 && fabs(ph->steps[1].rate - 40) < 4);
    assert_true(llabs(ph->steps[0].for_ns - INT64_C(40000000000)) <= INT64_C(10000000000));
    assert_true(fabs(ph->steps[0].for_ns / 1e9 + ph->steps[1].for_ns / 1e9 - 80) <= 1);
    plan_free(p);
}

/* 100 agents renewing every 10 s, each at its own random offset, for 2 minutes: spread. */
static void test_spread_fleet(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 8);
    log_t l = {0};
    char path[64], yaml[1 << 16];
    for (int a = 0; a < 100; a++) {
        double off = 10 * rng_unit(&g);
        for (double t = off; t < 120; t += 10) {
            snprintf(path, sizeof path, "/v1/leases/node-%03d", a);
            add(&l, false, T0 + t + 0.001 * rng_unit(&g), "PUT", path, 200, "agent");
        }
    }
    for (double t = 0; t < 120; t += rng_exp(&g, 5)) /* some reads besides */
        add(&l, false, T0 + t, "GET", "/v1/leases", 200, "operator");
    plan_t *p = derive(&l, "spread", NULL, yaml, sizeof yaml);
    const plan_phase_t *ph = &p->phases[0];
    assert_true(ph->fleet.on);
    assert_int_equal(ph->fleet.agents, 100);
    assert_int_equal(ph->fleet.every_ns, INT64_C(10000000000));
    assert_int_equal(ph->fleet.timing, PLAN_TIMING_SPREAD);
    const plan_req_t *put = req(p, PLAN_WRITE, "PUT");
    assert_non_null(put);
    assert_string_equal(put->path, "/v1/leases/node-{{agent:03}}"); /* zero-padded ids */
    assert_int_equal(ph->fleet.send[0].cls.index, (int)(put - p->reqs));
    const plan_req_t *list = req(p, PLAN_LIST, NULL); /* /v1/leases has objects below it */
    assert_non_null(list);
    assert_string_equal(list->path, "/v1/leases");
    plan_free(p);
}

/* The same at 1 s resolution (Common Log Format): 50 agents at the wall-clock 5 s tick. */
static void test_aligned_fleet_clf(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 9);
    log_t l = {0};
    char client[32], yaml[1 << 16];
    for (int a = 0; a < 50; a++)
        for (double t = 5; t < 90; t += 5) {
            snprintf(client, sizeof client, "10.0.0.%d", a + 1);
            add(&l, true, T0 + t + 0.05 * rng_unit(&g), "POST", "/v1/heartbeat", 201, client);
        }
    for (double t = 0; t < 90; t += rng_exp(&g, 3))
        add(&l, true, T0 + t, "GET", "/v1/heartbeat", 200, "10.9.9.9");
    plan_t *p = derive(&l, "aligned", NULL, yaml, sizeof yaml);
    const plan_phase_t *ph = &p->phases[0];
    assert_true(ph->fleet.on);
    assert_int_equal(ph->fleet.agents, 50); /* told apart by their client address alone */
    assert_int_equal(ph->fleet.every_ns, INT64_C(5000000000));
    assert_int_equal(ph->fleet.timing, PLAN_TIMING_ALIGNED);
    const plan_req_t *post = req(p, PLAN_WRITE, "POST");
    assert_non_null(post);
    assert_string_equal(post->path, "/v1/heartbeat");
    assert_true(post->write.creates); /* answered 201 */
    plan_free(p);
}

/* Shapes and kinds: UUIDs and word siblings become word lists, a version stays literal,
 * numbers become ranges, HEAD reads, DELETE has no body, OPTIONS is left out, a custom watch
 * marker. */
static void test_shapes_and_kinds(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 12);
    log_t l = {0};
    char path[160], yaml[1 << 16];
    static const char *const sites[] = {"north", "south", "harbor"};
    for (int i = 0; i < 300; i++) {
        double t = T0 + i * 0.2;
        unsigned long long u = rng_next(&g);
        snprintf(path, sizeof path, "/api/v2/sites/%s/readings/%08llx-%04llx-4abc-9def-%012llx",
                 sites[i % 3], u >> 32, (u >> 16) & 0xffff, u & 0xffffffffffffULL);
        add(&l, false, t, i % 5 ? "GET" : "HEAD", path, 200, "c");
        snprintf(path, sizeof path, "/api/v2/sites/%s/readings/%d", sites[i % 3],
                 10 + (int)rng_below(&g, 90));
        add(&l, false, t + 0.05, "DELETE", path, 204, "c");
        snprintf(path, sizeof path, "/api/v2/sites/%s/readings?follow=true", sites[i % 3]);
        if (i % 10 == 0)
            add(&l, false, t + 0.1, "GET", path, 200, "c");
        add(&l, false, t + 0.15, "OPTIONS", "/api/v2/sites", 204, "c");
    }
    prof_config_t cfg;
    prof_config_init(&cfg);
    cfg.watch_param = "follow";
    plan_t *p = derive(&l, "shapes", &cfg, yaml, sizeof yaml);
    const plan_req_t *get = req(p, PLAN_GET, NULL), *del = req(p, PLAN_WRITE, "DELETE");
    const plan_req_t *watch = req(p, PLAN_WATCH, NULL);
    assert_non_null(get);
    assert_non_null(del);
    assert_non_null(watch);
    assert_int_equal(p->n_reqs, 3); /* HEAD joined GET; OPTIONS left out */
    assert_string_equal(get->path, "/api/v2/sites/{{site}}/readings/{{reading}}");
    assert_string_equal(del->path, "/api/v2/sites/{{site}}/readings/{{pick:10..99}}");
    assert_null(del->write.body);
    assert_string_equal(watch->path, "/api/v2/sites/{{site}}/readings?follow=true");
    assert_int_equal(plan_find_req(p, get->name) >= 0, 1);
    bool site = false, reading = false;
    for (size_t i = 0; i < p->n_vars; i++) {
        site = site || (strcmp(p->vars[i].name, "site") == 0 && p->vars[i].n_values == 3);
        reading = reading || (strcmp(p->vars[i].name, "reading") == 0 &&
                              p->vars[i].n_values == 64); /* a sample of the first 64 */
    }
    assert_true(site && reading);
    assert_non_null(strstr(yaml, "# Left out: 300 requests with methods a plan cannot send "
                                 "(e.g. OPTIONS)."));
    plan_free(p);
}

/* A log with nothing a plan can send is refused with SQ_EINVAL and one line. */
static void test_nothing_to_send(void **state)
{
    (void)state;
    char path[600];
    snprintf(path, sizeof path, "%s/options.log", dir);
    FILE *f = fopen(path, "w");
    for (int i = 0; i < 10; i++)
        fprintf(f, "c - - [10/Oct/2000:13:55:%02d -0700] \"OPTIONS / HTTP/1.1\" 204 -\n", i);
    fclose(f);
    prof_config_t cfg;
    prof_config_init(&cfg);
    out_t *o = out_new_capture();
    prof_t *p;
    assert_int_equal(prof_analyze(path, &cfg, &p, o), SQ_EINVAL);
    assert_null(p);
    assert_non_null(strstr(out_captured_diag(o), "no request a plan can send"));
    out_free(o);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_even_arrivals),    cmocka_unit_test(test_steps_poisson),
        cmocka_unit_test(test_spread_fleet),     cmocka_unit_test(test_aligned_fleet_clf),
        cmocka_unit_test(test_shapes_and_kinds), cmocka_unit_test(test_nothing_to_send),
    };
    if (!mkdtemp(dir))
        return 1;
    int rc = cmocka_run_group_tests(tests, NULL, NULL);
    char cmd[600];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (!getenv("SQUALL_KEEP_TMP") && system(cmd) != 0 && rc == 0)
        rc = 1;
    return rc;
}
