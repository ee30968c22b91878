/* Unit test of the plan's target.streams key (HTTP/2 streams per connection): read when given,
 * 0 when absent, refused outside 1..10000 with the plan position. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/plan.h"

#define PLANS SRCDIR "/tests/data/plans"

static void test_streams_given(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    assert_int_equal(plan_load(PLANS "/h2-streams.yaml", NULL, 0, &p, o), 0);
    assert_int_equal(p->target.http, PLAN_HTTP_2);
    assert_int_equal(p->target.connections, 4);
    assert_int_equal(p->target.streams, 64);
    plan_free(p);
    /* --set reaches the key like any other (the override path is plan/set.c's). */
    const plan_override_t set[] = {{"target.streams", "256"}};
    assert_int_equal(plan_load(PLANS "/h2-streams.yaml", set, 1, &p, o), 0);
    assert_int_equal(p->target.streams, 256);
    plan_free(p);
    out_free(o);
}

static void test_streams_absent(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    assert_int_equal(plan_load(SRCDIR "/scenarios/demo.yaml", NULL, 0, &p, o), 0);
    assert_int_equal(p->target.streams, 0);
    plan_free(p);
    out_free(o);
}

/* The error points at the "0" after "streams: " on line 1: its 1-based column is found here in
 * the file's text (60: "target: {url: \"http://127.0.0.1:7070\", http: \"2\", " is 50
 * characters, "streams: " 9 more). */
static void test_streams_out_of_range(void **state)
{
    (void)state;
    char line[256], want[512];
    FILE *f = fopen(PLANS "/bad-streams.yaml", "r");
    assert_non_null(f);
    assert_non_null(fgets(line, sizeof line, f));
    fclose(f);
    const char *at = strstr(line, "streams: 0");
    assert_non_null(at);
    int col = (int)(at - line) + (int)strlen("streams: ") + 1;
    assert_int_equal(col, 60);
    snprintf(want, sizeof want,
             "bad-streams.yaml:1:%d: error: target.streams: out of range (expected an integer "
             "from 1 to 10000, got '0')\n",
             col);
    out_t *o = out_new_capture();
    plan_t *p = (plan_t *)1;
    assert_int_equal(plan_load(PLANS "/bad-streams.yaml", NULL, 0, &p, o), SQ_EPARSE);
    assert_null(p);
    const char *got = out_captured_diag(o);
    size_t n = strlen(got), w = strlen(want);
    if (n < w || strcmp(got + n - w, want) != 0)
        fail_msg("unexpected diagnostics: %s(wanted ...%s)", got, want);
    out_free(o);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_streams_given),
        cmocka_unit_test(test_streams_absent),
        cmocka_unit_test(test_streams_out_of_range),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
