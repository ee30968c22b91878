/* Unit tests for after-answer fleet agents (src/sched/fleet.c, next: after-answer): an agent
 * waits for its answer and acts again a period (jittered) after it, or a retry delay after a
 * failure; its first instant is its timing's; shards deal its agents; joins and leaves hold.
 * Then whole fleets simulated in virtual time against a target that stalls or answers errors,
 * their sends gauged window by window with the synchronisation gauge (src/stats/sync.c, itself
 * tested against numpy in test_sync.c): the storm a stall makes, its decay with jitter against
 * the closed form (sin a / a)^k (the uniform distribution's characteristic function at 1, raised
 * to the k-th power: k independent U(-j, j)·2π phase shifts; Mardia & Jupp, "Directional
 * Statistics", 2000: a wrapped distribution's mean resultant length is |its characteristic
 * function at 1|; from memory), and full-jitter retries (watch_backoff, "Exponential Backoff And
 * Jitter", AWS Architecture Blog, 2015) against fixed ones. No wall clock: every time is the
 * simulation's. Fixed seeds. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/rng.h"
#include "squall/sched.h"
#include "squall/sync.h"
#include "squall/watch.h"
#include "test_stats.h"

#define S  INT64_C(1000000000)
#define MS INT64_C(1000000)

static sched_fleet_cfg_t after_cfg(int agents, int64_t period, double jitter, int64_t duration)
{
    return (sched_fleet_cfg_t){.agents = agents,
                               .period_ns = period,
                               .timing = SCHED_SPREAD,
                               .next = SCHED_NEXT_AFTER_ANSWER,
                               .jitter = jitter,
                               .duration_ns = duration,
                               .seed = 7};
}

/* Every agent acts once, then waits: nothing more comes until an answer does; an answer gives
 * exactly answer + P without jitter, a failure answer + the retry delay; misuse changes nothing. */
static void test_waits_for_answer(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = after_cfg(5, 1 * S, 0, 10 * S);
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    int64_t first[5], t;
    int a, n = 0;
    while (sched_fleet_next(f, &t, &a)) {
        assert_true(t >= 0 && t < S && sched_fleet_waiting(f, a));
        first[a] = t;
        n++;
    }
    assert_int_equal(n, 5); /* one action each in the first period, then all wait */
    for (int i = 0; i < 5; i++)
        assert_true(sched_fleet_waiting(f, i));
    int64_t next;
    /* Agent 2's success 300 ms after its action: next exactly a period after the answer. */
    assert_true(sched_fleet_answer(f, 2, first[2] + 300 * MS, -1, &next));
    assert_true(next == first[2] + 300 * MS + S);
    assert_false(sched_fleet_waiting(f, 2));
    assert_false(sched_fleet_answer(f, 2, first[2] + 400 * MS, -1, &next)); /* not waiting */
    assert_false(sched_fleet_answer(f, 9, 0, -1, &next));                   /* no such agent */
    /* Agent 4's failure, retried 250 ms later. */
    assert_true(sched_fleet_answer(f, 4, first[4] + 10 * MS, 250 * MS, &next));
    assert_true(next == first[4] + 260 * MS);
    /* They come out in time order; the others still wait. */
    int64_t want[2] = {first[2] + 1300 * MS, first[4] + 260 * MS};
    int who[2] = {2, 4};
    if (want[1] < want[0]) {
        int64_t x = want[0];
        want[0] = want[1], want[1] = x;
        who[0] = 4, who[1] = 2;
    }
    for (int k = 0; k < 2; k++) {
        assert_true(sched_fleet_next(f, &t, &a));
        assert_true(t == want[k] && a == who[k]);
    }
    assert_false(sched_fleet_next(f, &t, &a));
    /* An answer whose next instant falls at or after the end: the agent is done. */
    assert_false(sched_fleet_answer(f, 0, 9500 * MS, -1, &next));
    assert_true(next == 10500 * MS);
    assert_false(sched_fleet_waiting(f, 0));
    sched_fleet_free(f);

    /* A fixed fleet takes no answers. */
    cfg.next = SCHED_NEXT_FIXED;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    assert_true(sched_fleet_next(f, &t, &a));
    assert_false(sched_fleet_waiting(f, a));
    assert_false(sched_fleet_answer(f, a, t, -1, &next));
    sched_fleet_free(f);
    cfg.next = (enum sched_next)7;
    assert_int_equal(sched_fleet_new(&cfg, &f), SQ_EINVAL);
}

/* With jitter x the gap from answer to next action is P·(1 + U(-x, x)): within the bounds, and
 * uniform over them by Pearson's chi-square (10 bins, df 9, critical 21.666 at alpha .01; NIST/
 * SEMATECH e-Handbook, table of the chi-square distribution). */
static void test_jitter_uniform(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = after_cfg(1, 1 * S, 0.1, INT64_MAX / 4);
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    double obs[10] = {0}, exp[10];
    int64_t t, next;
    int a;
    const int n = 5000;
    for (int i = 0; i < n; i++) {
        assert_true(sched_fleet_next(f, &t, &a));
        int64_t u = t + 3 * MS; /* the answer */
        assert_true(sched_fleet_answer(f, a, u, -1, &next));
        int64_t gap = next - u;
        assert_true(gap >= 900 * MS && gap <= 1100 * MS);
        int bin = (int)((double)(gap - 900 * MS) / (200.0 * (double)MS) * 10);
        obs[bin < 10 ? bin : 9]++;
    }
    for (int i = 0; i < 10; i++)
        exp[i] = n / 10.0;
    double chi = chi_square(obs, exp, 10);
    printf("after-answer jitter 10%%: gaps' X2 %.3f over 10 bins (critical %.3f)\n", chi,
           CHI2_9_01);
    assert_true(chi < CHI2_9_01);
    sched_fleet_free(f);
}

/* The first instants are the timing's (spread: one per agent in [0, P), as a fixed fleet's);
 * the count with instant answers and no jitter is the fixed fleet's, and the model's expectation
 * over the phase is that count; joins delay first instants, and an agent that leaves takes no
 * action at or after its end. */
static void test_first_count_join_leave(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = after_cfg(200, 1 * S, 0, 20 * S);
    sched_fleet_cfg_t fixed = cfg;
    fixed.next = SCHED_NEXT_FIXED;
    sched_fleet_t *f, *g;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    assert_int_equal(sched_fleet_new(&fixed, &g), 0);
    for (int i = 0; i < 200; i++) {
        int64_t t1, t2;
        int a1, a2;
        assert_true(sched_fleet_next(f, &t1, &a1) && sched_fleet_next(g, &t2, &a2));
        assert_true(t1 == t2 && a1 == a2);
    }
    sched_fleet_free(f);
    sched_fleet_free(g);
    int64_t n = sched_fleet_count(&cfg);
    assert_true(n == sched_fleet_count(&fixed) && n > 3900 && n <= 4000);
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    assert_true(fabs(sched_fleet_expected(f, 0, 20 * S) - (double)n) < 1e-9);
    sched_fleet_free(f);

    /* Join over 10 s, leave over the last 5 s: instants within each agent's life only. */
    cfg.join_ns = 10 * S;
    cfg.leave_ns = 5 * S;
    cfg.jitter = 0.2;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    int64_t t, next;
    int a, acted = 0;
    while (sched_fleet_next(f, &t, &a)) {
        int64_t join = (int64_t)(10.0 * S * a / 200), end = 15 * S + (int64_t)(5.0 * S * a / 200);
        assert_true(t >= join && t < end);
        acted++;
        if (sched_fleet_answer(f, a, t + 5 * MS, -1, &next))
            assert_true(next < end);
        else
            assert_true(next >= end);
    }
    assert_true(acted > 1000);
    for (int i = 0; i < 200; i++)
        assert_false(sched_fleet_waiting(f, i));
    /* With jitter the model is an expectation (central limit theorem, see fleet.c): within 2 %
     * of what instant answers gave here. */
    double e = sched_fleet_expected(f, 0, 20 * S);
    printf("after-answer with joins, leaves and 20%% jitter: %d actions, model %.1f\n", acted, e);
    assert_true(fabs(e - acted) < 0.02 * acted);
    sched_fleet_free(f);
}

/* Shards deal agents by k mod N: the two halves' agents are disjoint, their union is the whole
 * fleet, and each agent's first instant is the single fleet's. */
static void test_shards(void **state)
{
    (void)state;
    sched_fleet_cfg_t cfg = after_cfg(101, 1 * S, 0.1, 5 * S);
    int64_t whole[101];
    sched_fleet_t *f;
    int64_t t;
    int a;
    assert_int_equal(sched_fleet_new(&cfg, &f), 0);
    while (sched_fleet_next(f, &t, &a))
        whole[a] = t;
    sched_fleet_free(f);
    int seen[101] = {0};
    for (int s = 1; s <= 2; s++) {
        cfg.shard = (sched_shard_t){s, 2};
        assert_int_equal(sched_fleet_new(&cfg, &f), 0);
        while (sched_fleet_next(f, &t, &a)) {
            assert_true(a % 2 == s - 1 && t == whole[a]);
            seen[a]++;
        }
        sched_fleet_free(f);
    }
    for (int i = 0; i < 101; i++)
        assert_int_equal(seen[i], 1);
}

/* ---- whole fleets against a simulated target ------------------------------------------------ */

/* The target: answers after `service`; during a stall [stall_a, stall_b) it holds every request
 * and answers it at stall_b + service; a request it processes in [err_a, err_b) fails. */
typedef struct {
    int64_t service, stall_a, stall_b, err_a, err_b;
} target_t;

static bool target_answer(const target_t *tg, int64_t sent, int64_t *at)
{
    int64_t proc = sent >= tg->stall_a && sent < tg->stall_b ? tg->stall_b : sent;
    *at = proc + tg->service;
    return !(proc >= tg->err_a && proc < tg->err_b);
}

#define WINDOWS 40

/* Runs a fleet against tg in virtual time (retry with policy, base 200 ms, cap 7 s, or the
 * given base for fixed) and writes R̄ of every window of one period from t = 0. Answers are
 * handed back at once: every answer's next instant lies after the action being handled. */
static void simulate(const sched_fleet_cfg_t *cfg, const target_t *tg, enum watch_policy policy,
                     int64_t base, double *rbar, size_t n_win)
{
    sched_fleet_t *f;
    assert_int_equal(sched_fleet_new(cfg, &f), 0);
    watch_backoff_t *bo = calloc((size_t)cfg->agents, sizeof(*bo));
    assert_non_null(bo);
    for (int i = 0; i < cfg->agents; i++)
        watch_backoff_init(&bo[i], policy, base, 7 * S);
    rng_t rng;
    rng_seed(&rng, 11);
    sync_acc_t acc[WINDOWS];
    for (size_t w = 0; w < n_win; w++)
        assert_int_equal(sync_acc_init(&acc[w], 0, cfg->period_ns), 0);
    int64_t t, at;
    int a;
    while (sched_fleet_next(f, &t, &a)) {
        size_t w = (size_t)(t / cfg->period_ns);
        if (w < n_win)
            sync_acc_add(&acc[w], t);
        if (cfg->next == SCHED_NEXT_FIXED)
            continue;
        bool ok = target_answer(tg, t, &at);
        int64_t retry = -1;
        if (ok)
            watch_backoff_reset(&bo[a]);
        else
            retry = watch_backoff_next(&bo[a], &rng);
        sched_fleet_answer(f, a, at, retry, NULL);
    }
    for (size_t w = 0; w < n_win; w++) {
        sync_gauge_t g;
        sync_acc_gauge(&acc[w], &g);
        rbar[w] = g.r_bar;
    }
    free(bo);
    sched_fleet_free(f);
}

static void print_rbar(const char *what, const double *r, size_t from, size_t to)
{
    printf("%s: R-bar of windows %zu..%zu:", what, from, to - 1);
    for (size_t w = from; w < to; w++)
        printf(" %.3f", r[w]);
    printf("\n");
}

/* 1,000 agents every 2 s, a 3 s stall from 10 s: before it the fleet is spread (R̄ < 0.1);
 * after it every agent acts at once (R̄ = 1 without jitter, for good); with ±10 % jitter the
 * bunch decays as (sin a / a)^k, a = 2π·0.1, within 0.06 (the spread of R̄ of 1,000 phases,
 * about 0.02, three times over); the fixed schedule never moved (R̄ < 0.1 throughout). */
static void test_stall_storm(void **state)
{
    (void)state;
    target_t tg = {
        .service = 5 * MS, .stall_a = 10 * S, .stall_b = 13 * S, .err_a = -1, .err_b = -1};
    sched_fleet_cfg_t cfg = after_cfg(1000, 2 * S, 0, 40 * S);
    double r[WINDOWS];
    simulate(&cfg, &tg, WATCH_POLICY_FULL_JITTER, 200 * MS, r, 20);
    print_rbar("after-answer, no jitter, stall 10-13 s", r, 0, 20);
    for (size_t w = 0; w < 5; w++)
        assert_true(r[w] < 0.1);
    for (size_t w = 7; w < 20; w++)
        assert_true(r[w] > 1 - 1e-9);

    cfg.jitter = 0.1;
    simulate(&cfg, &tg, WATCH_POLICY_FULL_JITTER, 200 * MS, r, 20);
    print_rbar("after-answer, jitter 10%, stall 10-13 s", r, 0, 20);
    for (size_t w = 0; w < 5; w++)
        assert_true(r[w] < 0.1);
    double a = 2 * M_PI * 0.1;
    for (int k = 1; k <= 4; k++) {
        double want = pow(sin(a) / a, k);
        printf("  window %d: %.3f, (sin a / a)^%d = %.3f\n", 6 + k, r[6 + k], k, want);
        assert_true(fabs(r[6 + k] - want) < 0.06);
    }
    assert_true(r[19] < r[9] - 0.2); /* still decaying */

    cfg.next = SCHED_NEXT_FIXED;
    cfg.jitter = 0;
    simulate(&cfg, &tg, WATCH_POLICY_FULL_JITTER, 200 * MS, r, 20);
    print_rbar("fixed schedule, stall 10-13 s", r, 0, 20);
    for (size_t w = 0; w < 20; w++)
        assert_true(r[w] < 0.1);
}

/* A 100 % error window [10 s, 25 s): in the first whole period after it ([26, 28)) fixed retries
 * every 200 ms have gathered the fleet into the 0.2 s after the recovery (R̄ > 0.8); full-jitter
 * retries have not (R̄ < 0.3): the bounds sync_sim_check.py holds the numpy model to. */
static void test_retry_policies(void **state)
{
    (void)state;
    target_t tg = {
        .service = 5 * MS, .stall_a = -1, .stall_b = -1, .err_a = 10 * S, .err_b = 25 * S};
    sched_fleet_cfg_t cfg = after_cfg(1000, 2 * S, 0.1, 40 * S);
    double fx[WINDOWS], fj[WINDOWS];
    simulate(&cfg, &tg, WATCH_POLICY_FIXED, 200 * MS, fx, 20);
    simulate(&cfg, &tg, WATCH_POLICY_FULL_JITTER, 200 * MS, fj, 20);
    print_rbar("fixed retries, errors 10-25 s", fx, 10, 16);
    print_rbar("full-jitter retries, errors 10-25 s", fj, 10, 16);
    assert_true(fx[13] > 0.8 && fj[13] < 0.3);
    for (size_t w = 0; w < 5; w++)
        assert_true(fx[w] < 0.1 && fj[w] < 0.1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_waits_for_answer),
        cmocka_unit_test(test_jitter_uniform),
        cmocka_unit_test(test_first_count_join_leave),
        cmocka_unit_test(test_shards),
        cmocka_unit_test(test_stall_storm),
        cmocka_unit_test(test_retry_policies),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
