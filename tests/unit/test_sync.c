/* Unit tests for the synchronisation gauge (src/stats/sync.c) against an independent numpy
 * computation written from the formulas (tests/unit/sync_ref.py): R̄, Z, Zar's p-value and the
 * peak-to-mean ratio of random and von Mises instants, window by window; two published worked
 * examples (pingouin's circ_rayleigh docstring for Zar's p, Mardia & Jupp's pigeon homing data
 * for R̄); evenly spread and all-at-once fleets; and small cases worked by hand. Fixed seeds. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "pyref.h"

#include "squall/err.h"
#include "squall/rng.h"
#include "squall/sync.h"

#define NS_PER_S INT64_C(1000000000)

/* A growing text buffer for the reference script's input. */
typedef struct {
    char *s;
    size_t len, cap;
} text_t;

static void text_add(text_t *t, const char *fmt, ...)
{
    va_list ap;
    for (;;) {
        va_start(ap, fmt);
        int n = vsnprintf(t->s ? t->s + t->len : NULL, t->s ? t->cap - t->len : 0, fmt, ap);
        va_end(ap);
        assert_true(n >= 0);
        if (t->s && t->len + (size_t)n < t->cap) {
            t->len += (size_t)n;
            return;
        }
        t->cap = (t->cap + (size_t)n + 1) * 2;
        t->s = realloc(t->s, t->cap);
        assert_non_null(t->s);
    }
}

/* Appends one case line "NAME BASE P T1 T2 ..." of the reference script's input. */
static void add_case(text_t *in, const char *name, int64_t base, int64_t period, const int64_t *t,
                     size_t n)
{
    text_add(in, "%s %lld %lld", name, (long long)base, (long long)period);
    for (size_t i = 0; i < n; i++)
        text_add(in, " %lld", (long long)t[i]);
    text_add(in, "\n");
}

/* Runs the reference on the cases and frees them; returns its answer (pyref_run's buffer). */
static char *run_cases(text_t *in)
{
    char *ref = pyref_run("sync_ref.py", in->s);
    free(in->s);
    *in = (text_t){0};
    return ref;
}

/* Relative closeness, with an absolute floor for values near 0. */
static void assert_close(double got, double want, double tol, const char *what)
{
    double err = fabs(got - want) / fmax(1.0, fabs(want));
    if (!(err <= tol))
        fail_msg("%s: got %.17g, numpy %.17g (difference %.3g, tolerance %.1g)", what, got, want,
                 err, tol);
}

/* Compares a gauge with one "n rbar z p ptm" of the reference; returns the rest of the line. */
static char *check_ref(const sync_gauge_t *g, char *line, const char *what)
{
    char *end;
    unsigned long long n = strtoull(line, &end, 10);
    assert_int_equal(n, g->n);
    double rbar = strtod(end, &end), z = strtod(end, &end), p = strtod(end, &end);
    double ptm = strtod(end, &end);
    assert_close(g->r_bar, rbar, 1e-9, what);
    assert_close(g->z, z, 1e-9 * fmax(1.0, (double)n), what);
    /* p within 1e-9 of numpy's relative to p itself (both are tiny together) */
    if (!(fabs(g->p - p) <= 1e-9 * fmax(p, 1e-300) || (p < 1e-300 && g->p < 1e-290)))
        fail_msg("%s: p %.17g, numpy %.17g", what, g->p, p);
    assert_close(g->peak_to_mean, ptm, 1e-12, what);
    return strchr(end, '\n') ? strchr(end, '\n') + 1 : end;
}

static sync_gauge_t gauge_of(int64_t base, int64_t period, const int64_t *t, size_t n)
{
    sync_acc_t a;
    assert_int_equal(sync_acc_init(&a, base, period), 0);
    for (size_t i = 0; i < n; i++)
        sync_acc_add(&a, t[i]);
    sync_gauge_t g;
    sync_acc_gauge(&a, &g);
    return g;
}

static void test_invalid_period(void **state)
{
    (void)state;
    sync_acc_t a;
    sync_win_t w;
    assert_int_equal(sync_acc_init(&a, 0, 0), SQ_EINVAL);
    assert_int_equal(sync_acc_init(&a, 0, -5), SQ_EINVAL);
    assert_int_equal(sync_acc_init(&a, 0, INT64_MAX), SQ_EINVAL);
    assert_int_equal(sync_win_init(&w, 0, 0), SQ_EINVAL);
    assert_int_equal(sync_acc_init(&a, 0, 1), 0);
}

/* Worked by hand: phases 0, 0, π/2, π give Σcos = 1, Σsin = 1, R̄ = √2 / 4, Z = 4·(2/16) = 0.5;
 * the tenths 0, 2 and 5 hold 2, 1 and 1 sends: peak 2 over the mean 0.4 is 5. A window without
 * sends says nothing (R̄ 0, p 1); one send has R̄ 1 but p 1. */
static void test_hand_examples(void **state)
{
    (void)state;
    const int64_t period = 4000;
    int64_t t[] = {0, 4000 * 3, 1000, 2000 - 4000 * 7};
    sync_gauge_t g = gauge_of(0, period, t, 4);
    assert_int_equal(g.n, 4);
    assert_true(fabs(g.r_bar - sqrt(2.0) / 4) < 1e-15);
    assert_true(fabs(g.z - 0.5) < 1e-14);
    assert_true(fabs(g.peak_to_mean - 5.0) < 1e-15);

    sync_gauge_t none = gauge_of(0, period, t, 0);
    assert_int_equal(none.n, 0);
    assert_true(none.r_bar == 0 && none.p == 1 && none.peak_to_mean == 0);
    sync_gauge_t one = gauge_of(0, period, t + 2, 1);
    assert_true(fabs(one.r_bar - 1) < 1e-15 && one.p == 1 && one.peak_to_mean == 10);
    assert_true(sync_rayleigh_p(0, 1) == 1 && sync_rayleigh_p(1, 1) == 1);
}

/* Published examples. Zar's p: pingouin's circ_rayleigh documentation prints, for the angles
 * 0.785, 1.570, 3.141, 0.839, 5.934 rad, z = 1.236 and p = 0.304844 (pingouin implements Zar's
 * formula; the documented figure is what we check). R̄: Mardia & Jupp's pigeon homing directions
 * (55, 60, 65, 95, 100, 110, 260, 275, 285, 295 degrees; "Directional Statistics" p. 93, as
 * quoted by the R package tectonicr's rayleigh_test documentation) have R̄ = 0.2228717 and
 * Z = 0.4967179 there. Instants are the angles as fractions of a long period (rounding to 1 ns in
 * 10^12 ns moves a phase by 6e-12 rad). */
static void test_published_examples(void **state)
{
    (void)state;
    const int64_t period = 1000 * NS_PER_S;
    const double rad[] = {0.785, 1.570, 3.141, 0.839, 5.934};
    int64_t t[10];
    for (int i = 0; i < 5; i++)
        t[i] = llround(rad[i] / (2 * M_PI) * (double)period) + (i - 2) * period;
    sync_gauge_t g = gauge_of(5 * period, period, t, 5);
    printf("pingouin example: z %.6f (doc 1.236), p %.8f (doc 0.304844)\n", g.z, g.p);
    assert_true(fabs(g.z - 1.236) < 5e-4);
    assert_true(fabs(g.p - 0.304844) < 5e-7);

    const int deg[] = {55, 60, 65, 95, 100, 110, 260, 275, 285, 295};
    for (int i = 0; i < 10; i++)
        t[i] = (int64_t)deg[i] * (period / 360);
    g = gauge_of(0, period, t, 10);
    printf("pigeon homing: R-bar %.9f (published 0.2228717), Z %.9f (0.4967179), p %.6f\n", g.r_bar,
           g.z, g.p);
    assert_true(fabs(g.r_bar - 0.2228717) < 5e-8);
    assert_true(fabs(g.z - 0.4967179) < 5e-8);
}

/* A fleet spread evenly over the period (agent k at k·P/N) has R̄ = 0 (the N-th roots of unity
 * sum to 0), p near 1 and one send per agent slot in each tenth (peak-to-mean 1); the same
 * fleet all at one instant has R̄ = 1, p = 0 to double precision and peak-to-mean 10. Both
 * against numpy too. */
static void test_spread_and_aligned(void **state)
{
    (void)state;
    enum { N = 1000 };
    const int64_t period = 2 * NS_PER_S, base = 123456789;
    static int64_t spread[N], aligned[N];
    for (int k = 0; k < N; k++) {
        spread[k] = base + 7 * period + k * (period / N);
        aligned[k] = base + 3 * period + period / 3;
    }
    text_t in = {0};
    add_case(&in, "gauge", base, period, spread, N);
    add_case(&in, "gauge", base, period, aligned, N);
    char *ref = run_cases(&in);

    sync_gauge_t s = gauge_of(base, period, spread, N), a = gauge_of(base, period, aligned, N);
    printf("spread: R-bar %.3g p %.6f peak/mean %.3f; aligned: R-bar %.17g p %.3g peak/mean %.3f\n",
           s.r_bar, s.p, s.peak_to_mean, a.r_bar, a.p, a.peak_to_mean);
    assert_true(s.r_bar < 1e-12);
    assert_true(s.p > 0.999);
    assert_true(fabs(s.peak_to_mean - 1.0) < 1e-15);
    assert_true(fabs(a.r_bar - 1.0) < 1e-15);
    assert_true(a.p < 1e-300);
    assert_true(fabs(a.peak_to_mean - 10.0) < 1e-15);
    ref = check_ref(&s, ref, "spread");
    check_ref(&a, ref, "aligned");
}

/* Von Mises samples of known concentration drawn by numpy: the C gauge of numpy's instants equals
 * numpy's R̄ within 1e-9 and its p within 1e-9 (relative), and R̄ lies near the concentration's
 * A(κ) = I1(κ)/I0(κ) (scipy), within 5 standard errors of a mean resultant length (at most
 * sqrt(1/n) for n phases, a loose common-practice bound). */
static void test_von_mises_against_numpy(void **state)
{
    (void)state;
    const struct {
        int seed, n;
        double kappa;
    } cases[] = {{1, 40, 0.5}, {2, 400, 1.0}, {3, 1500, 2.0}, {4, 1500, 8.0}, {5, 900, 0.05}};
    const int64_t period = 10 * NS_PER_S + 7;
    for (size_t c = 0; c < sizeof cases / sizeof *cases; c++) {
        char in[128];
        snprintf(in, sizeof in, "vonmises %d %d %.17g %lld\n", cases[c].seed, cases[c].n,
                 cases[c].kappa, (long long)period);
        char *ref = pyref_run("sync_ref.py", in);
        sync_acc_t a;
        assert_int_equal(sync_acc_init(&a, 0, period), 0);
        char *p = ref;
        for (int i = 0; i < cases[c].n; i++) {
            char *end;
            long long t = strtoll(p, &end, 10);
            assert_true(end != p);
            sync_acc_add(&a, t);
            p = end;
        }
        sync_gauge_t g;
        sync_acc_gauge(&a, &g);
        char what[64];
        snprintf(what, sizeof what, "von Mises kappa %g n %d", cases[c].kappa, cases[c].n);
        p = check_ref(&g, strchr(p, '\n') + 1, what);
        double expect = strtod(p, NULL);
        printf("%s: R-bar %.6f (A(kappa) %.6f), Z %.3f, p %.3g, peak/mean %.3f\n", what, g.r_bar,
               expect, g.z, g.p, g.peak_to_mean);
        assert_true(fabs(g.r_bar - expect) < 5 / sqrt((double)cases[c].n));
    }
}

/* Random instants (negative and positive offsets, odd periods, bases far from 0) through the
 * windowing helper, closed by later instants and by flushes, against numpy's windows. Skipped
 * windows, out-of-order instants (SQ_ERANGE, not counted) and a forced flush of a partial window
 * are exercised too. */
static void test_windows_against_numpy(void **state)
{
    (void)state;
    rng_t r;
    rng_seed(&r, 20);
    const int64_t periods[] = {2 * NS_PER_S, 999983, 7 * NS_PER_S + 3};
    for (size_t c = 0; c < 3; c++) {
        int64_t period = periods[c], base = (int64_t)rng_below(&r, 1000000000000) - 500000000000;
        enum { N = 3000 };
        static int64_t t[N];
        /* Instants in time order over about 12 periods before and after base, with a gap of three
         * empty periods in the middle and bunches of equal instants. */
        int64_t now = base - 12 * period;
        for (int i = 0; i < N; i++) {
            if (i == N / 2)
                now += 3 * period;
            if (rng_unit(&r) < 0.9)
                now += (int64_t)rng_below(&r, (uint64_t)(period / 60) + 1);
            t[i] = now;
        }
        text_t in = {0};
        add_case(&in, "windows", base, period, t, N);
        char *ref = run_cases(&in);

        sync_win_t w;
        sync_window_t closed;
        assert_int_equal(sync_win_init(&w, base, period), 0);
        int n_closed = 0;
        int64_t last_index = INT64_MIN;
        for (int i = 0; i < N; i++) {
            int rc = sync_win_add(&w, t[i], &closed);
            assert_true(rc == 0 || rc == 1);
            /* An instant from before the open window is refused and not counted. */
            if (i > 0 && t[i] - t[0] > 2 * period)
                assert_int_equal(sync_win_add(&w, t[0], &(sync_window_t){0}), SQ_ERANGE);
            if (rc == 0)
                continue;
            char *end;
            long long index = strtoll(ref, &end, 10);
            assert_int_equal(index, closed.index);
            assert_true(closed.index > last_index);
            assert_false(closed.partial);
            assert_int_equal(closed.start_ns, base + closed.index * period);
            assert_int_equal(sync_window_of(base, period, closed.start_ns), closed.index);
            assert_int_equal(sync_window_of(base, period, closed.start_ns - 1), closed.index - 1);
            last_index = closed.index;
            ref = check_ref(&closed.gauge, end, "window");
            n_closed++;
        }
        /* The open window has not ended at its last instant; forcing closes it as partial. */
        int64_t end_of_open = base + (w.index + 1) * period;
        assert_int_equal(sync_win_flush(&w, end_of_open - 1, false, &closed), 0);
        assert_int_equal(sync_win_flush(&w, end_of_open - 1, true, &closed), 1);
        assert_true(closed.partial);
        char *end;
        assert_int_equal(strtoll(ref, &end, 10), closed.index);
        ref = check_ref(&closed.gauge, end, "last window");
        assert_int_equal(*ref, '\0');
        assert_int_equal(sync_win_flush(&w, INT64_MAX, true, &closed), 0);
        /* A closed window never reopens. */
        assert_int_equal(sync_win_add(&w, t[N - 1], &closed), SQ_ERANGE);
        printf("period %lld ns: %d windows closed by later sends, 1 flushed, gap skipped\n",
               (long long)period, n_closed);
        assert_true(n_closed >= 20);
    }
}

/* A window closed by the clock, not by a send: flushing at or past its end closes it whole. */
static void test_flush_at_end(void **state)
{
    (void)state;
    sync_win_t w;
    sync_window_t closed;
    assert_int_equal(sync_win_init(&w, 100, 1000), 0);
    assert_int_equal(sync_win_flush(&w, 5000, true, &closed), 0);
    assert_int_equal(sync_win_add(&w, 1150, &closed), 0);
    assert_int_equal(sync_win_add(&w, 1650, &closed), 0);
    assert_int_equal(sync_win_flush(&w, 2099, false, &closed), 0);
    assert_int_equal(sync_win_flush(&w, 2100, false, &closed), 1);
    assert_int_equal(closed.index, 1);
    assert_int_equal(closed.start_ns, 1100);
    assert_false(closed.partial);
    assert_int_equal(closed.gauge.n, 2);
    /* Phases 0.05 and 0.55 of the period are opposite: R̄ = 0. */
    assert_true(closed.gauge.r_bar < 1e-15);
    assert_int_equal(sync_win_add(&w, 2000, &closed), SQ_ERANGE);
    assert_int_equal(sync_win_add(&w, 2100, &closed), 0);
    assert_int_equal(sync_window_of(100, 1000, 99), -1);
    assert_int_equal(sync_window_of(100, 1000, -900), -1);
    assert_int_equal(sync_window_of(100, 1000, -901), -2);
}

/* Zar's p in the form the C code evaluates (see sync.c) equals the printed form where the
 * printed form is still exact (moderate n), and stays in [0, 1] for large n. */
static void test_rayleigh_p_large_n(void **state)
{
    (void)state;
    for (uint64_t n = 2; n <= 200; n += 9)
        for (double rb = 0; rb <= 1.0; rb += 0.0625) {
            double nn = (double)n, rn = nn * rb;
            double printed = exp(sqrt(1 + 4 * nn + 4 * (nn * nn - rn * rn)) - (1 + 2 * nn));
            assert_true(fabs(sync_rayleigh_p(n, rb) - printed) <= 1e-12 * fmax(printed, 1e-300));
        }
    double p = sync_rayleigh_p(UINT64_C(10000000000), 1e-5);
    /* Z = n R̄² = 1: p ≈ e^-1 for large n. */
    assert_true(fabs(p - exp(-1.0)) < 1e-6);
    assert_true(sync_rayleigh_p(100, 0) == 1.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_invalid_period),
        cmocka_unit_test(test_hand_examples),
        cmocka_unit_test(test_published_examples),
        cmocka_unit_test(test_spread_and_aligned),
        cmocka_unit_test(test_von_mises_against_numpy),
        cmocka_unit_test(test_windows_against_numpy),
        cmocka_unit_test(test_flush_at_end),
        cmocka_unit_test(test_rayleigh_p_large_n),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
