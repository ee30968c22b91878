/* Reconnect delays against the formulas of "Exponential Backoff and Jitter" (Marc Brooker, AWS
 * Architecture Blog, March 2015: expo = min(cap, base * 2 ** attempt); full jitter
 * random_between(0, expo); equal jitter expo/2 + random_between(0, expo/2); decorrelated
 * min(cap, random_between(base, sleep * 3))), checked with the one-sample Kolmogorov-Smirnov test
 * and the Kolmogorov distribution's critical value (test_stats.h, checked against scipy), and the
 * watch stream's state machine (resume, too old, relist, duplicates, closed is final). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>

#include "squall/watch.h"
#include "test_stats.h"

#define MS INT64_C(1000000)
#define N  4000

static double unif_cdf(double x, double hi)
{
    return x <= 0 ? 0 : x >= hi ? 1 : x / hi;
}

/* expo(n) = min(cap, base * 2^n): by hand for base 100 ms, cap 1 s. */
static void test_expo_and_deterministic_policies(void **state)
{
    (void)state;
    const int64_t want[] = {100, 200, 400, 800, 1000, 1000, 1000};
    watch_backoff_t b;
    rng_t rng;
    rng_seed(&rng, 1);
    watch_backoff_init(&b, WATCH_POLICY_EXPONENTIAL, 100 * MS, 1000 * MS);
    for (int n = 0; n < 7; n++) {
        assert_true(watch_backoff_expo(100 * MS, 1000 * MS, n) == want[n] * MS);
        assert_true(watch_backoff_next(&b, &rng) == want[n] * MS);
    }
    assert_true(watch_backoff_expo(1, INT64_MAX, 80) == INT64_MAX); /* no overflow */
    watch_backoff_reset(&b);
    assert_true(watch_backoff_next(&b, &rng) == 100 * MS);
    watch_backoff_init(&b, WATCH_POLICY_FIXED, 250 * MS, 10000 * MS);
    for (int n = 0; n < 5; n++)
        assert_true(watch_backoff_next(&b, &rng) == 250 * MS);
    watch_backoff_init(&b, WATCH_POLICY_IMMEDIATE, 250 * MS, 10000 * MS);
    assert_true(watch_backoff_next(&b, &rng) == 0);
}

/* Full jitter: attempt n is U(0, expo(n)). N draws per attempt, each fresh from attempt 0. The KS
 * distance must stay under c(.01)/sqrt(N) = 1.62762/sqrt(N) (the Kolmogorov distribution's 0.99
 * quantile, asymptotic; KS_C_01 in test_stats.h, recomputed with scipy.stats.kstwobign). */
static void test_full_jitter_ks(void **state)
{
    (void)state;
    static double x[N];
    rng_t rng;
    rng_seed(&rng, 2015);
    for (int attempt = 0; attempt < 5; attempt++) {
        double hi = (double)watch_backoff_expo(200 * MS, 2000 * MS, attempt);
        for (int i = 0; i < N; i++) {
            watch_backoff_t b;
            watch_backoff_init(&b, WATCH_POLICY_FULL_JITTER, 200 * MS, 2000 * MS);
            for (int k = 0; k < attempt; k++)
                watch_backoff_next(&b, &rng);
            int64_t d = watch_backoff_next(&b, &rng);
            assert_true(d >= 0 && (double)d < hi);
            x[i] = (double)d;
        }
        double D = ks_distance(x, N, unif_cdf, hi);
        if (D >= KS_C_01 / sqrt(N))
            fail_msg("full jitter, attempt %d: KS D = %.4f >= %.4f", attempt, D, KS_C_01 / sqrt(N));
    }
}

/* Equal jitter: expo/2 + U(0, expo/2), so (d - expo/2) is U(0, expo/2). */
static void test_equal_jitter_ks(void **state)
{
    (void)state;
    static double x[N];
    rng_t rng;
    rng_seed(&rng, 7);
    watch_backoff_t b;
    for (int i = 0; i < N; i++) {
        watch_backoff_init(&b, WATCH_POLICY_EQUAL_JITTER, 200 * MS, 2000 * MS);
        watch_backoff_next(&b, &rng);
        int64_t d = watch_backoff_next(&b, &rng); /* attempt 1: expo = 400 ms */
        assert_true(d >= 200 * MS && d < 400 * MS);
        x[i] = (double)(d - 200 * MS);
    }
    double D = ks_distance(x, N, unif_cdf, (double)(200 * MS));
    assert_true(D < KS_C_01 / sqrt(N));
}

/* Decorrelated jitter: sleep = min(cap, U(base, 3 * sleep)), from sleep = base. The first draw
 * is U(base, 3 base); every later one lies in [base, min(cap, 3 * previous)]. */
static void test_decorrelated(void **state)
{
    (void)state;
    static double x[N];
    rng_t rng;
    rng_seed(&rng, 11);
    watch_backoff_t b;
    for (int i = 0; i < N; i++) {
        watch_backoff_init(&b, WATCH_POLICY_DECORRELATED, 100 * MS, 5000 * MS);
        int64_t prev = watch_backoff_next(&b, &rng);
        x[i] = (double)(prev - 100 * MS);
        for (int k = 0; k < 20; k++) {
            int64_t d = watch_backoff_next(&b, &rng);
            assert_true(d >= 100 * MS);
            assert_true(d <= 3 * prev && d <= 5000 * MS);
            prev = d;
        }
    }
    double D = ks_distance(x, N, unif_cdf, (double)(200 * MS));
    assert_true(D < KS_C_01 / sqrt(N));
}

static watch_stream_cfg_t watch_class(enum watch_policy policy, bool can_relist)
{
    return (watch_stream_cfg_t){.policy = policy,
                                .base_ns = 100 * MS,
                                .cap_ns = 1000 * MS,
                                .too_old_status = 410,
                                .can_relist = can_relist};
}

static int changes;
static void on_state(void *user, enum watch_state from, enum watch_state to)
{
    (void)user;
    assert_true(from != to);
    changes++;
}

/* Resume and too old: a drop reconnects from the last version after the backoff; 410 re-lists
 * first and the list's version becomes the resume point; a failed relist is retried after the
 * backoff; a stream that delivered resets the backoff; closed is final. */
static void test_stream_machine(void **state)
{
    (void)state;
    watch_stream_cfg_t c = watch_class(WATCH_POLICY_EXPONENTIAL, true);
    watch_stream_t s;
    rng_t rng;
    rng_seed(&rng, 3);
    int64_t delay;
    watch_stream_init(&s, &c);
    s.on_state = on_state;
    changes = 0;
    assert_int_equal(s.state, WATCH_IDLE);
    watch_stream_set(&s, WATCH_OPENING);
    watch_stream_set(&s, WATCH_OPEN);
    watch_fields_t f = {.has_version = true, .version_numeric = true, .version_num = 5};
    snprintf(f.version, sizeof f.version, "5");
    assert_false(watch_stream_event(&s, &f));
    assert_true(watch_stream_event(&s, &f)); /* the same version again: a duplicate */
    assert_int_equal(s.duplicates, 1);
    assert_string_equal(s.version, "5");

    /* Dropped after events: reconnect after expo(0) = 100 ms, resuming from 5. */
    watch_end_t drop = {.status = 200, .transport = true, .got_events = true};
    assert_int_equal(watch_stream_ended(&s, &drop, &rng, &delay), WATCH_DO_RECONNECT);
    assert_true(delay == 100 * MS);
    assert_int_equal(s.state, WATCH_WAITING);
    assert_int_equal(s.drops, 1);
    /* The reconnect is refused: 200 ms next (no events, no reset). */
    watch_stream_set(&s, WATCH_OPENING);
    watch_end_t refused = {.status = 0, .transport = true};
    assert_int_equal(watch_stream_ended(&s, &refused, &rng, &delay), WATCH_DO_RECONNECT);
    assert_true(delay == 200 * MS);
    assert_int_equal(s.drops, 1);
    assert_true(s.has_version);

    /* Too old: re-list at once, without a version. */
    watch_stream_set(&s, WATCH_OPENING);
    watch_end_t gone = {.status = 410};
    assert_int_equal(watch_stream_ended(&s, &gone, &rng, &delay), WATCH_DO_RELIST);
    assert_true(delay == 0);
    assert_int_equal(s.state, WATCH_RELISTING);
    assert_false(s.has_version);
    /* The relist fails (503): retried after the backoff (expo(2) = 400 ms). */
    watch_end_t unavailable = {.status = 503};
    assert_int_equal(watch_stream_ended(&s, &unavailable, &rng, &delay), WATCH_DO_RELIST);
    assert_true(delay == 400 * MS);
    /* The relist works: watch from its version at once. */
    watch_stream_set(&s, WATCH_RELISTING);
    watch_stream_relisted(&s, "90");
    watch_end_t listed = {.status = 200};
    assert_int_equal(watch_stream_ended(&s, &listed, &rng, &delay), WATCH_DO_RECONNECT);
    assert_true(delay == 0);
    assert_true(s.has_version && s.version_num == 90);
    assert_int_equal(s.too_old, 1);
    assert_int_equal(s.relists, 1);

    /* Closed is final: nothing revives it. */
    watch_stream_set(&s, WATCH_CLOSED);
    watch_stream_set(&s, WATCH_OPENING);
    assert_int_equal(s.state, WATCH_CLOSED);
    assert_int_equal(watch_stream_ended(&s, &drop, &rng, &delay), WATCH_DO_NOTHING);
    assert_true(changes > 0);
}

/* Too old without a relist class: open fresh (no version) after the backoff. */
static void test_too_old_without_relist(void **state)
{
    (void)state;
    watch_stream_cfg_t c = watch_class(WATCH_POLICY_FIXED, false);
    watch_stream_t s;
    rng_t rng;
    rng_seed(&rng, 4);
    int64_t delay;
    watch_stream_init(&s, &c);
    watch_stream_relisted(&s, "12");
    watch_stream_set(&s, WATCH_OPENING);
    watch_end_t gone = {.status = 410};
    assert_int_equal(watch_stream_ended(&s, &gone, &rng, &delay), WATCH_DO_FRESH);
    assert_true(delay == 100 * MS);
    assert_false(s.has_version);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_expo_and_deterministic_policies),
        cmocka_unit_test(test_full_jitter_ks),
        cmocka_unit_test(test_equal_jitter_ks),
        cmocka_unit_test(test_decorrelated),
        cmocka_unit_test(test_stream_machine),
        cmocka_unit_test(test_too_old_without_relist),
        cmocka_unit_test(test_critical_values_match_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
