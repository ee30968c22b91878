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

/* Column 60 of line 1 is the "0" after "streams: " (counted by hand, 1-based). */
static void test_streams_out_of_range(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p = (plan_t *)1;
    assert_int_equal(plan_load(PLANS "/bad-streams.yaml", NULL, 0, &p, o), SQ_EPARSE);
    assert_null(p);
    const char *got = out_captured_diag(o);
    if (!strstr(got, "bad-streams.yaml:1:60: error: target.streams: ") ||
        !strstr(got, "from 1 to 10000"))
        fail_msg("unexpected diagnostics: %s", got);
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
