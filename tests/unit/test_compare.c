/* Unit tests for run comparison (src/report/compare*.c): the Mann-Whitney U test and Fisher's
 * exact test against scipy (Debian python3-scipy 1.10, through tests/unit/compare_ref.py), the
 * quantile test against its description restated in Python, and the verdicts over per-second,
 * per-tick and watch samples. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "pyref.h"

#include "squall/err.h"
#include "squall/report.h"
#include "squall/rng.h"

static void near(double got, double want, double rel)
{
    if (!(fabs(got - want) <= rel * fabs(want) + 1e-300)) {
        fprintf(stderr, "got %.17g, want %.17g\n", got, want);
        fail();
    }
}

/* Runs compare_ref.py on `input` (one case a line) and returns its output lines. */
static char *reference(const char *input)
{
    return pyref_run("compare_ref.py", input);
}

/* A growing text for reference() input. */
typedef struct {
    char *s;
    size_t n, cap;
} text_t;

static void add(text_t *t, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int need = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (t->n + (size_t)need + 1 > t->cap) {
        t->cap = 2 * (t->n + (size_t)need + 1);
        t->s = realloc(t->s, t->cap);
        assert_non_null(t->s);
    }
    va_start(ap, fmt);
    vsnprintf(t->s + t->n, t->cap - t->n, fmt, ap);
    va_end(ap);
    t->n += (size_t)need;
}

static void add_values(text_t *t, const double *v, size_t n)
{
    for (size_t i = 0; i < n; i++)
        add(t, " %.17g", v[i]);
}

/* ---- Mann-Whitney U ------------------------------------------------------------------------ */

typedef struct {
    double x[300], y[300];
    size_t nx, ny;
} sample_t;

/* Cases: shifted normals (normal approximation), heavy ties (integers 0..3), a small side of 3
 * against 40 and of 5 against 5 (exact), a large shift of 8 against 9 (exact, tiny p), ties in
 * small samples (normal approximation: the exact one assumes no ties), 6 against 300. */
#define N_MW 8
static void make_cases(sample_t *c)
{
    static const size_t sizes[N_MW][2] = {{12, 15}, {20, 25}, {3, 40}, {30, 30},
                                          {8, 9},   {5, 5},   {4, 6},  {6, 300}};
    rng_t g;
    rng_seed(&g, 11);
    for (size_t k = 0; k < N_MW; k++) {
        bool ints = k == 1 || k == 6;
        c[k].nx = sizes[k][0];
        c[k].ny = sizes[k][1];
        for (size_t i = 0; i < c[k].nx; i++)
            c[k].x[i] = ints ? (double)rng_below(&g, 4) : rng_normal(&g) + (k == 4 ? 3 : 0.5);
        for (size_t i = 0; i < c[k].ny; i++)
            c[k].y[i] = ints ? (double)rng_below(&g, 3) : rng_normal(&g);
    }
}

static void test_mann_whitney_against_scipy(void **state)
{
    (void)state;
    static sample_t c[N_MW];
    make_cases(c);
    text_t in = {0};
    for (size_t k = 0; k < N_MW; k++) {
        add(&in, "mw");
        add_values(&in, c[k].x, c[k].nx);
        add(&in, " |");
        add_values(&in, c[k].y, c[k].ny);
        add(&in, "\n");
    }
    char *out = reference(in.s);
    bool exact_seen = false, normal_seen = false;
    for (size_t k = 0; k < N_MW; k++) {
        double su, sp;
        int sexact, used;
        assert_int_equal(sscanf(out, "%lf %lf %d%n", &su, &sp, &sexact, &used), 3);
        out = strchr(out + used, '\n') + 1;
        report_mw_t r;
        assert_int_equal(report_mann_whitney(c[k].x, c[k].nx, c[k].y, c[k].ny, &r), 0);
        near(r.u, su, 1e-12);
        near(r.p, sp, 1e-9);
        assert_int_equal(r.exact, sexact);
        exact_seen |= r.exact;
        normal_seen |= !r.exact;
        assert_true(k != 4 || (r.p < 1e-3 && r.u > 36)); /* x shifted up by 3 sigma */
    }
    assert_true(exact_seen && normal_seen);
    free(in.s);
}

static void test_mann_whitney_degenerate(void **state)
{
    (void)state;
    double a[] = {1, 1, 1}, b[] = {1, 1};
    report_mw_t r;
    /* Every value tied: no evidence (scipy returns NaN here; we say p = 1). */
    assert_int_equal(report_mann_whitney(a, 3, b, 2, &r), 0);
    assert_true(r.p == 1 && r.u == 3);
    assert_int_equal(report_mann_whitney(a, 3, b, 0, &r), 0);
    assert_true(r.p == 1);
}

/* The best p for n vs m: complete separation (every x above every y) through scipy. */
static void test_mann_whitney_best(void **state)
{
    (void)state;
    static const size_t sizes[][2] = {{4, 4}, {5, 5}, {6, 6}, {1, 40}, {2, 40}, {9, 9}, {20, 20}};
    size_t n = sizeof sizes / sizeof sizes[0];
    text_t in = {0};
    for (size_t k = 0; k < n; k++) {
        add(&in, "mw");
        for (size_t i = 0; i < sizes[k][0]; i++)
            add(&in, " %zu", 1000 + i);
        add(&in, " |");
        for (size_t i = 0; i < sizes[k][1]; i++)
            add(&in, " %zu", i);
        add(&in, "\n");
    }
    char *out = reference(in.s);
    for (size_t k = 0; k < n; k++) {
        double su, sp;
        int ex, used;
        assert_int_equal(sscanf(out, "%lf %lf %d%n", &su, &sp, &ex, &used), 3);
        out = strchr(out + used, '\n') + 1;
        near(report_mann_whitney_best(sizes[k][0], sizes[k][1]), sp, 1e-9);
    }
    /* Exact, derived: one arrangement of C(8, 4) = 70 or C(10, 5) = 252 at each end. */
    near(report_mann_whitney_best(4, 4), 2.0 / 70, 1e-12);
    near(report_mann_whitney_best(5, 5), 2.0 / 252, 1e-12);
    free(in.s);
}

/* ---- Fisher's exact test and the quantile test -------------------------------------------- */

static void test_fisher_against_scipy(void **state)
{
    (void)state;
    static const int64_t t[][4] = {{6, 2, 1, 4},          {8, 2, 1, 5},       {0, 5, 5, 0},
                                   {3, 0, 0, 3},          {10, 10, 10, 10},   {1, 30, 9, 22},
                                   {120, 9880, 80, 9920}, {0, 2000, 8, 1992}, {2, 7, 3, 0}};
    size_t n = sizeof t / sizeof t[0];
    text_t in = {0};
    for (size_t k = 0; k < n; k++)
        add(&in, "fisher %lld %lld %lld %lld\n", (long long)t[k][0], (long long)t[k][1],
            (long long)t[k][2], (long long)t[k][3]);
    char *out = reference(in.s);
    for (size_t k = 0; k < n; k++) {
        double want = strtod(out, &out);
        near(report_fisher_exact(t[k][0], t[k][1], t[k][2], t[k][3]), want, 1e-9);
    }
    /* scipy's documentation works [[6, 2], [1, 4]] by hand: 0.0163 + 0.0816 + 0.00466. */
    near(report_fisher_exact(6, 2, 1, 4), 0.10256410256410257, 1e-12);
    assert_true(report_fisher_exact(0, 0, 3, 4) == 1); /* an empty row: no evidence */
    free(in.s);
}

/* Integer values below 2,048 are exact in a 3-digit histogram from 1 (its first 2,048 buckets
 * are one unit wide), so the Python side sees the same values as the C side. */
static void quantile_case(text_t *in, hist_t **hb, hist_t **hn, rng_t *g, size_t nb, size_t nn,
                          double shift, double q, double db, double dn)
{
    assert_int_equal(hist_new(1, 1000000, 3, hb), 0);
    assert_int_equal(hist_new(1, 1000000, 3, hn), 0);
    add(in, "quantile %.17g %.17g %.17g", q, db, dn);
    for (size_t i = 0; i < nb + nn; i++) {
        bool b = i < nb;
        double v = floor(400 + 60 * rng_normal(g) + (b ? 0 : shift));
        v = v < 1 ? 1 : v > 2000 ? 2000 : v;
        hist_record(b ? *hb : *hn, (int64_t)v);
        add(in, "%s %.0f", i == nb ? " |" : "", v);
    }
    add(in, "\n");
}

static void test_quantile_against_reference(void **state)
{
    (void)state;
    /* (sizes, shift of y, percentile, divisors): a shift at the median; none at p99; a tail
     * at p99.9 of 3,000 each; rows divided by 4 and 2 (values sharing a cause). */
    static const struct {
        size_t nb, nn;
        double shift, q, db, dn;
    } cases[] = {{200, 300, 30, 50, 1, 1},
                 {2000, 1500, 0, 99, 1, 1},
                 {3000, 3000, 25, 99.9, 1, 1},
                 {800, 400, 15, 50, 4, 2}};
    enum { N = sizeof cases / sizeof cases[0] };
    hist_t *hb[N], *hn[N];
    rng_t g;
    rng_seed(&g, 5);
    text_t in = {0};
    for (size_t k = 0; k < N; k++)
        quantile_case(&in, &hb[k], &hn[k], &g, cases[k].nb, cases[k].nn, cases[k].shift, cases[k].q,
                      cases[k].db, cases[k].dn);
    char *out = reference(in.s);
    for (size_t k = 0; k < N; k++) {
        long long t, ax, bx, ay, by;
        double p;
        int used;
        assert_int_equal(
            sscanf(out, "%lld %lld %lld %lld %lld %lf%n", &t, &ax, &bx, &ay, &by, &p, &used), 6);
        out = strchr(out + used, '\n') + 1;
        report_qt_t r;
        assert_int_equal(
            report_quantile_test(hb[k], hn[k], cases[k].q, cases[k].db, cases[k].dn, &r), 0);
        assert_int_equal(r.threshold, t);
        assert_true(r.above_base == ax && r.below_base == bx && r.above_new == ay &&
                    r.below_new == by);
        near(r.p, p, 1e-9);
        hist_free(hb[k]);
        hist_free(hn[k]);
    }
    free(in.s);
}

static void test_quantile_best(void **state)
{
    (void)state;
    /* At the median of 5 + 5 (4 + 4) values, 5 (4) lie above; all of one sample: Fisher's p is
     * 2 / C(10, 5) = 2 / 252 (2 / C(8, 4) = 2 / 70), derived by hand. */
    near(report_quantile_best(5, 5, 50), 2.0 / 252, 1e-9);
    near(report_quantile_best(4, 4, 50), 2.0 / 70, 1e-9);
    /* 6 + 6 values have none above their pooled p99 (rank int(11.88 + 0.5) = 12): no test. */
    assert_true(report_quantile_best(6, 6, 99) == 1);
}

/* ---- verdicts ------------------------------------------------------------------------------ */

#define OLD_HEADER                                                                                 \
    "second,phase,class,started,completed,rate_per_s,errors,p50_ms,p90_ms,p99_ms,max_ms"

/* A run: results with one 2xx cell of (steady, read) holding every sample, and a series.csv
 * with one row per second whose p50/p99/max are the given values + noise; with_p999 writes the
 * p999_ms column (as p50 x 2.5), else the file is as an older squall wrote it. */
static void make_run(const char *dir, double base_ms, double shift_ms, int secs, uint64_t seed,
                     bool with_p999, results_t **res, report_series_t **s)
{
    char path[256];
    snprintf(path, sizeof path, "%s/series.csv", dir);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs(with_p999 ? OLD_HEADER ",planned,unix_ms,p999_ms\n" : OLD_HEADER "\n", f);
    assert_int_equal(results_new(res), 0);
    results_cell_t *c = results_cell(*res, "steady", "read", "2xx");
    rng_t g;
    rng_seed(&g, seed);
    for (int i = 0; i < secs; i++) {
        double p50 = base_ms + shift_ms + 0.05 * base_ms * rng_normal(&g);
        fprintf(f, "%d,steady,read,100,100,100.0,0,%.3f,%.3f,%.3f,%.3f", i, p50, p50 * 1.5, p50 * 2,
                p50 * 3);
        if (with_p999)
            fprintf(f, ",100,%d,%.3f", 1700000000 + i, p50 * 2.5);
        fputc('\n', f);
        results_cell_counters(c)->count += 100;
        hist_record_n(results_cell_hist(c, RESULTS_M_RESPONSE), (int64_t)(p50 * 1e6), 100);
    }
    fclose(f);
    out_t *o = out_new_capture();
    assert_int_equal(report_series_read(path, s, o), 0);
    out_free(o);
    unlink(path);
}

static const report_cmp_line_t *line_of(const report_cmp_t *c, const char *cls, const char *latency,
                                        const char *metric)
{
    for (size_t i = 0; i < report_cmp_count(c); i++) {
        const report_cmp_line_t *l = report_cmp_at(c, i);
        if (!strcmp(l->cls, cls) && !strcmp(l->metric, metric) &&
            (latency ? l->latency && !strcmp(l->latency, latency) : !l->latency))
            return l;
    }
    return NULL;
}

static const report_cmp_line_t *line(const report_cmp_t *c, const char *metric)
{
    return line_of(c, "read", strcmp(metric, "error_rate") ? "response" : NULL, metric);
}

typedef struct {
    char dir[32];
    results_t *r[8];
    report_series_t *s[8];
    size_t n;
} runs_t;

static size_t run_add(runs_t *rs, double shift, int secs, uint64_t seed, bool p999)
{
    if (!rs->dir[0]) {
        strcpy(rs->dir, "/tmp/squall-cmp-XXXXXX");
        assert_non_null(mkdtemp(rs->dir));
    }
    make_run(rs->dir, 2.0, shift, secs, seed, p999, &rs->r[rs->n], &rs->s[rs->n]);
    return rs->n++;
}

static void runs_free(runs_t *rs)
{
    for (size_t i = 0; i < rs->n; i++) {
        results_free(rs->r[i]);
        report_series_free(rs->s[i]);
    }
    rmdir(rs->dir);
}

static report_cmp_t *compare(runs_t *rs, size_t b, size_t n)
{
    report_cmp_opts_t o;
    report_cmp_opts_default(&o);
    report_cmp_t *c;
    assert_int_equal(report_compare(rs->r[b], rs->s[b], rs->r[n], rs->s[n], &o, &c), 0);
    return c;
}

static void test_verdicts(void **state)
{
    (void)state;
    runs_t rs = {0};
    size_t b = run_add(&rs, 0, 10, 1, false), same = run_add(&rs, 0, 10, 2, false);
    size_t slow = run_add(&rs, 5.0, 10, 3, false);  /* +5 ms, like the injected delay */
    size_t fast = run_add(&rs, -1.5, 10, 4, false); /* -1.5 ms: beyond 1 ms and 10 % */
    size_t shortr = run_add(&rs, 5.0, 2, 5, false); /* 2 s against 10 cannot reach 1 % */
    report_cmp_t *c = compare(&rs, b, same);
    assert_int_equal(report_cmp_count(c), 4); /* p50, p99, p99.9, error_rate */
    assert_false(report_cmp_worse(c));
    for (size_t i = 0; i < 4; i++)
        assert_int_equal(report_cmp_at(c, i)->verdict, REPORT_WITHIN_NOISE);
    report_cmp_free(c);

    c = compare(&rs, b, slow);
    assert_true(report_cmp_worse(c));
    /* Complete separation, 10 against 10 (normal approximation: both sides over 8): U = 100,
     * two-sided p = erfc(((100 - 50) - 0.5) / sqrt(10 * 10 * 21 / 12) / sqrt(2)). */
    const report_cmp_line_t *l = line(c, "p50");
    assert_int_equal(l->verdict, REPORT_WORSE);
    assert_string_equal(report_verdict_word(l), "slower");
    assert_true(l->stat == 100 && l->n_base == 10 && l->n_new == 10);
    assert_int_equal(l->test, REPORT_TEST_MW_NORMAL);
    near(l->p, erfc(49.5 / sqrt(175.0) / sqrt(2)), 1e-12);
    assert_int_equal(line(c, "p99")->verdict, REPORT_WORSE);
    assert_string_equal(line(c, "p99.9")->tested_on, "max_ms"); /* an older series.csv */
    assert_int_equal(line(c, "error_rate")->verdict, REPORT_WITHIN_NOISE);
    json_t *j = report_cmp_json(c, &(report_cmp_opts_t){.false_alarm = 0.01});
    assert_true(json_is_true(json_object_get(j, "worse")));
    assert_int_equal(json_integer_value(json_object_get(j, "version")), 2);
    json_decref(j);
    report_cmp_free(c);

    c = compare(&rs, b, fast);
    assert_false(report_cmp_worse(c));
    assert_int_equal(line(c, "p50")->verdict, REPORT_BETTER);
    assert_string_equal(report_verdict_word(line(c, "p50")), "faster");
    report_cmp_free(c);

    /* +1.2 ms at p50 (so +2.4 ms at p99, +3.6 ms at the per-second max): past the p50 floor
     * (1 ms), short of the tail floor (3 ms) at p99, past it at p99.9. */
    size_t mid = run_add(&rs, 1.2, 10, 6, false);
    c = compare(&rs, b, mid);
    assert_int_equal(line(c, "p50")->verdict, REPORT_WORSE);
    assert_int_equal(line(c, "p99")->verdict, REPORT_WITHIN_NOISE);
    assert_int_equal(line(c, "p99.9")->verdict, REPORT_WORSE);
    report_cmp_free(c);

    /* 2 seconds against 10: the exact test's best p is 2 / C(12, 2) = 0.030 (derived), above
     * 1 %; 3 against 10 would give 2 / C(13, 3) = 0.0070. */
    c = compare(&rs, b, shortr);
    l = line(c, "p50");
    assert_int_equal(l->verdict, REPORT_UNTESTED);
    assert_true(l->n_base == 10 && l->n_new == 2 && l->need_base == 10 && l->need_new == 3);
    report_cmp_free(c);
    runs_free(&rs);
}

/* series.csv with p999_ms: p99.9 is tested on it, and no warning says otherwise; a series
 * without it on either side falls back to the per-second max, and a warning says so. */
static void test_p999_column(void **state)
{
    (void)state;
    runs_t rs = {0};
    size_t b = run_add(&rs, 0, 10, 1, true), slow = run_add(&rs, 5.0, 10, 3, true);
    size_t old = run_add(&rs, 5.0, 10, 3, false);
    report_cmp_t *c = compare(&rs, b, slow);
    const report_cmp_line_t *l = line(c, "p99.9");
    assert_string_equal(l->tested_on, "p999_ms");
    assert_int_equal(l->verdict, REPORT_WORSE);
    /* The medians of the p999_ms column: 2.5 x the per-second p50. */
    assert_true(l->new_med - l->base_med > 2.5 * 4 && l->new_med - l->base_med < 2.5 * 6);
    out_t *o = out_new_capture();
    assert_int_equal(report_cmp_warn(c, rs.r[b], rs.r[slow], o), 0);
    assert_string_equal(out_captured_diag(o), "");
    out_free(o);
    report_cmp_free(c);

    c = compare(&rs, b, old);
    assert_string_equal(line(c, "p99.9")->tested_on, "max_ms");
    o = out_new_capture();
    assert_int_equal(report_cmp_warn(c, rs.r[b], rs.r[old], o), 1);
    assert_string_equal(out_captured_diag(o),
                        "squall: warning: NEW's series.csv has no p999_ms column (an older squall "
                        "wrote it): p99.9 per second is tested on the per-second max instead\n");
    out_free(o);
    report_cmp_free(c);
    runs_free(&rs);
}

/* ---- storms: per tick ---------------------------------------------------------------------- */

/* A fleet run: phase "storm", class "renew", `ticks` ticks in the storms section with p50
 * around p50_ms (5 % noise), p99 and max at 1.5 and 2 x; one series.csv second in 5 (a tick
 * every 5 s), so per second there would be too few samples. */
static void storm_run(int ticks, double p50_ms, uint64_t seed, results_t **r, report_series_t **s)
{
    assert_int_equal(results_new(r), 0);
    results_cell_t *c = results_cell(*r, "storm", "renew", "2xx");
    json_t *tl = json_array();
    rng_t g;
    rng_seed(&g, seed);
    for (int k = 0; k < ticks; k++) {
        double v = p50_ms * (1 + 0.05 * rng_normal(&g)) * 1e6;
        json_array_append_new(tl, json_pack("{s:i, s:I, s:I, s:I}", "requests", 200, "p50_ns",
                                            (json_int_t)v, "p99_ns", (json_int_t)(1.5 * v),
                                            "max_ns", (json_int_t)(2 * v)));
        results_cell_counters(c)->count += 200;
        hist_record_n(results_cell_hist(c, RESULTS_M_RESPONSE), (int64_t)v, 200);
    }
    json_t *sec =
        json_pack("{s:{s:[{s:s, s:o}]}}", "storm", "actions", "class", "renew", "ticks", tl);
    assert_int_equal(results_set_section(*r, "storms", sec), 0);
    char dir[] = "/tmp/squall-cmp-storm-XXXXXX", path[64];
    assert_non_null(mkdtemp(dir));
    snprintf(path, sizeof path, "%s/series.csv", dir);
    FILE *f = fopen(path, "w");
    fputs(OLD_HEADER ",planned,unix_ms,p999_ms\n", f);
    for (int k = 0; k < ticks / 5; k++)
        fprintf(f, "%d,storm,renew,1000,1000,1000.0,0,%.3f,%.3f,%.3f,%.3f,1000,0,%.3f\n", 5 * k,
                p50_ms, p50_ms, p50_ms, p50_ms, p50_ms);
    fclose(f);
    out_t *o = out_new_capture();
    assert_int_equal(report_series_read(path, s, o), 0);
    out_free(o);
    unlink(path);
    rmdir(dir);
}

static void test_storm_per_tick(void **state)
{
    (void)state;
    results_t *r[4];
    report_series_t *s[4];
    storm_run(20, 4.0, 1, &r[0], &s[0]);
    storm_run(20, 4.0 * 1.82, 2, &r[1], &s[1]); /* +82 % at p50 */
    storm_run(20, 4.0, 3, &r[2], &s[2]);
    storm_run(4, 4.0 * 1.82, 4, &r[3], &s[3]);
    report_cmp_opts_t o;
    report_cmp_opts_default(&o);
    report_cmp_t *c;
    assert_int_equal(report_compare(r[0], s[0], r[1], s[1], &o, &c), 0);
    const report_cmp_line_t *l = line_of(c, "renew", "response", "p50");
    assert_int_equal(l->unit, REPORT_UNIT_TICKS);
    assert_string_equal(l->tested_on, "ticks.p50_ns");
    assert_true(l->n_base == 20 && l->n_new == 20 && l->verdict == REPORT_WORSE);
    /* Complete separation of 20 and 20 (normal approximation, Mann & Whitney 1947): U = 400. */
    near(l->p, erfc((200 - 0.5) / sqrt(20.0 * 20 * 41 / 12) / sqrt(2)), 1e-12);
    assert_int_equal(line_of(c, "renew", "response", "p99.9")->verdict, REPORT_WORSE);
    /* The error rate stays per second: 4 seconds each, too few. */
    l = line_of(c, "renew", NULL, "error_rate");
    assert_true(l->unit == REPORT_UNIT_SECONDS && l->verdict == REPORT_UNTESTED);
    report_cmp_free(c);

    assert_int_equal(report_compare(r[0], s[0], r[2], s[2], &o, &c), 0);
    assert_int_equal(line_of(c, "renew", "response", "p50")->verdict, REPORT_WITHIN_NOISE);
    report_cmp_free(c);

    /* 4 ticks against 20: the exact test's best p is 2 / C(24, 4) = 1.9e-4, testable; 4 ticks
     * against 4 would not be (2 / 70). */
    assert_int_equal(report_compare(r[3], s[3], r[3], s[3], &o, &c), 0);
    l = line_of(c, "renew", "response", "p50");
    assert_true(l->verdict == REPORT_UNTESTED && l->need_base == 5 && l->need_new == 5);
    report_cmp_free(c);
    assert_int_equal(report_compare(r[0], s[0], r[3], s[3], &o, &c), 0);
    l = line_of(c, "renew", "response", "p50");
    assert_true(l->test == REPORT_TEST_MW_EXACT && l->verdict == REPORT_WORSE);
    near(l->p, 2.0 / (24.0 * 23 * 22 * 21 / 24), 1e-9);
    report_cmp_free(c);
    for (int k = 0; k < 4; k++) {
        results_free(r[k]);
        report_series_free(s[k]);
    }
}

/* ---- watches ------------------------------------------------------------------------------- */

/* A watch run: class "follow" in phase "storm" of 20 s with `streams` streams, one open each
 * (all at open_ms), and `writes` writes each seen by every stream, propagation around prop_ms. */
static void watch_run(int streams, int writes, double open_ms, double prop_ms, uint64_t seed,
                      results_t **r, report_series_t **s)
{
    assert_int_equal(results_new(r), 0);
    results_cell_t *c = results_cell(*r, "storm", "follow", "2xx");
    rng_t g;
    rng_seed(&g, seed);
    for (int w = 0; w < writes; w++) {
        double v = prop_ms * (1 + 0.1 * rng_normal(&g)) * 1e6;
        for (int k = 0; k < streams; k++)
            hist_record(results_cell_hist(c, RESULTS_M_PROPAGATION), (int64_t)v + 1000 * k);
    }
    for (int k = 0; k < streams; k++)
        hist_record(results_cell_hist(c, RESULTS_M_OPEN), (int64_t)(open_ms * 1e6) + 1000 * k);
    results_cell_counters(c)->count = streams * writes;
    json_t *sec = json_pack("{s:{s:{s:{s:i}}}}", "storm", "classes", "follow", "streams", streams);
    assert_int_equal(results_set_section(*r, "watches", sec), 0);
    sec = json_pack("{s:[{s:s, s:f, s:f}]}", "phases", "name", "storm", "start_s", 0.0, "elapsed_s",
                    20.0);
    assert_int_equal(results_set_section(*r, "phases", sec), 0);
    assert_int_equal(report_series_new(s), 0);
}

static void test_watch_lines(void **state)
{
    (void)state;
    results_t *r[3];
    report_series_t *s[3];
    watch_run(4, 1000, 450, 1.0, 1, &r[0], &s[0]);
    watch_run(4, 1000, 455, 6.0, 2, &r[1], &s[1]); /* +5 ms on every write */
    watch_run(4, 1000, 450, 1.0, 3, &r[2], &s[2]);
    report_cmp_opts_t o;
    report_cmp_opts_default(&o);
    report_cmp_t *c;
    assert_int_equal(report_compare(r[0], s[0], r[1], s[1], &o, &c), 0);
    /* Open p50, p99; propagation p50, p99, p99.9: no response-time line (no 0.00 ms rows). */
    assert_int_equal(report_cmp_count(c), 5);
    for (size_t i = 0; i < report_cmp_count(c); i++)
        assert_true(strcmp(report_cmp_at(c, i)->latency, "response") != 0);
    /* 4,000 values, 4 streams, 20 s: at most one sample per second, so 20 a side; all of NEW's
     * above the pooled median: Fisher's p = 2 / C(40, 20) (derived). */
    const report_cmp_line_t *l = line_of(c, "follow", "propagation", "p50");
    assert_true(l->unit == REPORT_UNIT_WATCH && l->test == REPORT_TEST_QUANTILE);
    assert_true(l->recorded_base == 4000 && l->streams_base == 4 && l->seconds_base == 20);
    assert_true(l->n_base == 20 && l->n_new == 20 && l->stat == 20);
    near(l->p, 2 / exp(lgamma(41) - 2 * lgamma(21)), 1e-9);
    assert_int_equal(l->verdict, REPORT_WORSE);
    assert_true(l->new_value - l->base > 4.5 && l->new_value - l->base < 5.5);
    /* p99 of 20 + 20 samples: nothing above the pooled p99 (rank int(39.6 + 0.5) = 40). */
    l = line_of(c, "follow", "propagation", "p99");
    assert_true(l->verdict == REPORT_UNTESTED && l->need_base == l->need_new && l->need_base > 20);
    /* Four streams opening together count as one sample: 1 against 1, and the exact quantile
     * test at the median needs 5 against 5 (2 / C(10, 5) = 0.0079 < 1 %). */
    l = line_of(c, "follow", "open", "p50");
    assert_true(l->verdict == REPORT_UNTESTED && l->n_base == 1 && l->n_new == 1);
    assert_true(l->need_base == 5 && l->need_new == 5);
    report_cmp_free(c);

    assert_int_equal(report_compare(r[0], s[0], r[2], s[2], &o, &c), 0);
    assert_false(report_cmp_worse(c));
    assert_int_equal(line_of(c, "follow", "propagation", "p50")->verdict, REPORT_WITHIN_NOISE);
    report_cmp_free(c);
    for (int k = 0; k < 3; k++) {
        results_free(r[k]);
        report_series_free(s[k]);
    }
}

/* ---- what else differs between the runs ---------------------------------------------------- */

static results_t *described(const char *plan_text, const char *target, const char *overrides)
{
    results_t *r;
    out_t *o = out_new_capture();
    assert_int_equal(results_new(&r), 0);
    assert_int_equal(results_set_plan(r, "plan.yaml", plan_text, strlen(plan_text), o), 0);
    assert_int_equal(results_set_target(r, target), 0);
    if (overrides) {
        json_error_t e;
        json_t *ov = json_loads(overrides, 0, &e);
        assert_non_null(ov);
        assert_int_equal(
            results_set_section(r, "run", json_pack("{s:I, s:o}", "seed", 7, "overrides", ov)), 0);
    }
    results_cell(r, "steady", "read", "2xx");
    out_free(o);
    return r;
}

static void test_warnings(void **state)
{
    (void)state;
    results_t *a = described("seed: 1\n", "http://127.0.0.1:7070", "[\"a=1\", \"b=2\"]");
    results_t *same = described("seed: 1\n", "http://127.0.0.1:7070", "[\"b=2\", \"a=1\"]");
    results_t *other = described("seed: 2\n", "http://127.0.0.1:7071", "[\"a=3\"]");
    results_t *unknown = described("seed: 1\n", "http://127.0.0.1:7070", NULL);
    report_series_t *s;
    assert_int_equal(report_series_new(&s), 0);
    report_cmp_opts_t opts;
    report_cmp_opts_default(&opts);
    report_cmp_t *c;
    assert_int_equal(report_compare(a, s, other, s, &opts, &c), 0);
    out_t *o = out_new_capture();
    assert_int_equal(report_cmp_warn(c, a, same, o), 0); /* the same overrides in another order */
    assert_int_equal(report_cmp_warn(c, a, unknown, o), 0); /* an older NEW: overrides unknown */
    assert_string_equal(out_captured_diag(o), "");
    assert_int_equal(report_cmp_warn(c, a, other, o), 3);
    /* The plans' SHA-256 (sha256sum of "seed: 1\n" and "seed: 2\n"), first 12 digits. */
    char want[1024];
    snprintf(want, sizeof want,
             "squall: warning: BASE and NEW ran different plans (sha256 %.12s... in BASE, "
             "%.12s... in NEW): a difference may come from the plan, not the target\n"
             "squall: warning: BASE and NEW ran against different targets "
             "(http://127.0.0.1:7070 in BASE, http://127.0.0.1:7071 in NEW)\n"
             "squall: warning: BASE and NEW ran with different overrides (BASE: a=1 b=2; NEW: "
             "a=3)\n",
             results_meta(a)->plan_sha256, results_meta(other)->plan_sha256);
    assert_string_equal(out_captured_diag(o), want);
    FILE *p = popen("printf 'seed: 1\\n' | sha256sum; printf 'seed: 2\\n' | sha256sum", "r");
    char s1[80], s2[80];
    assert_true(p && fscanf(p, "%79s -\n%79s", s1, s2) == 2);
    pclose(p);
    assert_string_equal(results_meta(a)->plan_sha256, s1);
    assert_string_equal(results_meta(other)->plan_sha256, s2);
    out_free(o);
    report_cmp_free(c);
    report_series_free(s);
    results_t *all[] = {a, same, other, unknown};
    for (int k = 0; k < 4; k++)
        results_free(all[k]);
}

int main(void)
{
    if (access("/usr/bin/python3", X_OK) != 0 ||
        system("/usr/bin/python3 -c 'import scipy.stats' >/dev/null 2>&1") != 0) {
        fprintf(stderr, "test-compare needs /usr/bin/python3 with scipy (tools/setup)\n");
        return 1;
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_mann_whitney_against_scipy),
        cmocka_unit_test(test_mann_whitney_degenerate),
        cmocka_unit_test(test_mann_whitney_best),
        cmocka_unit_test(test_fisher_against_scipy),
        cmocka_unit_test(test_quantile_against_reference),
        cmocka_unit_test(test_quantile_best),
        cmocka_unit_test(test_verdicts),
        cmocka_unit_test(test_p999_column),
        cmocka_unit_test(test_storm_per_tick),
        cmocka_unit_test(test_watch_lines),
        cmocka_unit_test(test_warnings),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
