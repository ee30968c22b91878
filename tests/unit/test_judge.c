/* Unit tests for objectives (src/judge/): percentiles against numpy sorting the same samples,
 * error rates and achieved rates by plain arithmetic, the scopes (every phase a class ran in,
 * then the run), no-data, "*" and the results.json section. */
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
#include "squall/judge.h"
#include "squall/rng.h"

#define N_READ 5000

static int64_t samples[N_READ];

/* Phase "steady" (2 s): 5,000 reads, log-normal around 3 ms, 60 of them 5xx; phase "warm" (1 s):
 * 100 writes, all 2xx at exactly 2 ms; a "teardown" cell outside the phases. */
static results_t *fixture(void)
{
    results_t *r;
    assert_int_equal(results_new(&r), 0);
    rng_t g;
    rng_seed(&g, 7);
    for (int i = 0; i < N_READ; i++) {
        samples[i] = (int64_t)exp(log(3e6) + 0.6 * rng_normal(&g));
        results_cell_t *c = results_cell(r, "steady", "read", i < 60 ? "5xx" : "2xx");
        results_cell_counters(c)->count++;
        hist_record(results_cell_hist(c, RESULTS_M_RESPONSE), samples[i]);
        hist_record(results_cell_hist(c, RESULTS_M_SERVICE), samples[i] / 2);
    }
    results_cell_t *w = results_cell(r, "warm", "write", "2xx");
    results_cell_counters(w)->count = 100;
    hist_record_n(results_cell_hist(w, RESULTS_M_RESPONSE), 2000000, 100);
    results_cell_counters(results_cell(r, "teardown", "teardown", "2xx"))->count = 5;
    return r;
}

static const judge_phase_t phases[] = {{"warm", 1000000000}, {"steady", 2000000000}};

static plan_objective_t pct(const char *cls, double p, int64_t max_ns)
{
    return (plan_objective_t){.cls = {.name = cls, .index = 0},
                              .phase = {.name = NULL, .index = -1},
                              .metric = PLAN_METRIC_RESPONSE,
                              .limit = PLAN_LIMIT_PERCENTILE,
                              .percentile = p,
                              .max_ns = max_ns};
}

/* numpy (Debian python3-numpy) sorts the same samples; the rank rule is HdrHistogram_c's
 * (src/hdr_histogram.c, hdr_value_at_percentile: count_at_percentile = (int64_t)(p / 100 * n +
 * 0.5), at least 1). */
static double numpy_at(double p)
{
    char path[] = "/tmp/squall-judge-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    for (int i = 0; i < N_READ; i++)
        fprintf(f, "%lld\n", (long long)samples[i]);
    fclose(f);
    char cmd[512];
    snprintf(cmd, sizeof cmd,
             "/usr/bin/python3 -c 'import numpy as np, sys; x = np.sort(np.loadtxt(\"%s\")); "
             "r = max(1, int(%g / 100 * len(x) + 0.5)); print(repr(float(x[r - 1])))'",
             path, p);
    FILE *pp = popen(cmd, "r");
    double v = NAN;
    assert_non_null(pp);
    assert_int_equal(fscanf(pp, "%lf", &v), 1);
    pclose(pp);
    unlink(path);
    return v;
}

static const judge_check_t *find(const judge_t *j, size_t obj, const char *cls, const char *scope)
{
    for (size_t i = 0; i < judge_check_count(j); i++) {
        const judge_check_t *c = judge_check_at(j, i);
        if (c->objective == obj && !strcmp(c->cls, cls) && !strcmp(c->scope, scope))
            return c;
    }
    return NULL;
}

static void test_percentile_against_numpy(void **state)
{
    (void)state;
    results_t *r = fixture();
    plan_objective_t ob[] = {pct("read", 99, 10000000), pct("read", 50, 1000000)};
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 2, r, phases, 2, NULL, &j), 0);
    /* read ran in steady only: checks for steady and the run, none for warm. */
    assert_int_equal(judge_check_count(j), 4);
    assert_null(find(j, 0, "read", "warm"));
    const double ps[] = {99, 50};
    for (size_t k = 0; k < 2; k++) {
        const judge_check_t *c = find(j, k, "read", "steady");
        assert_non_null(c);
        double ref = numpy_at(ps[k]) / 1e6;
        /* Within one HDR bucket of the exact sample (width <= value / 1024 at 3 digits). */
        assert_true(c->observed >= ref - 1e-6 && c->observed <= ref * (1 + 1.0 / 1024) + 1e-6);
        assert_int_equal(c->samples, N_READ);
        assert_string_equal(c->unit, "ms");
    }
    /* Log-normal median 3 ms, sigma 0.6: p99 = 3 * e^(0.6 * 2.326) = 12.1 ms > 10 ms fails;
     * p50 = 3 ms > 1 ms fails too (the threshold is what decides, not the figure's size). The
     * run scope holds the same samples (read ran in steady only), so it fails alike. */
    for (size_t k = 0; k < 2; k++) {
        const judge_check_t *steady = find(j, k, "read", "steady"),
                            *run = find(j, k, "read", "run");
        assert_non_null(steady);
        assert_non_null(run);
        assert_int_equal(steady->verdict, JUDGE_FAIL);
        assert_int_equal(run->verdict, JUDGE_FAIL);
        assert_true(steady->observed > (double)ob[k].max_ns / 1e6);
    }
    assert_true(judge_failed(j));
    judge_free(j);
    /* 12.1 ms is within 20 ms: the same p99 passes in both scopes. */
    plan_objective_t ok = pct("read", 99, 20000000);
    assert_int_equal(judge_evaluate(&ok, 1, r, phases, 2, NULL, &j), 0);
    assert_int_equal(judge_check_count(j), 2);
    assert_int_equal(find(j, 0, "read", "steady")->verdict, JUDGE_PASS);
    assert_int_equal(find(j, 0, "read", "run")->verdict, JUDGE_PASS);
    assert_false(judge_failed(j));
    judge_free(j);
    results_free(r);
}

static void test_error_rate_and_min_rate(void **state)
{
    (void)state;
    results_t *r = fixture();
    plan_objective_t ob[3] = {
        {.cls = {.name = "read"}, .limit = PLAN_LIMIT_ERROR_RATE, .value = 0.01},
        {.cls = {.name = "read"}, .limit = PLAN_LIMIT_ERROR_RATE, .value = 0.015},
        {.cls = {.name = "read"},
         .phase = {.name = "steady"},
         .limit = PLAN_LIMIT_MIN_RATE,
         .value = 2500},
    };
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 3, r, phases, 2, NULL, &j), 0);
    /* 60 errors of 5,000 answers = 1.2 %: above 1 %, below 1.5 %. */
    const judge_check_t *c = find(j, 0, "read", "run");
    assert_non_null(c);
    assert_true(fabs(c->observed - 0.012) < 1e-12);
    assert_int_equal(c->verdict, JUDGE_FAIL);
    assert_int_equal(find(j, 1, "read", "run")->verdict, JUDGE_PASS);
    /* 5,000 answers in a 2 s phase = 2,500/s: exactly the minimum, which holds (>=). A named
     * phase gives one check only, no run scope. */
    c = find(j, 2, "read", "steady");
    assert_non_null(c);
    assert_true(fabs(c->observed - 2500) < 1e-9);
    assert_int_equal(c->verdict, JUDGE_PASS);
    assert_null(find(j, 2, "read", "run"));
    judge_free(j);
    results_free(r);
}

static void test_no_data_and_wildcard(void **state)
{
    (void)state;
    results_t *r = fixture();
    plan_objective_t ob[3] = {
        pct("renew", 99, 1000000000), /* never ran */
        pct("*", 99, 1000000000),
        {.cls = {.name = "write"},
         .phase = {.name = "steady"},
         .limit = PLAN_LIMIT_ERROR_RATE,
         .value = 0.01}, /* write ran in warm only */
    };
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 3, r, phases, 2, NULL, &j), 0);
    assert_int_equal(find(j, 0, "renew", "run")->verdict, JUDGE_NO_DATA);
    /* "*" judges read and write (each in its phase and the run), not the teardown's class. */
    assert_non_null(find(j, 1, "read", "steady"));
    assert_non_null(find(j, 1, "write", "warm"));
    assert_int_equal(find(j, 1, "write", "run")->verdict, JUDGE_PASS);
    assert_true(fabs(find(j, 1, "write", "run")->observed - 2.0) < 2.0 / 1024 + 1e-9);
    assert_null(find(j, 1, "teardown", "run"));
    assert_int_equal(find(j, 2, "write", "steady")->verdict, JUDGE_NO_DATA);
    assert_true(judge_failed(j));

    json_t *s = judge_json(j);
    assert_non_null(s);
    assert_false(json_is_true(json_object_get(s, "passed")));
    assert_int_equal(json_integer_value(json_object_get(s, "objectives")), 3);
    assert_int_equal(json_array_size(json_object_get(s, "checks")), judge_check_count(j));
    json_t *first = json_array_get(json_object_get(s, "checks"), 0);
    assert_string_equal(json_string_value(json_object_get(first, "verdict")), "no-data");
    assert_string_equal(json_string_value(json_object_get(first, "text")),
                        "p99 of response <= 1000 ms");
    json_decref(s);

    out_t *o = out_new_capture();
    judge_print(j, o);
    assert_non_null(strstr(out_captured_results(o), "NO-DATA  run          renew"));
    out_free(o);
    judge_free(j);
    results_free(r);
}

/* A watch class's cells count events and stream endings (a dropped stream is a "reset"); "*"
 * leaves it out, as control-plane latency objectives exclude watches (common practice, from
 * memory of published control-plane objectives; no primary source). An objective naming the
 * watch class still judges it. */
/* A watch class's cells count events (2xx) and stream attempts that failed; its error rate is
 * over stream attempts: the ones that opened (its open-time count) and the failed ones. "*"
 * latency objectives leave it out; "*" error-rate objectives judge it. */
static void test_watches_judged_on_stream_attempts(void **state)
{
    (void)state;
    results_t *r = fixture();
    results_cell_t *ev = results_cell(r, "steady", "follow", "2xx");
    results_cell_counters(ev)->count = 400; /* events, not requests */
    hist_record_n(results_cell_hist(ev, RESULTS_M_OPEN), 3000000, 10);
    hist_record_n(results_cell_hist(ev, RESULTS_M_PROPAGATION), 5000000, 400);
    results_cell_counters(results_cell(r, "steady", "follow", "5xx"))->count = 10;
    plan_objective_t ob[3] = {
        {.cls = {.name = "*"}, .phase = {.index = -1}, .limit = PLAN_LIMIT_ERROR_RATE,
         .value = 0.5},
        {.cls = {.name = "follow"}, .phase = {.index = -1}, .metric = PLAN_METRIC_PROPAGATION,
         .limit = PLAN_LIMIT_PERCENTILE, .percentile = 99, .max_ns = 10000000},
        {.cls = {.name = "*"}, .phase = {.index = -1}, .limit = PLAN_LIMIT_PERCENTILE,
         .percentile = 50, .max_ns = 1000000000},
    };
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 3, r, phases, 2, NULL, &j), 0);
    const judge_check_t *c = find(j, 0, "follow", "run");
    assert_non_null(c);
    assert_int_equal(c->samples, 20); /* 10 opened + 10 refused, not 400 events */
    assert_true(fabs(c->observed - 0.5) < 1e-12);
    assert_int_equal(c->verdict, JUDGE_PASS);
    assert_non_null(find(j, 0, "read", "run"));
    assert_int_equal(find(j, 1, "follow", "run")->verdict, JUDGE_PASS);
    assert_null(find(j, 2, "follow", "run"));
    assert_non_null(find(j, 2, "read", "run"));
    judge_free(j);

    /* A watch class that never opened has no open times: only the plan's kinds say it is one.
     * Every attempt refused is an error rate of 100 %, which the default objective fails. */
    results_t *r2 = fixture();
    results_cell_counters(results_cell(r2, "steady", "gone", "5xx"))->count = 40;
    const char *watches[] = {"gone"};
    judge_opts_t jo = {.default_error_rate = 0.01, .watch_classes = watches, .n_watch_classes = 1};
    assert_int_equal(judge_evaluate(NULL, 0, r2, phases, 2, &jo, &j), 0);
    c = find(j, 0, "gone", "run");
    assert_non_null(c);
    assert_true(c->implicit);
    assert_int_equal(c->samples, 40);
    assert_true(fabs(c->observed - 1.0) < 1e-12);
    assert_int_equal(c->verdict, JUDGE_FAIL);
    judge_free(j);
    results_free(r2);
    results_free(r);
}

/* The run's outcome: FAIL wins over INCONCLUSIVE; INCONCLUSIVE names each reason (squall could
 * not offer the load, a percentile with too few samples, an early stop); a reason the plan
 * accepts moves to `accepted` and no longer stands in the way of a pass. */
static void test_outcome(void **state)
{
    (void)state;
    results_t *r = fixture();
    /* write: exactly 100 samples in warm, enough for a p99, not for a p99.9 (1,000). */
    plan_objective_t ob[3] = {pct("write", 99, 1000000000), pct("write", 99.9, 1000000000),
                              pct("write", 50, 1000000)};
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 2, r, phases, 2, NULL, &j), 0);
    assert_int_equal(find(j, 0, "write", "warm")->verdict, JUDGE_PASS);
    assert_int_equal(find(j, 1, "write", "warm")->verdict, JUDGE_TOO_FEW);
    assert_int_equal(find(j, 1, "write", "warm")->needed, 1000);
    judge_evidence_t ev = {.generator_bound_s = 2,
                           .generator_seconds = "3, 4",
                           .generator_why = "lag",
                           .stopped_early = true,
                           .stop_why = "signal SIGINT"};
    json_t *reasons = json_array(), *accepted = json_array();
    assert_int_equal(judge_outcome(j, &ev, reasons, accepted), JUDGE_OUTCOME_INCONCLUSIVE);
    assert_int_equal(json_array_size(reasons), 4); /* bound, too few in warm and run, stopped */
    assert_int_equal(json_array_size(accepted), 0);
    assert_string_equal(json_string_value(json_array_get(reasons, 0)),
                        "squall could not offer the planned load for 2 s (seconds 3, 4; last: "
                        "lag): the target's figures for those seconds are not evidence");
    assert_string_equal(json_string_value(json_array_get(reasons, 1)),
                        "write in warm: p99.9 of response <= 1000 ms: too few samples to resolve "
                        "it (had 100, needs 1000)");
    assert_string_equal(json_string_value(json_array_get(reasons, 3)),
                        "the run stopped early: signal SIGINT");
    json_array_clear(reasons);

    /* Accepted, each reason is kept apart and the run passes. */
    ev.accept = 1u << PLAN_ACCEPT_GENERATOR_BOUND | 1u << PLAN_ACCEPT_FEW_SAMPLES |
                1u << PLAN_ACCEPT_STOPPED_EARLY;
    assert_int_equal(judge_outcome(j, &ev, reasons, accepted), JUDGE_OUTCOME_PASS);
    assert_int_equal(json_array_size(reasons), 0);
    assert_int_equal(json_array_size(accepted), 4);
    /* Only some accepted: still inconclusive, for the others. */
    json_array_clear(accepted);
    ev.accept = 1u << PLAN_ACCEPT_FEW_SAMPLES;
    assert_int_equal(judge_outcome(j, &ev, reasons, accepted), JUDGE_OUTCOME_INCONCLUSIVE);
    assert_int_equal(json_array_size(reasons), 2);
    assert_int_equal(json_array_size(accepted), 2);
    judge_free(j);

    /* A failed objective wins over every reason for doubt, and is the only reason given. */
    json_array_clear(reasons);
    ev.accept = 0;
    assert_int_equal(judge_evaluate(ob, 3, r, phases, 2, NULL, &j), 0);
    assert_int_equal(judge_outcome(j, &ev, reasons, NULL), JUDGE_OUTCOME_FAIL);
    for (size_t i = 0; i < json_array_size(reasons); i++)
        assert_non_null(strstr(json_string_value(json_array_get(reasons, i)),
                               "p50 of response <= 1 ms: observed"));
    assert_int_equal(json_array_size(reasons), 2); /* warm and the run */
    judge_free(j);
    json_decref(reasons);
    json_decref(accepted);
    results_free(r);
}

int main(void)
{
    if (access("/usr/bin/python3", X_OK) != 0 ||
        system("/usr/bin/python3 -c 'import numpy' >/dev/null 2>&1") != 0) {
        fprintf(stderr, "test-judge needs /usr/bin/python3 with numpy (tools/setup)\n");
        return 1;
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_percentile_against_numpy),
        cmocka_unit_test(test_error_rate_and_min_rate),
        cmocka_unit_test(test_no_data_and_wildcard),
        cmocka_unit_test(test_watches_judged_on_stream_attempts),
        cmocka_unit_test(test_outcome),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
