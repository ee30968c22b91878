/* Unit tests for run comparison (src/report/compare*.c): the Mann-Whitney U test against
 * scipy.stats.mannwhitneyu (Debian python3-scipy, method="asymptotic", use_continuity=True,
 * alternative="two-sided"), and the verdicts over per-second samples read from series.csv. */
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

#include "squall/err.h"
#include "squall/report.h"
#include "squall/rng.h"

typedef struct {
    double x[64], y[64];
    size_t nx, ny;
} sample_t;

/* Cases: shifted normals, heavy ties (integers 0..3), unequal sizes, a large shift. */
static void make_cases(sample_t *c, size_t n)
{
    rng_t g;
    rng_seed(&g, 11);
    for (size_t k = 0; k < n; k++) {
        static const size_t sizes[][2] = {{12, 15}, {20, 25}, {3, 40}, {30, 30}, {8, 9}};
        c[k].nx = sizes[k][0];
        c[k].ny = sizes[k][1];
        for (size_t i = 0; i < c[k].nx; i++)
            c[k].x[i] = k == 1 ? (double)rng_below(&g, 4) : rng_normal(&g) + (k == 4 ? 3 : 0.5);
        for (size_t i = 0; i < c[k].ny; i++)
            c[k].y[i] = k == 1 ? (double)rng_below(&g, 3) : rng_normal(&g);
    }
}

static void test_mann_whitney_against_scipy(void **state)
{
    (void)state;
    enum { N = 5 };
    sample_t c[N];
    make_cases(c, N);
    char path[] = "/tmp/squall-mwu-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    for (size_t k = 0; k < N; k++) {
        for (size_t i = 0; i < c[k].nx; i++)
            fprintf(f, "%s%.17g", i ? " " : "", c[k].x[i]);
        fputc('\n', f);
        for (size_t i = 0; i < c[k].ny; i++)
            fprintf(f, "%s%.17g", i ? " " : "", c[k].y[i]);
        fputc('\n', f);
    }
    fclose(f);
    char cmd[1024];
    snprintf(cmd, sizeof cmd,
             "/usr/bin/python3 -c 'import sys\nfrom scipy.stats import mannwhitneyu\n"
             "L = [list(map(float, l.split())) for l in open(\"%s\")]\n"
             "for i in range(0, len(L), 2):\n"
             "    r = mannwhitneyu(L[i], L[i + 1], use_continuity=True, alternative=\"two-sided\", "
             "method=\"asymptotic\")\n"
             "    print(repr(float(r.statistic)), repr(float(r.pvalue)))'",
             path);
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    for (size_t k = 0; k < N; k++) {
        double su, sp, u, z, pv;
        assert_int_equal(fscanf(p, "%lf %lf", &su, &sp), 2);
        assert_int_equal(report_mann_whitney(c[k].x, c[k].nx, c[k].y, c[k].ny, &u, &z, &pv), 0);
        assert_true(fabs(u - su) < 1e-9);
        assert_true(fabs(pv - sp) <= 1e-9 * fmax(sp, 1e-300) + 1e-15);
        assert_true(k != 4 || (pv < 1e-3 && z > 0)); /* x shifted up by 3 sigma: x larger */
    }
    pclose(p);
    unlink(path);
}

static void test_mann_whitney_degenerate(void **state)
{
    (void)state;
    double a[] = {1, 1, 1}, b[] = {1, 1}, u, z, p;
    /* Every value tied: no evidence (scipy returns NaN here; we say p = 1). */
    assert_int_equal(report_mann_whitney(a, 3, b, 2, &u, &z, &p), 0);
    assert_true(p == 1 && u == 3);
    assert_int_equal(report_mann_whitney(a, 3, b, 0, &u, &z, &p), 0);
    assert_true(p == 1);
}

/* A run: results with one 2xx cell per (phase "steady", class "read") holding every sample,
 * and a series.csv with one row per second whose p50/p99/max are the given values + noise. */
static void make_run(const char *dir, double base_ms, double shift_ms, int secs, uint64_t seed,
                     results_t **res, report_series_t **s)
{
    char path[256];
    snprintf(path, sizeof path, "%s/series.csv", dir);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs("second,phase,class,started,completed,rate_per_s,errors,p50_ms,p90_ms,p99_ms,max_ms\n",
          f);
    assert_int_equal(results_new(res), 0);
    results_cell_t *c = results_cell(*res, "steady", "read", "2xx");
    rng_t g;
    rng_seed(&g, seed);
    for (int i = 0; i < secs; i++) {
        double p50 = base_ms + shift_ms + 0.05 * base_ms * rng_normal(&g);
        fprintf(f, "%d,steady,read,100,100,100.0,0,%.3f,%.3f,%.3f,%.3f\n", i, p50, p50 * 1.5,
                p50 * 2, p50 * 3);
        results_cell_counters(c)->count += 100;
        hist_record_n(results_cell_hist(c, RESULTS_M_RESPONSE), (int64_t)(p50 * 1e6), 100);
    }
    fclose(f);
    out_t *o = out_new_capture();
    assert_int_equal(report_series_read(path, s, o), 0);
    out_free(o);
    unlink(path);
}

static const report_cmp_line_t *line(const report_cmp_t *c, const char *metric)
{
    for (size_t i = 0; i < report_cmp_count(c); i++)
        if (!strcmp(report_cmp_at(c, i)->metric, metric))
            return report_cmp_at(c, i);
    return NULL;
}

static void test_verdicts(void **state)
{
    (void)state;
    char dir[] = "/tmp/squall-cmp-XXXXXX";
    assert_non_null(mkdtemp(dir));
    report_cmp_opts_t o;
    report_cmp_opts_default(&o);
    results_t *b, *same, *slow, *fast, *shortr;
    report_series_t *bs, *ss, *sl, *fs, *shs;
    make_run(dir, 2.0, 0, 10, 1, &b, &bs);
    make_run(dir, 2.0, 0, 10, 2, &same, &ss);     /* same distribution, another seed */
    make_run(dir, 2.0, 5.0, 10, 3, &slow, &sl);   /* +5 ms, like the injected delay */
    make_run(dir, 2.0, -1.5, 10, 4, &fast, &fs);  /* -1.5 ms: beyond 1 ms and 10 % */
    make_run(dir, 2.0, 5.0, 3, 5, &shortr, &shs); /* 3 s against 10 cannot reach 0.01 */
    report_cmp_t *c;

    assert_int_equal(report_compare(b, bs, same, ss, &o, &c), 0);
    assert_int_equal(report_cmp_count(c), 4); /* p50, p99, p99.9, error_rate */
    assert_false(report_cmp_regressed(c));
    for (size_t i = 0; i < 4; i++)
        assert_int_equal(report_cmp_at(c, i)->verdict, REPORT_SAME);
    report_cmp_free(c);

    assert_int_equal(report_compare(b, bs, slow, sl, &o, &c), 0);
    assert_true(report_cmp_regressed(c));
    /* Complete separation, 10 against 10: U = 100, and the two-sided p of the normal
     * approximation is erfc(((100 - 50) - 0.5) / sqrt(10 * 10 * 21 / 12) / sqrt(2)). */
    const report_cmp_line_t *l = line(c, "p50");
    assert_int_equal(l->verdict, REPORT_REGRESSION);
    assert_true(l->u == 100 && l->n_base == 10 && l->n_new == 10);
    assert_true(fabs(l->p - erfc(49.5 / sqrt(175.0) / sqrt(2))) < 1e-12);
    assert_int_equal(line(c, "p99")->verdict, REPORT_REGRESSION);
    assert_string_equal(line(c, "p99.9")->tested_on, "max_ms");
    assert_int_equal(line(c, "error_rate")->verdict, REPORT_SAME);
    json_t *j = report_cmp_json(c, &o);
    assert_true(json_is_true(json_object_get(j, "regression")));
    json_decref(j);
    report_cmp_free(c);

    assert_int_equal(report_compare(b, bs, fast, fs, &o, &c), 0);
    assert_false(report_cmp_regressed(c));
    assert_int_equal(line(c, "p50")->verdict, REPORT_IMPROVEMENT);
    report_cmp_free(c);

    /* +1.2 ms at p50 (so +2.4 ms at p99, +3.6 ms at the per-second max): past the p50 floor
     * (1 ms), short of the tail floor (3 ms) at p99, past it at p99.9. */
    results_t *mid;
    report_series_t *ms;
    make_run(dir, 2.0, 1.2, 10, 6, &mid, &ms);
    assert_int_equal(report_compare(b, bs, mid, ms, &o, &c), 0);
    assert_int_equal(line(c, "p50")->verdict, REPORT_REGRESSION);
    assert_int_equal(line(c, "p99")->verdict, REPORT_SAME);
    assert_int_equal(line(c, "p99.9")->verdict, REPORT_REGRESSION);
    report_cmp_free(c);
    results_free(mid);
    report_series_free(ms);

    assert_int_equal(report_compare(b, bs, shortr, shs, &o, &c), 0);
    assert_int_equal(line(c, "p50")->verdict, REPORT_UNTESTED);
    report_cmp_free(c);

    results_t *rs[] = {b, same, slow, fast, shortr};
    report_series_t *ser[] = {bs, ss, sl, fs, shs};
    for (size_t i = 0; i < 5; i++) {
        results_free(rs[i]);
        report_series_free(ser[i]);
    }
    rmdir(dir);
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
        cmocka_unit_test(test_verdicts),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
