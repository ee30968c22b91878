/* Unit tests for the brakes in force (src/observe/brakes.c): loose defaults for a loopback target,
 * stricter ones with a latency brake for any other (taken to be shared), a plan's own brake of
 * a kind replacing that default, and --no-brakes. Plans are only loaded: nothing is sent. The
 * expected figures are the documented ones (README.md, "Judgement": the table of default brakes;
 * they are squall's own choice, not an outside standard). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/observe.h"

/* Loads a plan for `url` with the given brakes: YAML text (may be empty). */
static plan_t *load(const char *url, const char *brakes)
{
    char path[] = "/tmp/squall-brakes-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    fprintf(f,
            "target: {url: \"%s\"}\nrequests:\n  read: {kind: get, path: /v1/x}\n"
            "phases:\n  - {name: steady, rate: 1/s, duration: 1s, mix: {read: 1}}\n%s",
            url, brakes);
    fclose(f);
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    int rc = plan_load(path, NULL, 0, &p, o);
    if (rc)
        fprintf(stderr, "%s", out_captured_diag(o));
    assert_int_equal(rc, 0);
    out_free(o);
    unlink(path);
    return p;
}

/* The brakes an observer list puts in force, as obs_brakes_json reports them. */
static json_t *brakes(const plan_t *p, bool no_brakes)
{
    results_t *res;
    assert_int_equal(results_new(&res), 0);
    out_t *o = out_new_capture();
    obs_cfg_t cfg = {.plan = p, .res = res, .o = o, .quiet = true, .no_brakes = no_brakes};
    obs_t *l;
    assert_int_equal(obs_new(&cfg, &l), 0);
    json_t *j = obs_brakes_json(l);
    obs_free(l);
    out_free(o);
    results_free(res);
    return j;
}

static json_t *find(json_t *j, const char *kind)
{
    size_t i;
    json_t *b;
    json_array_foreach(json_object_get(j, "brakes"), i, b)
    {
        if (!strcmp(json_string_value(json_object_get(b, "kind")), kind))
            return b;
    }
    return NULL;
}

static double num(json_t *b, const char *k)
{
    return json_number_value(json_object_get(b, k));
}

static void test_loopback_defaults(void **state)
{
    (void)state;
    plan_t *p = load("http://127.0.0.1:7070", "");
    json_t *j = brakes(p, false);
    assert_false(json_is_true(json_object_get(j, "shared_target")));
    assert_int_equal(json_array_size(json_object_get(j, "brakes")), 2);
    assert_true(num(find(j, "error-rate"), "error_rate") == 0.10);
    assert_true(num(find(j, "unreachable"), "after_s") == 10);
    assert_null(find(j, "percentile"));
    json_decref(j);
    plan_free(p);
}

static void test_shared_defaults(void **state)
{
    (void)state;
    plan_t *p = load("https://staging-api.example.internal:6443", "");
    json_t *j = brakes(p, false);
    assert_true(json_is_true(json_object_get(j, "shared_target")));
    assert_int_equal(json_array_size(json_object_get(j, "brakes")), 3);
    json_t *e = find(j, "error-rate"), *u = find(j, "unreachable"), *l = find(j, "percentile");
    assert_true(num(e, "error_rate") == 0.05 && num(e, "for_s") == 10);
    assert_true(num(u, "after_s") == 5);
    assert_true(num(l, "percentile") == 99 && num(l, "max_ms") == 5000 && num(l, "for_s") == 10);
    assert_string_equal(json_string_value(json_object_get(l, "source")), "default");
    json_decref(j);
    plan_free(p);
}

static void test_plan_replaces_default_of_its_kind(void **state)
{
    (void)state;
    plan_t *p = load("http://10.20.30.40:7070", "brakes:\n  - {p99: 2s, for: 30s}\n");
    json_t *j = brakes(p, false);
    assert_int_equal(json_array_size(json_object_get(j, "brakes")), 3);
    json_t *l = find(j, "percentile");
    assert_string_equal(json_string_value(json_object_get(l, "source")), "plan");
    assert_true(num(l, "max_ms") == 2000 && num(l, "for_s") == 30);
    json_decref(j);
    /* --no-brakes leaves only the plan's own. */
    j = brakes(p, true);
    assert_int_equal(json_array_size(json_object_get(j, "brakes")), 1);
    json_decref(j);
    plan_free(p);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_loopback_defaults),
        cmocka_unit_test(test_shared_defaults),
        cmocka_unit_test(test_plan_replaces_default_of_its_kind),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
