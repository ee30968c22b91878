/* Unit tests for the envelope search (src/report/envelope.c) over a fake runner whose boundary is
 * known: doubling then bisection to the resolution, never beyond TO, repeats, INCONCLUSIVE
 * never holding, brakes twice, the run budget, the 2-D staircase of x + y <= 300, and the
 * --vary grammar. The expected values follow from the search's definition (DEVELOPERS.md,
 * "envelope"), not from running it. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "squall/envelope.h"
#include "squall/err.h"

typedef struct {
    double limit;               /* holds while the load (dims) <= limit */
    int dims;                   /* 1: v; 2: x + y; 3: y - x */
    enum envelope_verdict over; /* the verdict above the limit */
    double flaky_at;            /* this value fails on its second repeat */
    double leaves_at;           /* a run at this value leaves objects behind */
    double once_at;             /* the first run at this value is INCONCLUSIVE */
    int calls;
} fake_t;

static int fake_run(void *ctx, envelope_run_t *r)
{
    fake_t *f = ctx;
    f->calls++;
    double load = f->dims == 1 ? r->v[0] : f->dims == 2 ? r->v[0] + r->v[1] : r->v[1] - r->v[0];
    r->verdict = load <= f->limit ? ENVELOPE_PASS : f->over;
    if (f->dims == 1 && r->v[0] == f->flaky_at && r->repeat == 2)
        r->verdict = ENVELOPE_FAIL;
    if (r->verdict == ENVELOPE_INCONCLUSIVE)
        snprintf(r->limited, sizeof r->limited, "squall could not offer the planned load");
    r->left = r->v[0] == f->leaves_at ? 3 : 0;
    if (r->v[0] == f->once_at && r->verdict == ENVELOPE_PASS) {
        r->verdict = ENVELOPE_INCONCLUSIVE;
        f->once_at = -1;
    }
    snprintf(r->dir, sizeof r->dir, "points/%03d", f->calls);
    return 0;
}

static envelope_cfg_t cfg1(double from, double to, double res, int repeats, int max_runs)
{
    envelope_cfg_t c = {.n_dims = 1, .repeats = repeats, .max_runs = max_runs, .steps = 4};
    c.dims[0] = (envelope_dim_t){.path = "phases.p.rate",
                                 .from = from,
                                 .to = to,
                                 .resolution = res,
                                 .suffix = "/s",
                                 .integer = true};
    return c;
}

static envelope_t *search(const envelope_cfg_t *c, fake_t *f)
{
    envelope_t *e;
    assert_int_equal(envelope_new(c, &e), 0);
    assert_int_equal(envelope_search(e, fake_run, f), 0);
    return e;
}

static void test_doubling_then_bisection(void **state)
{
    (void)state;
    envelope_cfg_t c = cfg1(10, 1000, 5, 1, 100);
    fake_t f = {.limit = 137, .dims = 1, .over = ENVELOPE_FAIL};
    envelope_t *e = search(&c, &f);
    const envelope_column_t *col = envelope_column_at(e, 0);
    /* 10, 20, 40, 80, 160 (fails): then bisection in (80, 160]. */
    static const double first[] = {10, 20, 40, 80, 160};
    for (int i = 0; i < 5; i++)
        assert_true(envelope_run_at(e, (size_t)i)->v[0] == first[i]);
    assert_true(col->holds_up_to <= 137 && col->holds_up_to > 132);
    assert_true(col->fails_at > 137 && col->fails_at - col->holds_up_to <= 5);
    assert_true(col->resolved && envelope_complete(e) && !envelope_stopped(e));
    for (size_t i = 0; i < envelope_run_count(e); i++)
        assert_true(envelope_run_at(e, i)->v[0] <= 1000);
    envelope_free(e);

    /* Holds at TO: the search stops there (never beyond), resolved. */
    c = cfg1(10, 300, 5, 1, 100);
    f = (fake_t){.limit = 5000, .dims = 1, .over = ENVELOPE_FAIL};
    e = search(&c, &f);
    col = envelope_column_at(e, 0);
    assert_true(col->holds_up_to == 300 && isnan(col->fails_at) && col->resolved);
    assert_true(envelope_run_at(e, envelope_run_count(e) - 1)->v[0] == 300);
    envelope_free(e);

    /* Fails at FROM: nothing holds; one run. */
    c = cfg1(10, 300, 5, 1, 100);
    f = (fake_t){.limit = 5, .dims = 1, .over = ENVELOPE_FAIL};
    e = search(&c, &f);
    col = envelope_column_at(e, 0);
    assert_true(isnan(col->holds_up_to) && col->fails_at == 10 && envelope_run_count(e) == 1);
    envelope_free(e);
}

/* A point holds only when every repeat passed; a failing repeat ends the point. */
static void test_repeats(void **state)
{
    (void)state;
    envelope_cfg_t c = cfg1(10, 1000, 5, 3, 100);
    fake_t f = {.limit = 137, .dims = 1, .over = ENVELOPE_FAIL, .flaky_at = 80};
    envelope_t *e = search(&c, &f);
    const envelope_column_t *col = envelope_column_at(e, 0);
    /* 10, 20, 40: three runs each; 80 fails on its second: the boundary is below 80. */
    assert_int_equal(envelope_run_at(e, 9)->repeat, 1);
    assert_true(envelope_run_at(e, 10)->v[0] == 80 && envelope_run_at(e, 10)->repeat == 2);
    assert_true(col->fails_at <= 80 && col->holds_up_to >= 40 && col->holds_up_to < 80);
    envelope_free(e);
}

/* INCONCLUSIVE above the limit: never holding, the answer not resolved and says why. */
static void test_inconclusive(void **state)
{
    (void)state;
    envelope_cfg_t c = cfg1(10, 1000, 5, 1, 100);
    fake_t f = {.limit = 137, .dims = 1, .over = ENVELOPE_INCONCLUSIVE};
    envelope_t *e = search(&c, &f);
    const envelope_column_t *col = envelope_column_at(e, 0);
    assert_true(col->holds_up_to <= 137 && col->fails_how == ENVELOPE_INCONCLUSIVE);
    assert_false(col->resolved);
    assert_false(envelope_complete(e));
    assert_non_null(strstr(col->limited, "could not offer"));
    /* Each INCONCLUSIVE point was run twice in a row. */
    size_t n = envelope_run_count(e), pairs = 0;
    for (size_t i = 0; i + 1 < n; i++) {
        const envelope_run_t *a = envelope_run_at(e, i), *b = envelope_run_at(e, i + 1);
        if (a->verdict == ENVELOPE_INCONCLUSIVE) {
            assert_true(b->verdict == ENVELOPE_INCONCLUSIVE && b->v[0] == a->v[0]);
            pairs++;
            i++;
        }
    }
    assert_true(pairs >= 2);
    envelope_free(e);

    /* Once INCONCLUSIVE, then a pass: the point holds; the search resolves as without it. */
    c = cfg1(10, 1000, 5, 1, 100);
    f = (fake_t){.limit = 137, .dims = 1, .over = ENVELOPE_FAIL, .once_at = 40};
    e = search(&c, &f);
    col = envelope_column_at(e, 0);
    assert_true(envelope_run_at(e, 2)->verdict == ENVELOPE_INCONCLUSIVE &&
                envelope_run_at(e, 3)->v[0] == 40 &&
                envelope_run_at(e, 3)->verdict == ENVELOPE_PASS);
    assert_true(col->resolved && col->holds_up_to > 132 && col->holds_up_to <= 137);
    envelope_free(e);
}

/* The second braked run stops the search; the budget stops it too. */
static void test_brakes_and_budget(void **state)
{
    (void)state;
    envelope_cfg_t c = cfg1(10, 1000, 5, 1, 100);
    fake_t f = {.limit = 137, .dims = 1, .over = ENVELOPE_BRAKE};
    envelope_t *e = search(&c, &f);
    /* 160 brakes, then bisection at 120 (holds), 140 brakes: stop. */
    assert_string_equal(envelope_stopped(e), "brakes fired twice");
    assert_true(envelope_run_at(e, envelope_run_count(e) - 1)->verdict == ENVELOPE_BRAKE);
    assert_int_equal(envelope_run_count(e), 7);
    envelope_free(e);

    /* A run that left objects behind stops the search at once. */
    f = (fake_t){.limit = 137, .dims = 1, .over = ENVELOPE_FAIL, .leaves_at = 40};
    e = search(&c, &f);
    assert_non_null(strstr(envelope_stopped(e), "left objects"));
    assert_int_equal(envelope_run_count(e), 3);
    envelope_free(e);

    c = cfg1(10, 1000, 5, 1, 4);
    f = (fake_t){.limit = 137, .dims = 1, .over = ENVELOPE_FAIL};
    e = search(&c, &f);
    assert_string_equal(envelope_stopped(e), "max-runs reached");
    assert_int_equal(envelope_run_count(e), 4);
    assert_int_equal(f.calls, 4);
    assert_false(envelope_complete(e));
    envelope_free(e);
}

/* x in 100..200 (3 steps), y in 10..1000: the staircase of x + y <= 300. */
static void test_staircase(void **state)
{
    (void)state;
    envelope_cfg_t c = {.n_dims = 2, .repeats = 1, .max_runs = 200, .steps = 3};
    c.dims[0] = (envelope_dim_t){
        .path = "a", .from = 100, .to = 200, .resolution = 1, .suffix = "", .integer = true};
    c.dims[1] = (envelope_dim_t){
        .path = "b", .from = 10, .to = 1000, .resolution = 5, .suffix = "", .integer = true};
    fake_t f = {.limit = 300, .dims = 2, .over = ENVELOPE_FAIL};
    envelope_t *e = search(&c, &f);
    assert_int_equal(envelope_column_count(e), 3);
    for (size_t i = 0; i < 3; i++) {
        const envelope_column_t *col = envelope_column_at(e, i);
        double x = 100 + 50.0 * (double)i, want = 300 - x;
        assert_true(col->value == x);
        assert_true(col->holds_up_to <= want && col->holds_up_to > want - 5);
        assert_true(col->fails_at - col->holds_up_to <= 5);
    }
    /* No run of a later column above the previous column's first failure. */
    for (size_t i = 0; i < envelope_run_count(e); i++) {
        const envelope_run_t *r = envelope_run_at(e, i);
        if (r->v[0] > 100)
            assert_true(r->v[1] <= envelope_column_at(e, r->v[0] == 150 ? 0 : 1)->fails_at);
    }
    assert_true(envelope_complete(e));
    envelope_free(e);

    /* A column that holds at the cap the one before set goes on towards TO: the limit here
     * does not fall with the first value (x - y <= 0 holds more as x grows), so each column's
     * boundary is still found. */
    f = (fake_t){.limit = 0, .dims = 3, .over = ENVELOPE_FAIL};
    e = search(&c, &f);
    for (size_t i = 0; i < 3; i++) {
        const envelope_column_t *col = envelope_column_at(e, i);
        assert_true(col->resolved && col->holds_up_to <= col->value &&
                    col->holds_up_to > col->value - 5);
    }
    envelope_free(e);

    /* Once a column holds nowhere, larger ones are not searched. */
    f = (fake_t){.limit = 130, .dims = 2, .over = ENVELOPE_FAIL};
    e = search(&c, &f);
    assert_true(envelope_column_at(e, 1)->searched && !envelope_column_at(e, 2)->searched);
    envelope_free(e);
}

/* Whole values one apart cannot be bisected further: resolved even below a resolution of 1. */
static void test_integer_step(void **state)
{
    (void)state;
    envelope_cfg_t c = cfg1(1, 100, 0.5, 1, 100);
    fake_t f = {.limit = 37, .dims = 1, .over = ENVELOPE_FAIL};
    envelope_t *e = search(&c, &f);
    const envelope_column_t *col = envelope_column_at(e, 0);
    assert_true(col->holds_up_to == 37 && col->fails_at == 38 && col->resolved);
    assert_true(envelope_complete(e));
    envelope_free(e);
}

static void test_dim_parse(void **state)
{
    (void)state;
    envelope_dim_t d;
    char err[256], buf[64];
    assert_int_equal(envelope_dim_parse("phases.steady.rate=50/s..800/s", &d, err, sizeof err), 0);
    assert_string_equal(d.path, "phases.steady.rate");
    assert_string_equal(d.suffix, "/s");
    assert_true(d.from == 50 && d.to == 800 && d.integer);
    envelope_value_text(&d, 187, buf, sizeof buf);
    assert_string_equal(buf, "187/s");
    free((char *)d.path);
    assert_int_equal(envelope_dim_parse("x=0.5..2.5", &d, err, sizeof err), 0);
    assert_false(d.integer);
    free((char *)d.path);
    assert_int_equal(envelope_dim_parse("x=5..1", &d, err, sizeof err), SQ_EINVAL);
    assert_int_equal(envelope_dim_parse("x=1/s..5", &d, err, sizeof err), SQ_EINVAL);
    assert_int_equal(envelope_dim_parse("x=0..5", &d, err, sizeof err), SQ_EINVAL);
    assert_int_equal(envelope_dim_parse("x=1-5", &d, err, sizeof err), SQ_EINVAL);
    assert_non_null(strstr(err, "PATH=FROM..TO"));
}

/* The cool-down's rule as envelope.h states it: within max(10 % of |idle|, 0.5). */
static void test_back_to_idle(void **state)
{
    (void)state;
    assert_true(envelope_back_to_idle(0, 0));
    assert_true(envelope_back_to_idle(0, 0.5));
    assert_false(envelope_back_to_idle(0, 1)); /* a count that was 0 must be 0 again */
    assert_false(envelope_back_to_idle(3, 4));
    assert_true(envelope_back_to_idle(1000, 1100));
    assert_true(envelope_back_to_idle(1000, 900));
    assert_false(envelope_back_to_idle(1000, 1101));
    assert_true(envelope_back_to_idle(-20, -22));
    assert_false(envelope_back_to_idle(-20, -23));
    assert_false(envelope_back_to_idle(5, NAN));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_doubling_then_bisection),
        cmocka_unit_test(test_repeats),
        cmocka_unit_test(test_inconclusive),
        cmocka_unit_test(test_brakes_and_budget),
        cmocka_unit_test(test_staircase),
        cmocka_unit_test(test_integer_step),
        cmocka_unit_test(test_dim_parse),
        cmocka_unit_test(test_back_to_idle),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
