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
    assert_string_equal(json_string_value(json_object_get(first, "text")), "p99 of response <= 1s");
    json_decref(s);

    out_t *o = out_new_capture();
    judge_print(j, o);
    /* Columns as wide as their widest cell; the threshold once, as a plan writes it. */
    const char *text = out_captured_results(o);
    assert_non_null(strstr(text, "\nobjectives\n"
                                 "verdict  scope   class  objective              observed\n"
                                 "NO-DATA  run     renew  p99 of response <= 1s         -\n"));
    assert_non_null(strstr(text, "\npass     warm    write  p99 of response <= 1s   2.00 ms\n"));
    assert_non_null(strstr(text, "\nNO-DATA  steady  write  error rate <= 1%              -\n"));
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
        {.cls = {.name = "*"},
         .phase = {.index = -1},
         .limit = PLAN_LIMIT_ERROR_RATE,
         .value = 0.5},
        {.cls = {.name = "follow"},
         .phase = {.index = -1},
         .metric = PLAN_METRIC_PROPAGATION,
         .limit = PLAN_LIMIT_PERCENTILE,
         .percentile = 99,
         .max_ns = 10000000},
        {.cls = {.name = "*"},
         .phase = {.index = -1},
         .limit = PLAN_LIMIT_PERCENTILE,
         .percentile = 50,
         .max_ns = 1000000000},
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

/* The run's own classes (the teardown's deletes) are judged neither by "*" nor by the default
 * error rate when opts lists them, only by an objective naming them; unlisted, they are. */
static void test_internal_classes(void **state)
{
    (void)state;
    results_t *r = fixture();
    results_counters_t *td = results_cell_counters(results_cell(r, "steady", "teardown", "5xx"));
    td->count = 5;
    plan_objective_t ob[2] = {
        {.cls = {.name = "*"},
         .phase = {.index = -1},
         .limit = PLAN_LIMIT_PERCENTILE,
         .percentile = 50,
         .max_ns = 1000000000},
        {.cls = {.name = "teardown"},
         .phase = {.index = -1},
         .limit = PLAN_LIMIT_ERROR_RATE,
         .value = 0.5},
    };
    const char *internal[] = {"teardown"};
    judge_opts_t jo = {
        .default_error_rate = 0.01, .internal_classes = internal, .n_internal_classes = 1};
    judge_t *j;
    assert_int_equal(judge_evaluate(ob, 1, r, phases, 2, &jo, &j), 0);
    for (size_t i = 0; i < judge_check_count(j); i++)
        assert_string_not_equal(judge_check_at(j, i)->cls, "teardown");
    assert_non_null(find(j, 1, "read", "run")); /* the default still judges plan classes */
    judge_free(j);
    /* Named by an objective: judged (5 of 5 failed: 100 % > 50 %). */
    assert_int_equal(judge_evaluate(ob, 2, r, phases, 2, &jo, &j), 0);
    assert_int_equal(find(j, 1, "teardown", "run")->verdict, JUDGE_FAIL);
    assert_null(find(j, 0, "teardown", "run"));
    assert_null(find(j, 2, "teardown", "run"));
    judge_free(j);
    /* Not listed: "*" and the default judge it like a plan class. */
    jo.n_internal_classes = 0;
    assert_int_equal(judge_evaluate(ob, 1, r, phases, 2, &jo, &j), 0);
    assert_non_null(find(j, 0, "teardown", "steady"));
    assert_int_equal(find(j, 1, "teardown", "run")->verdict, JUDGE_FAIL);
    judge_free(j);
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
                        "write in warm: p99.9 of response <= 1s: too few samples to resolve "
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
                               "p50 of response <= 1ms: observed"));
    assert_int_equal(json_array_size(reasons), 2); /* warm and the run */
    judge_free(j);
    json_decref(reasons);
    json_decref(accepted);
    results_free(r);
}

/* The plan's objectives as data: a plan written by hand (the values below are its text) is
 * loaded by plan_load, written as the "judgement" section, parsed by Python's json module
 * (RFC 8259) and read back; the read objectives equal the plan's field by field, write the same
 * section again, and judge the fixture exactly as the plan's own objectives do. */
static const char judged_plan[] =
    "target: {url: \"http://127.0.0.1:9\"}\n"
    "requests:\n"
    "  read: {kind: get, path: /v1/a}\n"
    "  write: {kind: write, method: PUT, path: /v1/b, body: '{}'}\n"
    "  follow: {kind: watch, path: \"/v1/c?watch=1\"}\n"
    "phases:\n"
    "  - {name: warm, rate: 10/s, duration: 1s, mix: {write: 1}}\n"
    "  - {name: steady, rate: 10/s, duration: 2s, mix: {read: 1}, watches: {follow: 1}}\n"
    "objectives:\n"
    "  - {class: read, p99: 10ms}\n"
    "  - {class: read, phase: steady, metric: service, p99.9: 2.5s}\n"
    "  - {class: \"*\", error-rate: 0.5%}\n"
    "  - {class: write, phase: warm, min-rate: 90/s}\n"
    "  - {class: follow, metric: propagation, max: 250us}\n"
    "accept: [few-samples, stopped-early]\n";

static plan_t *load_judged_plan(void)
{
    char path[] = "/tmp/squall-judge-plan-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    assert_int_equal(write(fd, judged_plan, strlen(judged_plan)), (ssize_t)strlen(judged_plan));
    close(fd);
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    int rc = plan_load(path, NULL, 0, &p, o);
    unlink(path);
    if (rc)
        fprintf(stderr, "%s", out_captured_diag(o));
    out_free(o);
    assert_int_equal(rc, 0);
    return p;
}

static void same_objective(const plan_objective_t *a, const plan_objective_t *b)
{
    assert_string_equal(a->cls.name ? a->cls.name : "*", b->cls.name);
    if (a->phase.name)
        assert_string_equal(a->phase.name, b->phase.name);
    else
        assert_null(b->phase.name);
    assert_int_equal(a->metric, b->metric);
    assert_int_equal(a->limit, b->limit);
    assert_true(a->percentile == b->percentile);
    assert_int_equal(a->max_ns, b->max_ns);
    assert_true(a->value == b->value);
}

/* Python's json module reads the section as the plan's text says. */
static void python_reads(const json_t *sec)
{
    char path[] = "/tmp/squall-judgement-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    FILE *f = fdopen(fd, "w");
    assert_int_equal(json_dumpf(sec, f, JSON_REAL_PRECISION(17)), 0);
    fclose(f);
    char cmd[1024];
    snprintf(
        cmd, sizeof cmd,
        "/usr/bin/python3 -c 'import json; d = json.load(open(\"%s\")); o = d[\"objectives\"]; "
        "assert [x[\"class\"] for x in o] == [\"read\", \"read\", \"*\", \"write\", \"follow\"]; "
        "assert (o[0][\"percentile\"], o[0][\"max_ms\"], o[0][\"phase\"]) == (99, 10, None); "
        "assert (o[1][\"percentile\"], o[1][\"max_ms\"], o[1][\"metric\"]) == "
        "(99.9, 2500, \"service\"); "
        "assert (o[2][\"limit\"], o[2][\"value\"]) == (\"error-rate\", 0.005); "
        "assert (o[3][\"limit\"], o[3][\"value\"], o[3][\"phase\"]) == (\"min-rate\", 90, "
        "\"warm\"); "
        "assert (o[4][\"percentile\"], o[4][\"max_ms\"]) == (100, 0.25); "
        "assert d[\"accept\"] == [\"few-samples\", \"stopped-early\"]; "
        "assert d[\"watch_classes\"] == [\"follow\"] and d[\"phases\"] == [\"warm\", "
        "\"steady\"]; assert d[\"default_error_rate\"] == 0.01; "
        "assert d[\"internal_classes\"] == [\"teardown\"]'",
        path);
    int rc = system(cmd);
    unlink(path);
    assert_int_equal(rc, 0);
}

static void test_objectives_round_trip(void **state)
{
    (void)state;
    plan_t *p = load_judged_plan();
    const char *watch[] = {"follow"}, *internal[] = {"teardown"};
    judge_inputs_t in = {.objectives = p->objectives,
                         .n_objectives = p->n_objectives,
                         .accept = p->accept,
                         .opts = {.default_error_rate = 0.01,
                                  .watch_classes = watch,
                                  .n_watch_classes = 1,
                                  .internal_classes = internal,
                                  .n_internal_classes = 1},
                         .phases = phases,
                         .n_phases = 2};
    json_t *sec = judge_inputs_json(&in);
    assert_non_null(sec);
    python_reads(sec);
    judge_inputs_t back;
    char err[200] = "";
    assert_int_equal(judge_inputs_init_json(&back, sec, err, sizeof err), 0);
    assert_int_equal(back.n_objectives, 5);
    for (size_t i = 0; i < 5; i++)
        same_objective(&p->objectives[i], &back.objectives[i]);
    assert_int_equal(back.accept, p->accept);
    assert_true(back.opts.default_error_rate == 0.01);
    assert_int_equal(back.opts.n_watch_classes, 1);
    assert_string_equal(back.opts.watch_classes[0], "follow");
    assert_int_equal(back.opts.n_internal_classes, 1);
    assert_string_equal(back.opts.internal_classes[0], "teardown");
    assert_int_equal(back.n_phases, 2);
    assert_string_equal(back.phases[1].name, "steady");
    json_t *again = judge_inputs_json(&back);
    assert_true(json_equal(sec, again));
    /* Both judge the fixture alike, check by check. */
    results_t *r = fixture();
    judge_t *a, *b;
    assert_int_equal(judge_evaluate(p->objectives, 5, r, phases, 2, &in.opts, &a), 0);
    assert_int_equal(judge_evaluate(back.objectives, 5, r, phases, 2, &back.opts, &b), 0);
    judge_inputs_close(&back);
    assert_true(judge_check_count(a) > 5);
    assert_int_equal(judge_check_count(a), judge_check_count(b));
    for (size_t i = 0; i < judge_check_count(a); i++) {
        const judge_check_t *x = judge_check_at(a, i), *y = judge_check_at(b, i);
        assert_string_equal(x->text, y->text);
        assert_string_equal(x->scope, y->scope);
        assert_string_equal(x->cls, y->cls);
        assert_true(x->observed == y->observed && x->threshold == y->threshold);
        assert_int_equal(x->verdict, y->verdict);
    }
    judge_free(a);
    judge_free(b);
    results_free(r);
    json_decref(again);
    json_decref(sec);
    plan_free(p);
}

/* A malformed section is refused with the key that is wrong. */
static void test_inputs_refused(void **state)
{
    (void)state;
    static const struct {
        const char *json, *says;
    } bad[] = {
        {"{\"objectives\": [{\"class\": \"a\", \"metric\": \"speed\", \"limit\": \"percentile\"}], "
         "\"accept\": [], \"watch_classes\": [], \"phases\": [], \"default_error_rate\": 0.01}",
         "judgement.objectives[0]: unknown metric"},
        {"{\"objectives\": [{\"class\": \"a\", \"metric\": \"response\", \"limit\": "
         "\"percentile\", \"percentile\": 120, \"max_ms\": 1}], \"accept\": [], "
         "\"watch_classes\": [], \"phases\": [], \"default_error_rate\": 0.01}",
         "judgement.objectives[0]: expected percentile (0, 100] and max_ms >= 0"},
        {"{\"objectives\": [], \"accept\": [\"bored\"], \"watch_classes\": [], \"phases\": [], "
         "\"default_error_rate\": 0.01}",
         "judgement.accept[0]: unknown reason"},
        {"{\"objectives\": [], \"accept\": [], \"watch_classes\": [], \"phases\": [3], "
         "\"default_error_rate\": 0.01}",
         "judgement: watch_classes and phases must be lists of names"},
        {"{\"objectives\": [], \"accept\": [], \"watch_classes\": [], \"phases\": [], "
         "\"internal_classes\": [7], \"default_error_rate\": 0.01}",
         "judgement: internal_classes must be a list of names"},
        {"{\"objectives\": [], \"accept\": [], \"watch_classes\": [], \"phases\": [], "
         "\"internal_classes\": [7], \"default_error_rate\": 0.01}",
         "judgement: internal_classes must be a list of names"},
        {"{\"objectives\": [], \"accept\": [], \"watch_classes\": [], \"phases\": []}",
         "judgement.default_error_rate: expected a fraction in [0, 1]"},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        json_t *sec = json_loads(bad[i].json, 0, NULL);
        assert_non_null(sec);
        judge_inputs_t in;
        char err[200] = "";
        assert_int_equal(judge_inputs_init_json(&in, sec, err, sizeof err), SQ_EPARSE);
        assert_string_equal(err, bad[i].says);
        assert_null(in.mem);
        json_decref(sec);
    }
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
        cmocka_unit_test(test_internal_classes),
        cmocka_unit_test(test_outcome),
        cmocka_unit_test(test_objectives_round_trip),
        cmocka_unit_test(test_inputs_refused),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
