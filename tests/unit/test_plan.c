/* Unit tests for the plan: every broken plan in tests/data/plans against its exact expected
 * diagnostics, and the sources' estimates of good plans checked against arithmetic done in the
 * test from the plans' numbers. (The value parsers the plan reads through are tested in
 * test_util.c.) */
#include <glob.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/plan.h"
#include "squall/source.h"

#define PLANS SRCDIR "/tests/data/plans"

/* cmocka 1.1.5 has no assert_double_equal; this one names both values when it fails. */
#define assert_double_equal(a, b, tol) assert_near((a), (b), (tol), #a, __LINE__)

static void assert_near(double a, double b, double tol, const char *what, int line)
{
    if (!(a - b <= tol && b - a <= tol))
        fail_msg("line %d: %s = %.17g, expected %.17g (within %g)", line, what, a, b, tol);
}

/* Reads a whole file into a malloc'd string. */
static char *slurp(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        fail_msg("cannot read %s", path);
    fseek(fp, 0, SEEK_END);
    long len = ftell(fp);
    fseek(fp, 0, SEEK_SET);
    char *s = calloc(1, (size_t)len + 1);
    assert_non_null(s);
    assert_int_equal(fread(s, 1, (size_t)len, fp), (size_t)len);
    fclose(fp);
    return s;
}

/* Replaces every "@DIR@" in text with dir. */
static char *expand_dir(const char *text, const char *dir)
{
    size_t cap = strlen(text) * 2 + strlen(dir) * 64 + 1, o = 0;
    char *out = calloc(1, cap);
    assert_non_null(out);
    for (const char *s = text; *s;) {
        if (strncmp(s, "@DIR@", 5) == 0) {
            o += (size_t)snprintf(out + o, cap - o, "%s", dir);
            s += 5;
        } else {
            out[o++] = *s++;
        }
    }
    return out;
}

/* Loads PLANS/NAME.yaml, expects failure, and compares the whole diagnostic text with
 * PLANS/NAME.expected (one line per error, "@DIR@" standing for the plans directory). Each line
 * is written from the plan's mistake in the loader's documented format (DEVELOPERS.md, "plan"):
 * the 1-based line and column of the offending node (libyaml's 0-based marks + 1). The
 * integration test check-plan checks every position against the YAML source with another parser
 * (tests/integration/plan_positions.py, PyYAML). */
static void check_bad(const char *name, int want_errors)
{
    char path[512], exp_path[512];
    snprintf(path, sizeof path, "%s/%s.yaml", PLANS, name);
    snprintf(exp_path, sizeof exp_path, "%s/%s.expected", PLANS, name);
    out_t *o = out_new_capture();
    plan_t *p = (plan_t *)1;
    int rc = plan_load(path, NULL, 0, &p, o);
    char *raw = slurp(exp_path), *want = expand_dir(raw, PLANS);
    const char *got = out_captured_diag(o);
    if (strcmp(got, want) != 0)
        fail_msg("%s: diagnostics differ\n--- expected\n%s--- got\n%s", name, want, got);
    assert_int_equal(rc, SQ_EPARSE);
    assert_null(p);
    assert_int_equal(out_errors(o), want_errors);
    free(raw);
    free(want);
    out_free(o);
}

/* Every bad-*.yaml in the plans directory, each against its .expected: one error counted per
 * line. A plan without its .expected fails (slurp names it). */
static void test_bad_plans(void **state)
{
    (void)state;
    glob_t g;
    assert_int_equal(glob(PLANS "/bad-*.yaml", 0, NULL, &g), 0);
    assert_true(g.gl_pathc >= 16);
    for (size_t i = 0; i < g.gl_pathc; i++) {
        char name[256], exp_path[512];
        const char *base = strrchr(g.gl_pathv[i], '/') + 1;
        snprintf(name, sizeof name, "%.*s", (int)(strlen(base) - strlen(".yaml")), base);
        snprintf(exp_path, sizeof exp_path, "%s/%s.expected", PLANS, name);
        char *want = slurp(exp_path);
        int lines = 0;
        for (const char *c = want; *c; c++)
            lines += *c == '\n';
        free(want);
        assert_true(lines > 0);
        check_bad(name, lines);
    }
    printf("bad plans: %zu, each with its .expected\n", g.gl_pathc);
    globfree(&g);
}

/* bad-many.yaml holds nine unrelated mistakes across target, requests and four phases: all
 * nine lines must come out of one load, in file order, then the cross-reference pass. */
static void test_all_errors_in_one_pass(void **state)
{
    (void)state;
    check_bad("bad-many", 9);
}

static plan_t *load_ok(const char *path, const plan_override_t *ov, size_t n)
{
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    int rc = plan_load(path, ov, n, &p, o);
    if (rc != 0)
        fail_msg("%s: %s\n%s", path, sq_strerror(rc), out_captured_diag(o));
    assert_string_equal(out_captured_diag(o), "");
    out_free(o);
    return p;
}

/* Phase i's estimate, from the sources' models (src_estimate) as `check` prints it: seed 1,
 * and a wall clock of 0 at the run's start, so aligned ticks fall on t = 0, P, 2P, ... */
static void estimate(const plan_t *p, size_t i, src_estimate_t *e)
{
    src_estimate_t all[16];
    assert_true(p->n_phases <= 16);
    out_t *o = out_new_capture();
    assert_int_equal(src_estimate(p, 1, 0, o, all), 0);
    out_free(o);
    *e = all[i];
}

static double per_class(const plan_t *p, const src_estimate_t *e, const char *cls)
{
    int i = plan_find_req(p, cls);
    assert_true(i >= 0);
    return e->per_class[i];
}

/* scenarios/demo.yaml; the expected figures are computed below from the plan's numbers:
 *  fill:   ramp 10/s -> 50/s over 5 s = (10 + 50) / 2 * 5 = 150 register-gateway (150 alive).
 *  steady: 100/s * 10 s = 1000, mix 70:5:25 -> read 700, list 50, renew 250.
 *  rush:   200 aligned agents every 2 s for 6 s = 200 * 6 / 2 = 600 renew-agent, in bursts of
 *          200 at once.
 *  teardown: one delete per gateway still alive = 150, at 500/s: 150 / 500 = 0.3 s; 0 alive. */
static void test_demo_estimates(void **state)
{
    (void)state;
    plan_t *p = load_ok(SRCDIR "/scenarios/demo.yaml", NULL, 0);
    assert_true(p->target.loopback);
    assert_int_equal(p->n_phases, 4);
    const double fill = (10.0 + 50.0) / 2 * 5, steady = 100.0 * 10, mix = 70 + 5 + 25;
    const double agents = 200, ticks = 6.0 / 2, teardown_rate = 500;
    src_estimate_t e;
    estimate(p, 0, &e);
    assert_double_equal(per_class(p, &e, "register-gateway"), fill, 1e-9);
    assert_double_equal(e.created, fill, 1e-9);
    assert_double_equal(e.peak_rate, 50, 1e-9);
    estimate(p, 1, &e);
    assert_double_equal(per_class(p, &e, "read-gateway"), steady * 65 / mix, 1e-9);
    assert_double_equal(per_class(p, &e, "list-gateways"), steady * 10 / mix, 1e-9);
    assert_double_equal(per_class(p, &e, "renew"), steady * 25 / mix, 1e-9);
    assert_double_equal(e.requests, steady, 1e-9);
    assert_double_equal(e.alive_after, fill, 1e-9);
    estimate(p, 2, &e);
    assert_double_equal(per_class(p, &e, "renew-agent"), agents * ticks, 1e-9);
    assert_double_equal(e.burst, agents, 1e-9);
    assert_int_equal(e.agents, (int)agents);
    assert_double_equal(e.alive_after, fill, 1e-9);
    estimate(p, 3, &e);
    assert_double_equal(e.deleted, fill, 1e-9);
    assert_double_equal(e.requests, fill, 1e-9);
    assert_false(e.open_ended);
    assert_int_equal(e.duration_ns, (int64_t)(fill / teardown_rate * 1e9));
    assert_double_equal(e.peak_rate, teardown_rate, 1e-9);
    assert_double_equal(e.alive_after, 0, 1e-9);
    plan_free(p);
}

/* tests/data/plans/good-fleet-life.yaml, by hand: 10 agents join over 4 s and leave over the
 * last 6 s of 20 s, so each is present 20 - 4/2 - 6/2 = 15 s on average: 10 x 15 / 2 = 75 renews
 * expected; each agent's own watch is a set of 10 streams, opened as the agents join (spread
 * 4 s). The estimate is the seeded fleet's own count: a spread agent present L seconds sends
 * floor(L/2) or one more, by its random phase, so each agent adds at most 1/4 of variance and
 * ten of them stay within 3 standard deviations, sqrt(10 / 4) * 3 < 5, of 75. */
static void test_fleet_leave_and_watch(void **state)
{
    (void)state;
    plan_t *p = load_ok(SRCDIR "/tests/data/plans/good-fleet-life.yaml", NULL, 0);
    const plan_phase_t *ph = &p->phases[0];
    assert_true(ph->fleet.leave_ns == 6000000000);
    assert_int_equal(ph->watches.n_sets, 1);
    assert_int_equal(ph->watches.sets[0].count, 10);
    assert_int_equal(ph->watches.sets[0].cls.index, plan_find_req(p, "follow-own"));
    assert_true(ph->watches.spread_ns == 4000000000);
    src_estimate_t e;
    estimate(p, 0, &e);
    assert_double_equal(per_class(p, &e, "renew"), 10 * (20 - 4.0 / 2 - 6.0 / 2) / 2, 5);
    assert_int_equal(e.watches, 10);
    plan_free(p);
}

/* scenarios/fleet-storm.yaml, computed below from the plan's numbers:
 *  spread: 2000 agents joining evenly over 20 s of 60 s are present 60 - 20/2 = 50 s on
 *          average: 100,000 agent-seconds; renew every 10 s -> 10,000 expected; post-status
 *          every 30 s -> 3,333.33; peak 2000/10 + 2000/30 = 266.67/s. The estimate counts the
 *          seeded fleet's own instants: each agent sends floor(L/P) or one more by its random
 *          phase (variance at most 1/4), so 2000 agents stay within 3 sqrt(2000 / 4) < 70 of
 *          the expectation.
 *  aligned: 2000 * 60 / 10 = 12,000 renews, bursts of 2,000 at each tick.
 *  reconnect-storm: jitter timing starts every agent at its join time (here t = 0), then each
 *          period is 10 s +- 10 %: renews at 0, ~10 and ~20 s always fall in the 30 s phase;
 *          the 4th falls at 30 s plus the sum of three symmetric jitters, so half the agents
 *          send it: 2000 * 3.5 = 7,000 (counting only whole periods, 2000 * 30 / 10 = 6,000,
 *          was 14 % low); 200 watches. */
static void test_fleet_estimates(void **state)
{
    (void)state;
    plan_t *p = load_ok(SRCDIR "/scenarios/fleet-storm.yaml", NULL, 0);
    src_estimate_t e;
    const double agents = 2000, agent_s = agents * (60 - 20.0 / 2); /* agent-seconds */
    estimate(p, 0, &e);
    assert_double_equal(per_class(p, &e, "renew"), agent_s / 10, 70);
    assert_double_equal(per_class(p, &e, "post-status"), agent_s / 30, 70);
    assert_double_equal(e.peak_rate, agents / 10 + agents / 30, 1e-6);
    assert_int_equal(e.agents, (int)agents);
    assert_int_equal(e.watches, 40);
    estimate(p, 1, &e);
    assert_double_equal(per_class(p, &e, "renew"), agents * 60 / 10, 1e-6);
    assert_double_equal(e.burst, agents, 1e-9);
    estimate(p, 2, &e);
    assert_double_equal(per_class(p, &e, "renew"), agents * 3.5, 1e-6);
    assert_int_equal(e.watches, 200);
    assert_int_equal(p->reqs[plan_find_req(p, "follow-site-eager")].watch.policy,
                     PLAN_BACKOFF_IMMEDIATE);
    plan_free(p);
}

/* tests/data/plans/good-shapes.yaml (includes part-base.yaml), computed below:
 *  ramp:   10/s -> 400/s over 60 s = (10 + 400) / 2 * 60 = 12,300 reads.
 *  steps:  10/s for 10 s, then 50/s for the remaining 30 s (the last step holds) =
 *          100 + 1500 = 1,600; mix read 3 : create 1 -> 1,200 reads, 400 creates.
 *  closed: 4 clients thinking at least 500 ms over 10 s: at most 4 * 10 / 0.5 = 80 reads.
 *  churn:  400 alive, population 500, 10/s * 30 s = 300 operations: 100 creates to reach 500,
 *          the other 200 split evenly -> 200 creates, 100 deletes, 500 alive.
 *  teardown deletes the 500 left. */
/* tests/data/plans/good-fleet-after.yaml: the fleet's next, jitter and retry are its send
 * items' defaults, each overridden per item (retry key by key); a fixed item keeps the fleet's
 * retry unused; and an after-answer fleet's estimate is its fixed count (answers taken as
 * instant): 100 agents x 60 s / 10 s for the first and third, / 2 s for the second. */
static void test_fleet_after_answer(void **state)
{
    (void)state;
    plan_t *p = load_ok(SRCDIR "/tests/data/plans/good-fleet-after.yaml", NULL, 0);
    const plan_phase_t *ph = &p->phases[0];
    assert_int_equal(ph->fleet.n_send, 3);
    assert_int_equal(ph->fleet.next, PLAN_NEXT_AFTER_ANSWER);
    const plan_send_t *s = ph->fleet.send;
    assert_true(s[0].next == PLAN_NEXT_AFTER_ANSWER && s[0].jitter == 0.04 &&
                s[0].retry.policy == PLAN_BACKOFF_DECORRELATED &&
                s[0].retry.base_ns == 500000000 && s[0].retry.cap_ns == PLAN_RETRY_CAP_NS);
    assert_true(s[1].next == PLAN_NEXT_AFTER_ANSWER && s[1].jitter == 0 &&
                s[1].every_ns == 2000000000 && s[1].retry.policy == PLAN_BACKOFF_FIXED &&
                s[1].retry.base_ns == 500000000 && s[1].retry.cap_ns == 9000000000);
    assert_true(s[2].next == PLAN_NEXT_FIXED);
    assert_string_equal(plan_next_name(s[0].next), "after-answer");
    src_estimate_t e;
    estimate(p, 0, &e);
    double renew = per_class(p, &e, "renew"), status = per_class(p, &e, "status");
    printf("after-answer estimate: renew %.1f (600 + 3000), status %.1f (600)\n", renew, status);
    assert_near(status, 600, 1e-9, "status", __LINE__);
    assert_near(renew, 3600, 0.02 * 3600, "renew (jitter 4 %: an expectation)", __LINE__);
    plan_free(p);
}

static void test_shapes_and_include(void **state)
{
    (void)state;
    plan_t *p = load_ok(PLANS "/good-shapes.yaml", NULL, 0);
    assert_string_equal(p->target.host, "::1");
    assert_true(p->target.loopback);
    assert_int_equal(p->target.connections, 4);               /* from the included file */
    assert_true(p->target.timeout_ns == INT64_C(3000000000)); /* overridden by the includer */
    assert_true(p->reqs[plan_find_req(p, "read")].timeout_ns == INT64_C(2000000000));
    assert_true(p->reqs[plan_find_req(p, "create")].timeout_ns == INT64_C(3000000000));
    const double steps = 10.0 * 10 + 50.0 * (40 - 10), created = steps * 1 / 4;
    const double churn_ops = 10.0 * 30, to_fill = 500 - created;
    src_estimate_t e;
    estimate(p, 0, &e);
    assert_double_equal(per_class(p, &e, "read"), (10.0 + 400.0) / 2 * 60, 1e-9);
    estimate(p, 1, &e);
    assert_double_equal(per_class(p, &e, "read"), steps * 3 / 4, 1e-9);
    assert_double_equal(per_class(p, &e, "create"), created, 1e-9);
    assert_double_equal(e.peak_rate, 50, 1e-9);
    estimate(p, 2, &e);
    assert_true(e.closed_loop && e.bounded);
    assert_double_equal(per_class(p, &e, "read"), 4 * 10 / 0.5, 1e-9);
    estimate(p, 3, &e);
    assert_double_equal(per_class(p, &e, "create"), to_fill + (churn_ops - to_fill) / 2, 1e-9);
    assert_double_equal(per_class(p, &e, "delete"), (churn_ops - to_fill) / 2, 1e-9);
    assert_double_equal(e.alive_after, 500, 1e-9);
    estimate(p, 4, &e);
    assert_double_equal(e.deleted, 500, 1e-9);
    assert_true(e.open_ended);
    plan_free(p);
}

/* --set: a phase addressed by name, a key the file does not set, and a bad value reported
 * with the override as its location. The added `rate` lands after the file's `ramp` (5:18),
 * so the file's key is the second shape and carries that error. Ramp 10/s -> 400/s over 2 m =
 * 205 * 120 = 24,600. */
static void test_overrides(void **state)
{
    (void)state;
    const plan_override_t ov[] = {{"phases.ramp.duration", "2m"}, {"target.http", "2"}};
    plan_t *p = load_ok(PLANS "/good-shapes.yaml", ov, 2);
    src_estimate_t e;
    estimate(p, 0, &e);
    assert_double_equal(per_class(p, &e, "read"), (10.0 + 400.0) / 2 * 120, 1e-9);
    assert_int_equal(p->target.http, PLAN_HTTP_2);
    plan_free(p);

    /* requests.read lives in the included part-base.yaml: the override goes there. target is
     * in both files: the includer gets the new key, and it wins over part-base's 4. */
    const plan_override_t inc[] = {{"requests.read.timeout", "7s"}, {"target.connections", "9"}};
    p = load_ok(PLANS "/good-shapes.yaml", inc, 2);
    assert_true(p->reqs[plan_find_req(p, "read")].timeout_ns == INT64_C(7000000000));
    assert_int_equal(p->target.connections, 9);
    plan_free(p);

    const plan_override_t bad[] = {{"phases.nope.rate", "1/s"}, {"phases.0.rate", "fast"}};
    out_t *o = out_new_capture();
    assert_int_equal(plan_load(PLANS "/good-shapes.yaml", bad, 2, &p, o), SQ_EPARSE);
    /* Sorted by position: the file's errors by line and column, then each --set by its order,
     * named by it; a list item that is not there is answered with the list's names. */
    assert_string_equal(out_captured_diag(o),
                        PLANS "/good-shapes.yaml:5:18: error: phases.ramp: one load shape per "
                              "phase (expected one of rate, ramp, steps, got rate and ramp)\n"
                              "--set #1 phases.nope.rate=1/s: error: no list item 'nope' "
                              "(expected a name or index of an item in the top plan file: ramp, "
                              "steps, closed, churn, teardown)\n"
                              "--set #2 phases.0.rate=fast: error: phases.ramp.rate: malformed "
                              "value (expected a rate like 500/s, 30/m or 2/h, got 'fast')\n");
    out_free(o);
}

/* Paths are joined with the plan's directory; the URL's trailing slash is dropped and
 * "localhost" counts as loopback. A closed loop without think time has no upper bound, so
 * its estimate counts nothing; a replay phase's counts come from its log (read by its source). */
static void test_paths_and_open_counts(void **state)
{
    (void)state;
    plan_t *p = load_ok(PLANS "/good-paths.yaml", NULL, 0);
    const plan_target_t *t = &p->target;
    assert_string_equal(t->url, "https://localhost:8443/api");
    assert_true(t->https && t->loopback && t->port == 8443);
    assert_string_equal(t->tls.ca, PLANS "/certs/ca.pem");
    assert_string_equal(t->token.file, PLANS "/secrets/token");
    assert_int_equal(t->n_headers, 1);
    assert_string_equal(t->headers[0].value, "harbor");
    const plan_phase_t *busy = &p->phases[0], *yest = &p->phases[1];
    assert_true(busy->watches.spread_ns == INT64_C(10000000000));
    assert_string_equal(yest->replay.log, PLANS "/logs/access.log");
    assert_double_equal(yest->replay.speed, 2, 0);
    assert_int_equal(p->reqs[1].watch.framing, PLAN_FRAME_SSE);
    assert_true(p->reqs[1].timeout_ns == 0); /* watches have no timeout unless given */
    assert_double_equal(p->objectives[0].percentile, 99.9, 1e-12);
    assert_true(p->objectives[0].max_ns == 500000000);
    assert_int_equal(p->objectives[1].cls.index, -1);
    assert_int_equal(p->objectives[1].phase.index, 0);
    assert_double_equal(p->objectives[1].value, 0.5, 1e-12); /* 30/m = 0.5/s */
    src_estimate_t e;
    estimate(p, 0, &e);
    assert_true(e.closed_loop && !e.bounded);
    assert_double_equal(e.requests, 0, 0);
    assert_int_equal(e.watches, 20);
    estimate(p, 1, &e);
    assert_true(e.replay && e.open_ended);
    /* logs/access.log: the Apache docs' example line and two more (a list, a HEAD). */
    assert_double_equal(e.requests, 3, 1e-9);
    assert_double_equal(per_class(p, &e, "replay-list"), 1, 1e-9);
    /* At speed 2 the first second's two requests start at 0 and 0.25 s, the third at 1 s. */
    assert_double_equal(e.peak_rate, 2, 1e-9);
    plan_free(p);
}

/* Which hosts count as loopback: 127.0.0.0/8 (RFC 1122 section 3.2.1.3), ::1 (RFC 4291 section
 * 2.5.3) and the name localhost (RFC 6761 section 6.3). Everything else needs
 * --confirm-target, including an IPv4-mapped ::ffff:127.0.0.1 (conservatively). */
static void test_loopback_urls(void **state)
{
    (void)state;
    static const struct {
        const char *url;
        bool loopback;
        int port;
    } cases[] = {
        {"http://127.0.0.1:7070", true, 7070},
        {"http://127.9.8.7", true, 80},
        {"https://[::1]/base/", true, 443},
        {"http://localhost:1", true, 1},
        {"http://10.0.0.1:7070", false, 7070},
        {"http://[::ffff:127.0.0.1]:1", false, 1},
        {"https://staging.example:8443", false, 8443},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        plan_override_t ov = {"target.url", cases[i].url};
        plan_t *p = load_ok(PLANS "/good-shapes.yaml", &ov, 1);
        if (p->target.loopback != cases[i].loopback || p->target.port != cases[i].port)
            fail_msg("%s: loopback %d port %d", cases[i].url, p->target.loopback, p->target.port);
        plan_free(p);
    }
}

static void test_missing_file(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    plan_t *p;
    assert_int_equal(plan_load(PLANS "/no-such-plan.yaml", NULL, 0, &p, o), SQ_EIO);
    assert_string_equal(out_captured_diag(o),
                        PLANS "/no-such-plan.yaml: error: cannot read plan (expected a readable "
                              "file, got No such file or directory)\n");
    out_free(o);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_bad_plans),
        cmocka_unit_test(test_all_errors_in_one_pass),
        cmocka_unit_test(test_demo_estimates),
        cmocka_unit_test(test_fleet_leave_and_watch),
        cmocka_unit_test(test_fleet_estimates),
        cmocka_unit_test(test_fleet_after_answer),
        cmocka_unit_test(test_shapes_and_include),
        cmocka_unit_test(test_overrides),
        cmocka_unit_test(test_paths_and_open_counts),
        cmocka_unit_test(test_loopback_urls),
        cmocka_unit_test(test_missing_file),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
