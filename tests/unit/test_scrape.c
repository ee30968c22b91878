/* Unit tests for the scraped metrics' derived series (src/scrape/derive.c): Prometheus's
 * documented rules (prometheus.io, "Query functions": rate() counts a drop as a counter reset,
 * histogram_quantile() interpolates linearly within a bucket and answers the highest finite
 * bound for the +Inf bucket), on cases whose answers are worked out by hand beside them. The
 * same rules are checked on real scrapes against a Python implementation in
 * tests/integration/metrics_scrape.sh. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "squall/scrape.h"

static void test_rates_and_reset(void **state)
{
    (void)state;
    const int64_t t[] = {0, 2000, 4000, 5000};
    const double v[] = {10, 30, 5, 15}; /* 10 -> 30: +20 in 2 s; 30 -> 5: reset, +5 in 2 s */
    double r[3];
    scrape_rates(t, v, 4, r);
    assert_true(r[0] == 10.0); /* 20 / 2 */
    assert_true(r[1] == 2.5);  /* 5 / 2 */
    assert_true(r[2] == 10.0); /* 10 / 1 */
}

static void test_bucket_quantile(void **state)
{
    (void)state;
    const double b[] = {0.1, 0.5, 1, INFINITY};
    const double inc[] = {10, 60, 90, 100}; /* cumulative: 10 <= 0.1, 50 in (0.1, 0.5], ... */
    /* p50: rank 50 in (0.1, 0.5] holding 50 with 10 below: 0.1 + 0.4 * 40 / 50 = 0.42. */
    assert_true(fabs(scrape_bucket_quantile(0.5, b, inc, 4) - 0.42) < 1e-12);
    /* p90: rank 90 = the top of (0.5, 1]: 0.5 + 0.5 * 30 / 30 = 1. */
    assert_true(fabs(scrape_bucket_quantile(0.9, b, inc, 4) - 1.0) < 1e-12);
    /* p99: rank 99 lies in the +Inf bucket: the highest finite bound, 1. */
    assert_true(scrape_bucket_quantile(0.99, b, inc, 4) == 1.0);
    /* p5: rank 5 in the first bucket, counted from 0: 0.1 * 5 / 10 = 0.05. */
    assert_true(fabs(scrape_bucket_quantile(0.05, b, inc, 4) - 0.05) < 1e-12);
    const double none[] = {0, 0, 0, 0};
    assert_true(isnan(scrape_bucket_quantile(0.5, b, none, 4)));
    assert_true(isnan(scrape_bucket_quantile(1.0, b, inc, 4)));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_rates_and_reset),
        cmocka_unit_test(test_bucket_quantile),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
