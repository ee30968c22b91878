/* Unit tests for the synchronisation gauge of fleet phases (src/observe/gauge.c) and its merge
 * (src/results/results_sync.c), through the observer list's public calls: completions are fed
 * to obs_done out of send order, as a run answers them, and the "sync" section's windows are
 * checked against an independent numpy computation (tests/unit/sync_ref.py, written from the
 * formulas: R̄ = |mean(exp(iθ))|, Mardia & Jupp 2000) of the same send instants: each shard's
 * windows, and the merge of two shards against numpy's R̄ of the union, within 1e-9. Traffic
 * of the same class that a fleet did not send (an open loop's), and requests never sent, do not
 * count. Downstream, `compare` and `trend` read the windows' R̄ like a latency figure: checked on
 * runs made from given R̄ values, against the definitions (Mann-Whitney's exact p for 8 vs 8
 * samples all apart is 2 / C(16, 8) = 1/6435, Mann & Whitney 1947; a step series' change point
 * at the step). Fixed seeds; no clock is asserted on. */
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

#include "squall/clock.h"
#include "squall/err.h"
#include "squall/observe.h"
#include "squall/plan.h"
#include "squall/results.h"
#include "squall/report.h"
#include "squall/rng.h"
#include "squall/trend.h"

#define NS_PER_S INT64_C(1000000000)
#define PERIOD   (2 * NS_PER_S)
#define N_SEND   600

static plan_t *load_plan(out_t *o)
{
    char path[] = "/tmp/squall-test-gauge-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    assert_non_null(f);
    /* A 6 s fleet phase: three whole windows of the 2 s period, and an open loop of the same
     * class beside it. */
    fputs("target: {url: \"http://127.0.0.1:9\"}\n"
          "requests:\n"
          "  renew: {kind: write, method: PUT, path: \"/v1/leases/gw-{{agent}}\"}\n"
          "phases:\n"
          "  - {name: steady, duration: 6s, rate: 10/s, mix: {renew: 1},\n"
          "     fleet: {agents: 100, every: 2s, timing: spread, send: renew}}\n",
          f);
    fclose(f);
    plan_t *p = NULL;
    assert_int_equal(plan_load(path, NULL, 0, &p, o), 0);
    unlink(path);
    return p;
}

/* One shard: an observer list fed the send instants t[0..n) (offsets from base) in reverse
 * order, plus traffic that must not count; its "sync" section lands in res, its files (series.csv)
 * in dir unless dir is NULL. */
static void shard(const plan_t *p, out_t *o, results_t *res, int64_t base, const int64_t *t,
                  size_t n, const char *dir)
{
    obs_cfg_t cfg = {.plan = p, .res = res, .o = o, .quiet = true, .no_brakes = true};
    obs_t *l;
    assert_int_equal(obs_new(&cfg, &l), 0);
    if (dir)
        assert_int_equal(obs_open(l, dir), 0);
    obs_phase(l, 0, base, clock_real_ns());
    for (size_t k = n; k-- > 0;) {
        eng_result_t r = {.intended_ns = base + t[k], .submitted_ns = base + t[k],
                          .sent_ns = base + t[k], .done_ns = base + t[k] + 1000000,
                          .status = 200, .outcome = ENG_OUT_S2XX};
        obs_sent(l, &(obs_sent_t){.phase = 0, .cls = 0});
        obs_done(l, &(obs_done_t){.phase = 0, .cls = 0, .first = true, .agent = (int)k,
                                  .source = "fleet", .intended_ns = r.intended_ns, .res = &r});
        /* The open loop's request of the same class at the same instant + 1/4 period, and a
         * fleet request that never went on the wire: neither is a send of the fleet action. */
        eng_result_t q = r;
        q.sent_ns += PERIOD / 4;
        obs_sent(l, &(obs_sent_t){.phase = 0, .cls = 0});
        obs_done(l, &(obs_done_t){.phase = 0, .cls = 0, .first = true, .agent = -1,
                                  .source = "open", .intended_ns = q.intended_ns, .res = &q});
        eng_result_t u = r;
        u.sent_ns = 0;
        u.outcome = ENG_OUT_REFUSED;
        u.status = 0;
        obs_sent(l, &(obs_sent_t){.phase = 0, .cls = 0});
        obs_done(l, &(obs_done_t){.phase = 0, .cls = 0, .first = true, .agent = (int)k,
                                  .source = "fleet", .intended_ns = u.intended_ns, .res = &u});
    }
    eng_stats_t st = {.window_ns = NS_PER_S};
    obs_second(l, &st, false, 0, true);
    assert_int_equal(obs_finish(l, dir), 0);
    obs_free(l);
}

/* numpy's windows of base + t over both sets: "index n rbar z p ptm" lines. */
static char *reference(int64_t base, const int64_t *a, size_t na, const int64_t *b, size_t nb)
{
    size_t cap = 64 + 24 * (na + nb);
    char *in = malloc(cap);
    assert_non_null(in);
    size_t len = (size_t)snprintf(in, cap, "windows %lld %lld", (long long)base,
                                  (long long)PERIOD);
    for (size_t i = 0; i < na; i++)
        len += (size_t)snprintf(in + len, cap - len, " %lld", (long long)(base + a[i]));
    for (size_t i = 0; i < nb; i++)
        len += (size_t)snprintf(in + len, cap - len, " %lld", (long long)(base + b[i]));
    snprintf(in + len, cap - len, "\n");
    char *out = strdup(pyref_run("sync_ref.py", in));
    free(in);
    return out;
}

/* Every window of the section's one action agrees with numpy's lines: same indices and n,
 * R̄, Z, p and peak-to-mean within 1e-9; all whole. */
static void agrees(const results_t *r, const char *ref, size_t expect_windows)
{
    json_t *sync = results_section(r, "sync");
    assert_non_null(sync);
    json_t *a = json_array_get(json_object_get(json_object_get(sync, "steady"), "actions"), 0);
    assert_string_equal(json_string_value(json_object_get(a, "class")), "renew");
    assert_int_equal(json_integer_value(json_object_get(a, "period_ns")), PERIOD);
    json_t *wins = json_object_get(a, "windows");
    assert_int_equal(json_array_size(wins), expect_windows);
    const char *line = ref;
    for (size_t i = 0; i < expect_windows; i++) {
        long long k, n;
        double rbar, z, p, ptm;
        int used;
        assert_int_equal(sscanf(line, "%lld %lld %lf %lf %lf %lf%n", &k, &n, &rbar, &z, &p, &ptm,
                                &used),
                         6);
        line += used;
        json_t *w = json_array_get(wins, i);
        assert_int_equal(json_integer_value(json_object_get(w, "index")), k);
        assert_int_equal(json_integer_value(json_object_get(w, "n")), n);
        assert_false(json_is_true(json_object_get(w, "partial")));
        double got = json_real_value(json_object_get(w, "r_bar"));
        if (fabs(got - rbar) > 1e-9)
            fail_msg("window %lld: R-bar %.17g, numpy %.17g", k, got, rbar);
        assert_true(fabs(json_real_value(json_object_get(w, "z")) - z) <= 1e-9 * (1 + z));
        assert_true(fabs(json_real_value(json_object_get(w, "p")) - p) <= 1e-9);
        assert_true(fabs(json_real_value(json_object_get(w, "peak_to_mean")) - ptm) <= 1e-9);
    }
}

/* Shard A's agents bunch in the first fifth of each period, shard B's spread over all of it: the
 * union is neither, and its R̄ is not the mean of the two shards' R̄. */
static void draw(rng_t *g, int64_t *t, size_t n, int64_t width)
{
    for (size_t i = 0; i < n; i++) {
        int64_t w = (int64_t)(i % 3);
        t[i] = w * PERIOD + (int64_t)rng_below(g, (uint64_t)width);
    }
}

static void test_shards_and_merge(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p = load_plan(o);
    /* The phase began 10 s ago on the monotonic clock: every window has ended by the second
     * obs_second closes, so all three are whole. */
    int64_t base = clock_mono_ns() - 10 * NS_PER_S;
    rng_t g;
    rng_seed(&g, 2020);
    static int64_t a[N_SEND], b[N_SEND];
    draw(&g, a, N_SEND, PERIOD / 5);
    draw(&g, b, N_SEND, PERIOD);
    results_t *ra, *rb, *m;
    assert_int_equal(results_new(&ra), 0);
    assert_int_equal(results_new(&rb), 0);
    int64_t start_ms = INT64_C(1796000000000);
    results_set_start(ra, start_ms);
    results_set_start(rb, start_ms);
    assert_int_equal(results_set_shard(ra, 1, 2), 0);
    assert_int_equal(results_set_shard(rb, 2, 2), 0);
    shard(p, o, ra, base, a, N_SEND, NULL);
    shard(p, o, rb, base, b, N_SEND, NULL);

    char *ref_a = reference(base, a, N_SEND, NULL, 0);
    char *ref_b = reference(base, b, N_SEND, NULL, 0);
    char *ref_u = reference(base, a, N_SEND, b, N_SEND);
    agrees(ra, ref_a, 3);
    agrees(rb, ref_b, 3);

    assert_int_equal(results_new(&m), 0);
    assert_int_equal(results_merge(m, ra, "a", o), 0);
    assert_int_equal(results_merge(m, rb, "b", o), 0);
    assert_int_equal(results_merge_finish(m, o), 0);
    agrees(m, ref_u, 3);
    free(ref_a);
    free(ref_b);
    free(ref_u);
    results_free(ra);
    results_free(rb);
    results_free(m);
    plan_free(p);
    out_free(o);
}

/* A results object of one fleet action "renew" in phase "fleet" whose whole windows have the
 * given R̄ (n = 300 each), plus one partial window of R̄ 1 that must not count; the plan bytes
 * make the trend's group, start orders the runs. */
static results_t *sync_run(const double *r_bar, size_t n, int64_t start_ms)
{
    results_t *r;
    out_t *o = out_new_capture();
    assert_int_equal(results_new(&r), 0);
    assert_int_equal(results_set_plan(r, "fleet.yaml", "plan", 4, o), 0);
    results_set_start(r, start_ms);
    json_t *wins = json_array();
    for (size_t i = 0; i <= n; i++)
        json_array_append_new(wins, json_pack("{s:I,s:f,s:I,s:f,s:b}", "index", (json_int_t)i,
                                              "start_s", (double)i / 2, "n", (json_int_t)300,
                                              "r_bar", i < n ? r_bar[i] : 1.0, "partial", i == n));
    json_t *sync = json_pack("{s:{s:[{s:s,s:I,s:o}]}}", "fleet", "actions", "class", "renew",
                             "period_ns", (json_int_t)500000000, "windows", wins);
    assert_int_equal(results_set_section(r, "sync", sync), 0);
    /* The answers of the class: a comparison and a trend go through a run's cells. */
    results_cell_t *c = results_cell(r, "fleet", "renew", "2xx");
    assert_non_null(c);
    for (int i = 0; i < 10; i++)
        results_record(c, &(results_sample_t){.intended_ns = 1000, .done_ns = 2000000 + i * 1000,
                                               .status = 200});
    out_free(o);
    return r;
}

static void test_compare_and_trend(void **state)
{
    (void)state;
    double spread[8], bunched[8];
    for (int i = 0; i < 8; i++) {
        spread[i] = 0.01 + 0.002 * i;
        bunched[i] = 0.90 + 0.01 * i;
    }
    results_t *a = sync_run(spread, 8, INT64_C(1796000000000));
    results_t *b = sync_run(bunched, 8, INT64_C(1796000100000));
    report_series_t *sa, *sb;
    assert_int_equal(report_series_new(&sa), 0);
    assert_int_equal(report_series_new(&sb), 0);
    report_cmp_opts_t opts;
    report_cmp_opts_default(&opts);
    report_cmp_t *c;
    assert_int_equal(report_compare(a, sa, b, sb, &opts, &c), 0);
    const report_cmp_line_t *l = NULL;
    for (size_t i = 0; i < report_cmp_count(c); i++)
        if (report_cmp_at(c, i)->latency && !strcmp(report_cmp_at(c, i)->latency, "sync"))
            l = report_cmp_at(c, i);
    assert_non_null(l);
    assert_int_equal(l->n_base, 8); /* the partial window left out */
    assert_int_equal(l->n_new, 8);
    assert_true(fabs(l->p - 1.0 / 6435) < 1e-12);
    assert_true(fabs(l->base_med - 0.017) < 1e-12 && fabs(l->new_med - 0.935) < 1e-12);
    assert_string_equal(report_verdict_word(l), "more synchronised");
    assert_true(report_cmp_worse(c));
    report_cmp_free(c);
    assert_int_equal(report_compare(b, sb, a, sa, &opts, &c), 0);
    for (size_t i = 0; i < report_cmp_count(c); i++)
        if (report_cmp_at(c, i)->latency && !strcmp(report_cmp_at(c, i)->latency, "sync"))
            assert_string_equal(report_verdict_word(report_cmp_at(c, i)), "less synchronised");
    report_cmp_free(c);

    /* Trend: ten runs of one plan, the fleet's largest whole-window R̄ 0.02.. then 0.9.. from the
     * seventh on: one change point at run 7, significant, for the worse. */
    results_t *runs[10];
    const char *dirs[10];
    for (int k = 0; k < 10; k++) {
        double v[4];
        for (int i = 0; i < 4; i++)
            v[i] = (k < 6 ? 0.02 : 0.9) + 0.001 * ((k * 7 + i * 3) % 5);
        runs[k] = sync_run(v, 4, INT64_C(1796000000000) + k * 60000);
        dirs[k] = "run";
    }
    trend_t *t;
    assert_int_equal(trend_new(runs, dirs, 10, &opts, &t), 0);
    assert_int_equal(trend_group_count(t), 1);
    const trend_group_t *g = trend_group_at(t, 0);
    assert_int_equal(g->n_sync, 1);
    const trend_series_t *s = &g->sync[0];
    assert_string_equal(s->metric, "sync_max");
    assert_true(fabs(s->values[0] - (0.02 + 0.001 * 4)) < 1e-12); /* max of its four windows */
    assert_int_equal(s->n_changes, 1);
    assert_int_equal(s->changes[0].first, 6);
    assert_true(s->changes[0].significant && s->changes[0].worse);
    assert_true(trend_newest_worse(t));
    trend_free(t);
    for (int k = 0; k < 10; k++)
        results_free(runs[k]);
    results_free(a);
    results_free(b);
    report_series_free(sa);
    report_series_free(sb);
}

/* A window without sends has no gauge: results.json's r_bar, z, p and peak_to_mean are null
 * (a run's and a merge's), series.csv's row of the window has its index and n = 0 but empty
 * gauge cells, and compare's samples leave it out. An R-bar of 0 there would read "evenly
 * spread" (the CI run of 2026-12-03 whose first tick was held past its window wrote 0.0000). */
static void test_window_without_sends(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p = load_plan(o);
    int64_t base = clock_mono_ns() - 10 * NS_PER_S;
    static int64_t t[200];
    for (size_t i = 0; i < 200; i++) /* windows 0 and 1 only; window 2 gets nothing */
        t[i] = (int64_t)(i % 2) * PERIOD + (int64_t)i * (PERIOD / 400);
    char dir[] = "/tmp/squall-test-gauge-dir-XXXXXX";
    assert_non_null(mkdtemp(dir));
    results_t *r, *m;
    assert_int_equal(results_new(&r), 0);
    results_set_start(r, INT64_C(1796000000000));
    shard(p, o, r, base, t, 200, dir);

    assert_int_equal(results_new(&m), 0);
    assert_int_equal(results_merge(m, r, "a", o), 0);
    assert_int_equal(results_merge_finish(m, o), 0);
    const results_t *both[] = {r, m};
    for (int k = 0; k < 2; k++) {
        json_t *a = json_array_get(
            json_object_get(json_object_get(results_section(both[k], "sync"), "steady"),
                            "actions"),
            0);
        json_t *wins = json_object_get(a, "windows");
        assert_int_equal(json_array_size(wins), 3);
        for (size_t i = 0; i < 3; i++) {
            json_t *w = json_array_get(wins, i);
            assert_int_equal(json_integer_value(json_object_get(w, "n")), i < 2 ? 100 : 0);
            const char *keys[] = {"r_bar", "z", "p", "peak_to_mean"};
            for (int f = 0; f < 4; f++)
                assert_true(i < 2 ? json_is_real(json_object_get(w, keys[f]))
                                  : json_is_null(json_object_get(w, keys[f])));
        }
    }

    /* series.csv: the row of renew shows window 2, closed with no sends (RESULTS_SERIES_SYNC
     * ends the line). */
    char path[128], line[1024];
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_FILE);
    FILE *f = fopen(path, "r");
    assert_non_null(f);
    int rows = 0;
    while (fgets(line, sizeof line, f))
        if (strstr(line, ",steady,renew,")) {
            rows++;
            size_t len = strlen(line);
            assert_true(len > 8 && strcmp(line + len - 8, ",2,0,,,\n") == 0);
        }
    fclose(f);
    assert_int_equal(rows, 1);

    /* compare: two whole windows with sends on each side, the empty one left out. */
    report_series_t *s;
    assert_int_equal(report_series_new(&s), 0);
    report_cmp_opts_t opts;
    report_cmp_opts_default(&opts);
    report_cmp_t *c;
    assert_int_equal(report_compare(r, s, m, s, &opts, &c), 0);
    int seen = 0;
    for (size_t i = 0; i < report_cmp_count(c); i++) {
        const report_cmp_line_t *ln = report_cmp_at(c, i);
        if (ln->latency && !strcmp(ln->latency, "sync")) {
            assert_int_equal(ln->n_base, 2);
            assert_int_equal(ln->n_new, 2);
            seen++;
        }
    }
    assert_int_equal(seen, 1);
    report_cmp_free(c);
    report_series_free(s);
    results_free(r);
    results_free(m);
    plan_free(p);
    out_free(o);
    snprintf(line, sizeof line, "rm -rf '%s'", dir);
    assert_int_equal(system(line), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_shards_and_merge),
        cmocka_unit_test(test_compare_and_trend),
        cmocka_unit_test(test_window_without_sends),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
