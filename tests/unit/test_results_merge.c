/* Unit tests for a merge's sections and series (src/results/results_sections.c,
 * results_storms.c, results_series.c) and its verdict (judge_results): pooled percentiles
 * against numpy sorting the pooled samples (rank rule of HdrHistogram_c, as in test_judge.c),
 * wall-clock seconds, intervals and tick figures by plain arithmetic from their definitions
 * (README, "Fleets and storms"; DEVELOPERS.md, "Merging"), restated beside each check. */
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/judge.h"
#include "squall/results.h"
#include "squall/rng.h"

#define T0 INT64_C(1796000000000) /* a wall-clock start, ms */

static results_t *input(int64_t start_ms, int shard)
{
    results_t *r;
    assert_int_equal(results_new(&r), 0);
    results_set_start(r, start_ms);
    results_set_duration(r, INT64_C(10000000000));
    assert_int_equal(results_set_shard(r, shard, 2), 0);
    return r;
}

static void section(results_t *r, const char *name, const char *json)
{
    json_error_t e;
    json_t *v = json_loads(json, 0, &e);
    if (!v)
        fprintf(stderr, "bad test JSON for %s: %s\n", name, e.text);
    assert_non_null(v);
    assert_int_equal(results_set_section(r, name, v), 0);
}

/* The merge of inputs in[0..n): results_merge each, then results_merge_finish. */
static int merge(results_t **in, size_t n, results_t **out, out_t *o)
{
    assert_int_equal(results_new(out), 0);
    for (size_t i = 0; i < n; i++) {
        char name[32];
        snprintf(name, sizeof name, "in%zu", i);
        assert_int_equal(results_merge(*out, in[i], name, o), 0);
    }
    return results_merge_finish(*out, o);
}

static const json_t *at(const results_t *r, const char *sec, const char *key)
{
    return json_object_get(results_section(r, sec), key);
}

/* numpy (Debian python3-numpy) sorts the samples; the rank is HdrHistogram_c's
 * (hdr_value_at_percentile: (int64_t)(p / 100 * n + 0.5), at least 1). */
static double numpy_at(const int64_t *v, size_t n, double p)
{
    char path[] = "/tmp/squall-merge-np-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    for (size_t i = 0; i < n; i++)
        fprintf(f, "%lld\n", (long long)v[i]);
    fclose(f);
    char cmd[512];
    snprintf(cmd, sizeof cmd,
             "/usr/bin/python3 -c 'import numpy as np; x = np.sort(np.loadtxt(\"%s\", ndmin=1)); "
             "r = max(1, int(%g / 100 * len(x) + 0.5)); print(repr(float(x[r - 1])))'",
             path, p);
    FILE *pp = popen(cmd, "r");
    double out = NAN;
    assert_non_null(pp);
    assert_int_equal(fscanf(pp, "%lf", &out), 1);
    pclose(pp);
    unlink(path);
    return out;
}

/* An HDR percentile is the highest value of the bucket holding the exact sample: within 1/1024
 * above it at 3 digits. */
static void near(double got, double exact)
{
    if (!(got >= exact - 1e-9 && got <= exact * (1 + 1.0 / 1024) + 1e-9))
        fail_msg("got %.6f, exact %.6f", got, exact);
}

/* ---- generator health by wall-clock second ------------------------------------------------ */

static void test_generator_by_wall_second(void **state)
{
    (void)state;
    results_t *in[2] = {input(T0, 1), input(T0 + 2000, 2)};
    section(in[0], "generator",
            "{\"generator_bound\": {\"seconds\": 2, \"list\": [3, 4], \"last_reason\": \"a\"},"
            " \"connection_bound\": {\"seconds\": 1, \"list\": [7], \"last_reason\": \"slow\"},"
            " \"max_queued\": 5, \"max_in_flight\": 10, \"schedule_lag_p99_ms\": 1.5,"
            " \"schedule_lag_max_ms\": 2.0, \"started\": 100, \"completed\": 100, \"errors\": 1,"
            " \"closed_loop\": false, \"thresholds\": {\"lag_p99_ms\": 10.0}}");
    section(in[1], "generator",
            "{\"generator_bound\": {\"seconds\": 2, \"list\": [2, 9], \"last_reason\": \"b\"},"
            " \"connection_bound\": {\"seconds\": 0, \"list\": []},"
            " \"max_queued\": 8, \"max_in_flight\": 4, \"schedule_lag_p99_ms\": 0.7,"
            " \"schedule_lag_max_ms\": 9.5, \"started\": 50, \"completed\": 49, \"errors\": 0,"
            " \"closed_loop\": true, \"thresholds\": {\"lag_p99_ms\": 10.0}}");
    results_t *m;
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    /* B started 2 s after A: B's second k is A's (and the merge's) second k + 2, so B's 2 and 9
     * are 4 and 11; with A's 3 and 4 the bound seconds are 3, 4 and 11. The latest is B's. */
    const json_t *gb = at(m, "generator", "generator_bound");
    assert_int_equal(json_integer_value(json_object_get(gb, "seconds")), 3);
    json_t *want = json_pack("[i, i, i]", 3, 4, 11);
    assert_true(json_equal(json_object_get(gb, "list"), want));
    json_decref(want);
    assert_string_equal(json_string_value(json_object_get(gb, "last_reason")), "b");
    const json_t *cb = at(m, "generator", "connection_bound");
    assert_int_equal(json_integer_value(json_object_get(cb, "seconds")), 1);
    /* Peaks are the largest of the inputs', counts add, a closed loop in either is one. */
    assert_int_equal(json_integer_value(at(m, "generator", "max_queued")), 8);
    assert_int_equal(json_integer_value(at(m, "generator", "max_in_flight")), 10);
    assert_true(json_real_value(at(m, "generator", "schedule_lag_p99_ms")) == 1.5);
    assert_true(json_real_value(at(m, "generator", "schedule_lag_max_ms")) == 9.5);
    assert_int_equal(json_integer_value(at(m, "generator", "started")), 150);
    assert_int_equal(json_integer_value(at(m, "generator", "completed")), 149);
    assert_int_equal(json_integer_value(at(m, "generator", "errors")), 1);
    assert_true(json_is_true(at(m, "generator", "closed_loop")));
    results_free(m);
    /* An input that counted more seconds than it listed (at most 10,000 are kept): the rest
     * count as they are, an upper bound. */
    json_object_set_new(json_object_get(results_section(in[1], "generator"), "generator_bound"),
                        "seconds", json_integer(12002));
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    gb = at(m, "generator", "generator_bound");
    assert_int_equal(json_integer_value(json_object_get(gb, "seconds")), 3 + 12000);
    results_free(m);
    results_free(in[0]);
    results_free(in[1]);
}

/* ---- phases and the verdict --------------------------------------------------------------- */

#define JUDGEMENT(max_ms)                                                                          \
    "{\"objectives\": [{\"class\": \"read\", \"phase\": null, \"metric\": \"response\","          \
    " \"limit\": \"percentile\", \"percentile\": 99.0, \"max_ms\": " max_ms "},"                   \
    " {\"class\": \"read\", \"phase\": \"steady\", \"metric\": \"response\","                      \
    " \"limit\": \"min-rate\", \"value\": 5.0}],"                                                  \
    " \"accept\": [], \"default_error_rate\": 0.01, \"watch_classes\": [], \"phases\": "          \
    "[\"steady\"]}"

/* A shard of class read in phase steady (10 s from its start): n answers of `ms` each. */
static results_t *shard(int64_t start_ms, int index, int n, double ms, const char *max_ms)
{
    results_t *r = input(start_ms, index);
    results_cell_t *c = results_cell(r, "steady", "read", "2xx");
    results_cell_counters(c)->count = n;
    hist_record_n(results_cell_hist(c, RESULTS_M_RESPONSE), (int64_t)(ms * 1e6), n);
    char j[1024];
    snprintf(j, sizeof j, JUDGEMENT("%s"), max_ms);
    section(r, "judgement", j);
    section(r, "phases", "{\"phases\": [{\"name\": \"steady\", \"start_s\": 0.0, "
                         "\"elapsed_s\": 10.0}]}");
    section(r, "generator", "{\"generator_bound\": {\"seconds\": 0, \"list\": []}}");
    section(r, "brakes", "{\"shared_target\": false, \"brakes\": []}");
    return r;
}

static enum judge_outcome judged(const results_t *r, const judge_t **check, judge_t **keep)
{
    enum judge_outcome oc;
    json_t *reasons = json_array(), *accepted = json_array();
    char err[200];
    assert_int_equal(judge_results(r, keep, &oc, reasons, accepted, err, sizeof err), 0);
    *check = *keep;
    json_decref(reasons);
    json_decref(accepted);
    return oc;
}

static const judge_check_t *check_of(const judge_t *j, size_t obj)
{
    for (size_t i = 0; i < judge_check_count(j); i++)
        if (judge_check_at(j, i)->objective == obj)
            return judge_check_at(j, i);
    return NULL;
}

static void test_phases_and_verdict(void **state)
{
    (void)state;
    /* Two shards of 60 answers at 5 ms: a p99 needs 100 samples, so each alone is
     * INCONCLUSIVE; B started 0.5 s after A. */
    results_t *in[3] = {shard(T0, 1, 60, 5, "20.0"), shard(T0 + 500, 2, 60, 5, "20.0"), NULL};
    const judge_t *c;
    judge_t *j;
    assert_int_equal(judged(in[0], &c, &j), JUDGE_OUTCOME_INCONCLUSIVE);
    assert_int_equal(check_of(c, 0)->verdict, JUDGE_TOO_FEW);
    judge_free(j);
    results_t *m;
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    /* steady ran [0, 10) s in A and [0.5, 10.5) s in B: the union is 10.5 s from the merge's
     * start; 120 answers over it are 11.43/s (over the sum, 20 s, it would be 6/s). */
    const json_t *p = json_array_get(at(m, "phases", "phases"), 0);
    assert_true(json_real_value(json_object_get(p, "start_s")) == 0);
    assert_true(fabs(json_real_value(json_object_get(p, "elapsed_s")) - 10.5) < 1e-9);
    assert_int_equal(judged(m, &c, &j), JUDGE_OUTCOME_PASS);
    assert_int_equal(check_of(c, 0)->samples, 120);
    assert_int_equal(check_of(c, 0)->verdict, JUDGE_PASS);
    assert_true(fabs(check_of(c, 1)->observed - 120 / 10.5) < 1e-9);
    judge_free(j);
    results_free(m);
    /* The same shards answering in 50 ms: each alone INCONCLUSIVE, the merge FAILs. */
    results_t *slow[2] = {shard(T0, 1, 60, 50, "20.0"), shard(T0 + 500, 2, 60, 50, "20.0")};
    assert_int_equal(judged(slow[0], &c, &j), JUDGE_OUTCOME_INCONCLUSIVE);
    judge_free(j);
    assert_int_equal(merge(slow, 2, &m, NULL), 0);
    assert_int_equal(judged(m, &c, &j), JUDGE_OUTCOME_FAIL);
    judge_free(j);
    results_free(m);
    /* A third shard that could not offer its load in one second makes the merge
     * INCONCLUSIVE. */
    in[2] = shard(T0, 2, 60, 5, "20.0");
    section(in[2], "generator",
            "{\"generator_bound\": {\"seconds\": 1, \"list\": [4], \"last_reason\": \"lag\"}}");
    assert_int_equal(merge(in, 3, &m, NULL), 0);
    assert_int_equal(judged(m, &c, &j), JUDGE_OUTCOME_INCONCLUSIVE);
    judge_free(j);
    results_free(m);
    /* So does one that stopped early. */
    assert_int_equal(results_set_stopped(in[2], "signal: SIGINT"), 0);
    section(in[2], "generator", "{\"generator_bound\": {\"seconds\": 0, \"list\": []}}");
    assert_int_equal(merge(in, 3, &m, NULL), 0);
    assert_int_equal(judged(m, &c, &j), JUDGE_OUTCOME_INCONCLUSIVE);
    judge_free(j);
    results_free(m);
    results_free(in[2]);
    /* Another threshold is another judgement: refused, naming the input and the section. */
    in[2] = shard(T0, 2, 60, 5, "30.0");
    out_t *o = out_new_capture();
    assert_int_equal(merge(in, 3, &m, o), SQ_EMISMATCH);
    assert_non_null(strstr(out_captured_diag(o), "in2: its \"judgement\" section differs from "
                                                 "in0's: refusing to merge"));
    out_free(o);
    results_free(m);
    results_free(in[2]);
    /* So are other brakes, and a brakes section only some inputs have. */
    in[2] = shard(T0, 2, 60, 5, "20.0");
    results_set_section(in[2], "brakes", json_pack("{s:b, s:[]}", "shared_target", 1, "brakes"));
    o = out_new_capture();
    assert_int_equal(merge(in, 3, &m, o), SQ_EMISMATCH);
    assert_non_null(strstr(out_captured_diag(o), "\"brakes\" section differs"));
    out_free(o);
    results_free(m);
    for (size_t i = 0; i < 3; i++)
        results_free(in[i]);
    for (size_t i = 0; i < 2; i++)
        results_free(slow[i]);
}

/* ---- storm ticks ---------------------------------------------------------------------------- */

#define REQ 40 /* requests per input tick */

/* One input tick from its requests' send, finish and response times (ns; sends and finishes
 * from the input's own tick instant), by the definitions in README "Fleets and storms". */
static json_t *tick(int64_t t_ns, const int64_t *sent, const int64_t *done, const int64_t *resp,
                    int n, int peak)
{
    int64_t lo = INT64_MAX, hi = INT64_MIN, last = INT64_MIN;
    hist_t *h;
    assert_int_equal(hist_new_ns(&h), 0);
    json_t *bins = json_array();
    int b[10] = {0};
    for (int i = 0; i < n; i++) {
        lo = sent[i] < lo ? sent[i] : lo;
        hi = sent[i] > hi ? sent[i] : hi;
        last = done[i] > last ? done[i] : last;
        hist_record(h, resp[i]);
        b[i % 10]++;
    }
    for (int i = 0; i < 10; i++)
        json_array_append_new(bins, json_integer(b[i]));
    char *text;
    assert_int_equal(hist_encode(h, &text), 0);
    json_t *t = json_pack("{s:I, s:i, s:i, s:I, s:I, s:i, s:I, s:I, s:I, s:I, s:o, s:s}", "t_ns",
                          (json_int_t)t_ns, "requests", n, "written", n, "dispatch_spread_ns",
                          (json_int_t)(hi - lo), "first_written_ns", (json_int_t)lo,
                          "peak_in_flight", peak, "burst_ns", (json_int_t)(last - lo), "p50_ns",
                          (json_int_t)hist_value_at(h, 50), "p99_ns",
                          (json_int_t)hist_value_at(h, 99), "max_ns", (json_int_t)hist_max(h),
                          "bins", bins, "hist", text);
    free(text);
    hist_free(h);
    return t;
}

static void test_storm_ticks(void **state)
{
    (void)state;
    /* Aligned, every 1 s. A's phase starts at T0 (its first tick 400 ms later); B's at T0 +
     * 150 ms with an offset of 252 ms, so B's ticks are 2 ms after A's: the same ticks, B's
     * sends 2 ms later on the merge's clock. A has a 4th tick that B has not. */
    static int64_t sent[2][4][REQ], done[2][4][REQ], resp[2][4][REQ];
    rng_t g;
    rng_seed(&g, 11);
    results_t *in[2] = {input(T0, 1), input(T0 + 150, 2)};
    const int64_t offset[2] = {400000000, 252000000}, shift[2] = {0, 2000000};
    for (int i = 0; i < 2; i++) {
        json_t *ticks = json_array();
        for (int k = 0; k < 4 - i; k++) {
            for (int q = 0; q < REQ; q++) {
                sent[i][k][q] = 100000 + (int64_t)rng_below(&g, 5000000);
                resp[i][k][q] = (int64_t)exp(log(4e6) + 0.5 * rng_normal(&g));
                done[i][k][q] = sent[i][k][q] + resp[i][k][q] / 2;
            }
            json_array_append_new(ticks, tick(offset[i] + k * INT64_C(1000000000), sent[i][k],
                                              done[i][k], resp[i][k], REQ, 7 + i));
        }
        json_t *storms = json_pack(
            "{s:{s:[{s:s, s:s, s:I, s:I, s:i, s:o}], s:{s:i, s:i, s:i, s:i, s:i}}}", "storm",
            "actions", "class", "renew", "timing", "aligned", "period_ns",
            (json_int_t)1000000000, "offset_ns", (json_int_t)offset[i], "requests",
            REQ * (4 - i), "ticks", ticks, "burst", "count", 10 * (i + 1), "p50_ns", 100, "p90_ns",
            200, "p99_ns", 300 + i, "max_ns", 400 - i);
        assert_int_equal(results_set_section(in[i], "storms", storms), 0);
        section(in[i], "phases", "{\"phases\": [{\"name\": \"storm\", \"start_s\": 0.0, "
                                 "\"elapsed_s\": 4.0}]}");
    }
    results_t *m;
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    json_t *storm = json_object_get(results_section(m, "storms"), "storm");
    json_t *a = json_array_get(json_object_get(storm, "actions"), 0);
    assert_int_equal(json_array_size(json_object_get(storm, "actions")), 1);
    assert_int_equal(json_integer_value(json_object_get(a, "offset_ns")), offset[0]);
    assert_int_equal(json_integer_value(json_object_get(a, "requests")), 7 * REQ);
    json_t *ticks = json_object_get(a, "ticks");
    assert_int_equal(json_array_size(ticks), 4);
    for (int k = 0; k < 3; k++) {
        json_t *t = json_array_get(ticks, (size_t)k);
        int64_t pooled[2 * REQ], lo = INT64_MAX, hi = INT64_MIN, last = INT64_MIN;
        for (int i = 0; i < 2; i++)
            for (int q = 0; q < REQ; q++) {
                int64_t s = sent[i][k][q] + shift[i], d = done[i][k][q] + shift[i];
                lo = s < lo ? s : lo;
                hi = s > hi ? s : hi;
                last = d > last ? d : last;
                pooled[i * REQ + q] = resp[i][k][q];
            }
        assert_int_equal(json_integer_value(json_object_get(t, "t_ns")),
                         offset[0] + k * INT64_C(1000000000));
        assert_int_equal(json_integer_value(json_object_get(t, "requests")), 2 * REQ);
        assert_int_equal(json_integer_value(json_object_get(t, "written")), 2 * REQ);
        /* First written, dispatch spread (first to last written) and burst (first written to
         * last finished) of the pooled sends; the peak is the sum of the two (7 + 8). */
        assert_int_equal(json_integer_value(json_object_get(t, "first_written_ns")), lo);
        assert_int_equal(json_integer_value(json_object_get(t, "dispatch_spread_ns")), hi - lo);
        assert_int_equal(json_integer_value(json_object_get(t, "burst_ns")), last - lo);
        assert_int_equal(json_integer_value(json_object_get(t, "peak_in_flight")), 15);
        assert_int_equal(json_integer_value(json_array_get(json_object_get(t, "bins"), 3)), 8);
        near((double)json_integer_value(json_object_get(t, "p99_ns")),
             numpy_at(pooled, 2 * REQ, 99));
        near((double)json_integer_value(json_object_get(t, "p50_ns")),
             numpy_at(pooled, 2 * REQ, 50));
    }
    /* A's 4th tick alone keeps its own figures. */
    json_t *a0 = json_object_get(json_object_get(results_section(in[0], "storms"), "storm"),
                                 "actions");
    json_t *only = json_object_get(json_array_get(a0, 0), "ticks");
    assert_true(json_equal(json_array_get(ticks, 3), json_array_get(only, 3)));
    /* Burst summaries without histograms: counts add, the largest percentile is kept as an
     * upper bound and marked. */
    json_t *burst = json_object_get(storm, "burst");
    assert_int_equal(json_integer_value(json_object_get(burst, "count")), 30);
    assert_int_equal(json_integer_value(json_object_get(burst, "p99_ns")), 301);
    assert_int_equal(json_integer_value(json_object_get(burst, "max_ns")), 400);
    assert_true(json_is_true(json_object_get(burst, "percentiles_upper_bound")));
    results_free(m);
    results_free(in[0]);
    results_free(in[1]);
}

/* ---- counts that add: watches and lifecycle ------------------------------------------------ */

static void test_counts_add(void **state)
{
    (void)state;
    results_t *in[2] = {input(T0, 1), input(T0 + 1000, 2)};
    for (int i = 0; i < 2; i++) {
        section(in[i], "phases", "{\"phases\": [{\"name\": \"steady\", \"start_s\": 0.0, "
                                 "\"elapsed_s\": 5.0}]}");
        char w[512];
        snprintf(w, sizeof w,
                 "{\"steady\": {\"classes\": {\"follow\": {\"streams\": %d, \"opens\": %d, "
                 "\"drops\": 1, \"policy\": \"full-jitter\"}}, \"reconnect_log\": {\"ended_ns\": "
                 "[%d], \"delay_ns\": [5], \"sent_ns\": [%d], \"attempt\": [1], \"truncated\": "
                 "%s, \"dropped\": %d}}}",
                 10 + i, 12 + i, 300000000, i ? -1 : 400000000, i ? "true" : "false", 2 * i);
        section(in[i], "watches", w);
        snprintf(w, sizeof w,
                 "{\"journal\": \"journal.ndjson\", \"created\": %d, \"deleted\": 3, "
                 "\"teardown\": {\"objects\": %d, \"kept\": false, \"seconds\": %s, "
                 "\"stopped\": null, \"response_p50_ms\": 1.5}, \"kept\": {}, "
                 "\"churn_population_reached\": %s, \"churn_population_min\": %s, "
                 "\"churn_population_max\": %s, \"churn_population_low\": %d, "
                 "\"churn_population_high\": %d, \"churn_population_held\": %s}",
                 5 + i, 4 + i, i ? "0.5" : "0.25", i ? "true" : "false", i ? "55" : "null",
                 i ? "61" : "null", i ? 54 : 40, i ? 66 : 44, i ? "true" : "false");
        section(in[i], "lifecycle", w);
    }
    results_t *m;
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    json_t *f = json_object_get(json_object_get(at(m, "watches", "steady"), "classes"), "follow");
    assert_int_equal(json_integer_value(json_object_get(f, "streams")), 21);
    assert_int_equal(json_integer_value(json_object_get(f, "opens")), 25);
    assert_int_equal(json_integer_value(json_object_get(f, "drops")), 2);
    assert_string_equal(json_string_value(json_object_get(f, "policy")), "full-jitter");
    /* B's phase started 1 s after A's: its reconnect at 0.3 s is at 1.3 s of the merged phase;
     * a reconnect never sent (-1) stays so. */
    json_t *log = json_object_get(at(m, "watches", "steady"), "reconnect_log");
    json_t *want = json_pack("[i, i]", 300000000, 1300000000);
    assert_true(json_equal(json_object_get(log, "ended_ns"), want));
    json_decref(want);
    want = json_pack("[i, i]", 400000000, -1);
    assert_true(json_equal(json_object_get(log, "sent_ns"), want));
    json_decref(want);
    assert_true(json_is_true(json_object_get(log, "truncated")));
    assert_int_equal(json_integer_value(json_object_get(log, "dropped")), 2);
    /* Lifecycle counts add; the teardowns ran side by side (the longer is kept); percentiles
     * of two teardowns cannot be pooled from theirs and are left out; A never reached its churn
     * population, so the merge has no band. */
    assert_int_equal(json_integer_value(at(m, "lifecycle", "created")), 11);
    assert_int_equal(json_integer_value(at(m, "lifecycle", "deleted")), 6);
    json_t *td = (json_t *)at(m, "lifecycle", "teardown");
    assert_int_equal(json_integer_value(json_object_get(td, "objects")), 9);
    assert_true(json_real_value(json_object_get(td, "seconds")) == 0.5);
    assert_null(json_object_get(td, "response_p50_ms"));
    assert_true(json_is_false(at(m, "lifecycle", "churn_population_reached")));
    assert_true(json_is_null(at(m, "lifecycle", "churn_population_min")));
    assert_true(json_is_false(at(m, "lifecycle", "churn_population_held")));
    results_free(m);
    /* Both reached it: the band of the whole lies within the sums of minima and maxima. */
    json_object_set_new(results_section(in[0], "lifecycle"), "churn_population_reached",
                        json_true());
    json_object_set_new(results_section(in[0], "lifecycle"), "churn_population_min",
                        json_integer(40));
    json_object_set_new(results_section(in[0], "lifecycle"), "churn_population_max",
                        json_integer(44));
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    assert_true(json_is_true(at(m, "lifecycle", "churn_population_reached")));
    assert_int_equal(json_integer_value(at(m, "lifecycle", "churn_population_min")), 95);
    assert_int_equal(json_integer_value(at(m, "lifecycle", "churn_population_max")), 105);
    /* The allowed bands add (40..44 and 54..66: 94..110), and 95..105 lies in the sum. */
    assert_int_equal(json_integer_value(at(m, "lifecycle", "churn_population_low")), 94);
    assert_int_equal(json_integer_value(at(m, "lifecycle", "churn_population_high")), 110);
    assert_true(json_is_true(at(m, "lifecycle", "churn_population_held")));
    results_free(m);
    /* One shard's population rose to 60 over its band 40..44: the merged 94..121 leaves the
     * summed band 94..110, so the whole did not hold. */
    json_object_set_new(results_section(in[0], "lifecycle"), "churn_population_min",
                        json_integer(39));
    json_object_set_new(results_section(in[0], "lifecycle"), "churn_population_max",
                        json_integer(60));
    assert_int_equal(merge(in, 2, &m, NULL), 0);
    assert_int_equal(json_integer_value(at(m, "lifecycle", "churn_population_max")), 121);
    assert_true(json_is_false(at(m, "lifecycle", "churn_population_held")));
    results_free(m);
    results_free(in[0]);
    results_free(in[1]);
}

/* ---- the per-second series ------------------------------------------------------------------ */

#define PER_SECOND 30 /* samples of each input's row */

static int64_t ssamples[2][3][PER_SECOND];

/* The run's figures (RESULTS_SERIES_RUN_MAP) input i writes for its second k: open streams
 * 2 + i, k dropped and k reconnects, 10 (i + 1) events, a propagation p99 of 5 (i + 1) ms (none
 * stamped, "nan", in input 1's second 0), a queue wait of 1.5 (i + 1) + k ms, 3 in flight and
 * 4 + i queued at the peak. */
static void run_figures(int i, int k, char *buf, size_t cap)
{
    char p99[16] = "nan";
    if (i == 0 || k > 0)
        snprintf(p99, sizeof p99, "%.3f", 5.0 * (i + 1));
    snprintf(buf, cap, ",,%d,%d,%d,%d,%s,%.3f,3,%d", 2 + i, k, k, 10 * (i + 1), p99,
             1.5 * (i + 1) + k, 4 + i);
}

/* An input's series.csv and series-hist.csv: rows for seconds 0..2 of (steady, read), each
 * second's wall clock start_ms + 1000 k + 3; `skip` (if >= 0) has no histogram line. Input 0
 * also has a row of (steady, list) in each second, with the same run figures (a second's rows
 * all carry them). old: the header and rows of a squall before the run's figures. */
static void write_series(const char *dir, int i, int64_t start_ms, int skip, bool old)
{
    char path[512];
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_FILE);
    FILE *f = fopen(path, "w");
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_HIST_FILE);
    FILE *fh = fopen(path, "w");
    assert_non_null(f);
    assert_non_null(fh);
    fprintf(f, "%s\n",
            old ? "second,phase,class,started,completed,rate_per_s,errors,p50_ms,p90_ms,p99_ms,"
                  "max_ms,planned,unix_ms,p999_ms"
                : RESULTS_SERIES_HEADER);
    fprintf(fh, "%s\n", RESULTS_SERIES_HIST_HEADER);
    for (int k = 0; k < 3; k++) {
        hist_t *h;
        assert_int_equal(hist_new_ns(&h), 0);
        for (int q = 0; q < PER_SECOND; q++)
            hist_record(h, ssamples[i][k][q]);
        long long unix_ms = (long long)(start_ms + 1000 * k + 3);
        char run[128] = "";
        if (!old)
            run_figures(i, k, run, sizeof run);
        fprintf(f, "%d,steady,read,%d,%d,%.1f,1,%.3f,%.3f,%.3f,%.3f,10.000,%lld,%.3f%s\n", k,
                PER_SECOND, PER_SECOND, (double)PER_SECOND, hist_value_at(h, 50) / 1e6,
                hist_value_at(h, 90) / 1e6, hist_value_at(h, 99) / 1e6, hist_max(h) / 1e6, unix_ms,
                hist_value_at(h, 99.9) / 1e6, run);
        if (i == 0)
            fprintf(f, "%d,steady,list,0,0,0.0,0,0,0,0,0,0,%lld,0%s\n", k, unix_ms, run);
        char *text;
        assert_int_equal(hist_encode(h, &text), 0);
        if (k != skip)
            fprintf(fh, "%d,steady,read,%lld,%s\n", k, unix_ms, text);
        free(text);
        hist_free(h);
    }
    fclose(f);
    fclose(fh);
}

typedef struct {
    long long second, completed, errors, unix_ms;
    double rate, p50, p99, planned;
    double run[8]; /* the run's figures, RESULTS_SERIES_RUN_MAP's order (NAN: "nan") */
} srow_t;

/* The merged series.csv's rows (at most cap). */
static size_t read_series(const char *dir, srow_t *rows, size_t cap)
{
    char path[512], line[512];
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_FILE);
    FILE *f = fopen(path, "r");
    assert_non_null(f);
    assert_non_null(fgets(line, sizeof line, f));
    /* A merge names the figures it can only bound with _upper. */
    assert_string_equal(line, "second,phase,class,started,completed,rate_per_s,errors,p50_ms,"
                              "p90_ms,p99_ms,max_ms,planned,unix_ms,p999_ms,marks,run_watch_open,"
                              "run_watch_dropped,run_watch_reconnects,run_watch_events,"
                              "run_watch_propagation_p99_upper_ms,run_queue_wait_max_ms,"
                              "run_in_flight_peak_upper,run_queued_peak_upper,sync_window,sync_n,"
                              "sync_r_bar,sync_p,sync_peak_to_mean\n");
    size_t n = 0;
    char p50[32], p99[32];
    while (n < cap && fgets(line, sizeof line, f)) {
        if (strstr(line, ",steady,list,"))
            continue;
        srow_t *r = &rows[n++];
        const char *run = line;
        for (int c = 0; c < 15 && run; c++)
            run = strchr(run, ',') ? strchr(run, ',') + 1 : NULL;
        assert_non_null(run);
        for (int c = 0; c < 8; c++, run = strchr(run, ',') + 1) {
            r->run[c] = strtod(run, NULL);
            if (c < 7)
                assert_non_null(strchr(run, ','));
        }
        assert_int_equal(sscanf(line,
                                "%lld,steady,read,%*d,%lld,%lf,%lld,%31[^,],%*[^,],%31[^,],%*[^,],"
                                "%lf,%lld",
                                &r->second, &r->completed, &r->rate, &r->errors, p50, p99,
                                &r->planned, &r->unix_ms),
                         8);
        r->p50 = strtod(p50, NULL);
        r->p99 = strtod(p99, NULL);
    }
    fclose(f);
    return n;
}

static void test_series_by_wall_second(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 5);
    for (int i = 0; i < 2; i++)
        for (int k = 0; k < 3; k++)
            for (int q = 0; q < PER_SECOND; q++)
                ssamples[i][k][q] = (int64_t)exp(log(2e6 * (1 + i)) + 0.7 * rng_normal(&g));
    char base[] = "/tmp/squall-series-XXXXXX";
    assert_non_null(mkdtemp(base));
    char a[600], b[600], out[600], none[600];
    snprintf(a, sizeof a, "%s/a", base);
    snprintf(b, sizeof b, "%s/b", base);
    snprintf(out, sizeof out, "%s/m", base);
    snprintf(none, sizeof none, "%s/none", base);
    assert_int_equal(mkdir(a, 0700) | mkdir(b, 0700) | mkdir(out, 0700) | mkdir(none, 0700), 0);
    /* B started 1 s after A: B's second k is A's second k + 1. */
    write_series(a, 0, T0, -1, false);
    write_series(b, 1, T0 + 1000, -1, false);
    results_t *m = input(T0, 1);
    const char *dirs[] = {a, b, none};
    bool written;
    assert_int_equal(results_series_merge(dirs, 2, m, out, &written, NULL), 0);
    assert_true(written);
    srow_t rows[8];
    assert_int_equal(read_series(out, rows, 8), 4);
    for (int s = 0; s < 4; s++) {
        /* Second s holds A's second s (s <= 2) and B's second s - 1 (s >= 1). */
        int64_t pooled[2 * PER_SECOND];
        size_t n = 0;
        for (int i = 0; i < 2; i++) {
            int k = s - i;
            for (int q = 0; k >= 0 && k < 3 && q < PER_SECOND; q++)
                pooled[n++] = ssamples[i][k][q];
        }
        int from = (s >= 1) + (s <= 2);
        assert_int_equal(rows[s].second, s);
        assert_int_equal(rows[s].completed, (long long)n);
        assert_int_equal(rows[s].errors, from);
        assert_true(rows[s].rate == (double)n && rows[s].planned == 10.0 * from);
        assert_int_equal(rows[s].unix_ms, T0 + 1000 * s + 3);
        /* Percentiles as written: three decimals of a millisecond. */
        near(rows[s].p99 + 0.0005, numpy_at(pooled, n, 99) / 1e6);
        near(rows[s].p50 + 0.0005, numpy_at(pooled, n, 50) / 1e6);
        /* The run's figures: each input's taken once (A's list row repeats them), counts added,
         * the largest queue wait and propagation p99 (a "nan" of one input passed over), the
         * peaks added. From the values run_figures wrote: A's second s, B's second s - 1. */
        bool a_in = s <= 2, b_in = s >= 1;
        double want[8] = {2.0 * a_in + 3.0 * b_in,
                          (a_in ? s : 0) + (b_in ? s - 1 : 0),
                          (a_in ? s : 0) + (b_in ? s - 1 : 0),
                          10.0 * a_in + 20.0 * b_in,
                          b_in && s - 1 > 0 ? 10.0 : 5.0,
                          b_in ? 3.0 + (s - 1) : 1.5 + s,
                          3.0 * from,
                          4.0 * a_in + 5.0 * b_in};
        for (int c = 0; c < 8; c++)
            assert_true(fabs(rows[s].run[c] - want[c]) < 1e-9);
    }
    /* A merged second one of whose rows has no histogram gets unknown percentiles (nan). */
    write_series(b, 1, T0 + 1000, 1, false);
    out_t *o = out_new_capture();
    assert_int_equal(results_series_merge(dirs, 2, m, out, &written, o), 0);
    assert_int_equal(read_series(out, rows, 8), 4);
    assert_true(isnan(rows[2].p99) && !isnan(rows[1].p99));
    assert_non_null(strstr(out_captured_diag(o), "1 merged seconds have rows without a "
                                                 "per-second histogram"));
    out_free(o);
    /* An input written before the run's figures: merged seconds it has a row in have them
     * unknown ("nan"); the others keep them. */
    write_series(b, 1, T0 + 1000, -1, true);
    assert_int_equal(results_series_merge(dirs, 2, m, out, &written, NULL), 0);
    assert_int_equal(read_series(out, rows, 8), 4);
    assert_true(rows[0].run[0] == 2.0 && isnan(rows[1].run[0]) && isnan(rows[3].run[4]));
    /* An input without series.csv: no merged series at all, said once. */
    o = out_new_capture();
    assert_int_equal(results_series_merge(dirs, 3, m, out, &written, o), 0);
    assert_false(written);
    assert_non_null(strstr(out_captured_diag(o), "none/series.csv: No such file or directory"));
    out_free(o);
    results_free(m);
    char cmd[700];
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", base);
    assert_int_equal(system(cmd), 0);
}

int main(void)
{
    if (access("/usr/bin/python3", X_OK) != 0 ||
        system("/usr/bin/python3 -c 'import numpy' >/dev/null 2>&1") != 0) {
        fprintf(stderr, "test-results-merge needs /usr/bin/python3 with numpy (tools/setup)\n");
        return 1;
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_generator_by_wall_second),
        cmocka_unit_test(test_phases_and_verdict),
        cmocka_unit_test(test_storm_ticks),
        cmocka_unit_test(test_counts_add),
        cmocka_unit_test(test_series_by_wall_second),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
