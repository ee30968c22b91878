/* `squall check PLAN... [--set K=V]...`: validate each plan exactly as `run` does before it sends
 * (run_check) and print what it would do, from the sources' own models (src_estimate), without
 * sending anything. */
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "cli_run.h"
#include "squall/cli.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/judge.h"
#include "squall/plan.h"
#include "squall/run.h"
#include "squall/source.h"
#include "squall/table.h"
#include "squall/value.h"

/* An expected count, rounded to whole requests, without thousands separators (DEVELOPERS.md,
 * "Output"). */
static const char *count_str(double v, char *buf, size_t len)
{
    snprintf(buf, len, "%.0f", v < 0 ? 0 : v);
    return buf;
}

static const char *dur_str(int64_t ns, char *buf, size_t len)
{
    return value_format_duration(ns, buf, len);
}

static void print_target(const plan_t *p, out_t *o)
{
    const plan_target_t *t = &p->target;
    char d[32];
    out_print(o, "target   %s  (HTTP/%s, %d connections, timeout %s%s)\n", t->url,
              t->http == PLAN_HTTP_2 ? "2" : "1.1", t->connections,
              dur_str(t->timeout_ns, d, sizeof d), t->loopback ? ", loopback" : "");
    out_print(o, "classes  %zu:", p->n_reqs);
    for (size_t i = 0; i < p->n_reqs; i++)
        out_print(o, "%s %s (%s)", i ? "," : "", p->reqs[i].name, plan_kind_name(p->reqs[i].kind));
    out_print(o, "\n");
}

/* One fleet action: its class and period, and where its next instant comes from. */
static void print_send(out_t *o, const plan_t *p, const plan_phase_t *ph, const plan_send_t *s)
{
    char d[32], b[32], c[32];
    const char *cls = p->reqs[s->cls.index].name;
    if (s->next == PLAN_NEXT_FIXED) {
        char jit[32] = "";
        if (ph->fleet.timing == PLAN_TIMING_JITTER)
            snprintf(jit, sizeof jit, " \xc2\xb1%.0f%%", s->jitter * 100);
        out_print(o, "      %s every %s%s, next: fixed (on its schedule, whatever the answers)\n",
                  cls, dur_str(s->every_ns, d, sizeof d), jit);
        return;
    }
    out_print(o,
              "      %s every %s, next: after-answer (its answer + the period %s%.0f%%), retry "
              "after a failure: %s from %s capped at %s\n",
              cls, dur_str(s->every_ns, d, sizeof d), "\xc2\xb1", s->jitter * 100,
              plan_backoff_name(s->retry.policy), dur_str(s->retry.base_ns, b, sizeof b),
              dur_str(s->retry.cap_ns, c, sizeof c));
}

static void print_shape(const plan_t *p, const plan_phase_t *ph, const src_estimate_t *e,
                        out_t *o)
{
    const char *arr = ph->arrivals == PLAN_ARRIVALS_POISSON ? "poisson" : "even";
    if (ph->shape == PLAN_LOAD_CONSTANT)
        out_print(o, "    open loop: %g/s, %s arrivals\n", ph->rate, arr);
    else if (ph->shape == PLAN_LOAD_RAMP)
        out_print(o, "    open loop: ramp %g/s -> %g/s, %s arrivals\n", ph->ramp_from, ph->ramp_to,
                  arr);
    else if (ph->shape == PLAN_LOAD_STEPS)
        out_print(o, "    open loop: %zu steps, %s arrivals\n", ph->n_steps, arr);
    if (e->closed_loop && e->bounded)
        out_print(o, "    closed loop: up to %d clients; at most the counts below (think time)\n",
                  e->clients);
    else if (e->closed_loop)
        out_print(o,
                  "    closed loop: up to %d clients, no think time: as fast as the target "
                  "answers (no upper bound)\n",
                  e->clients);
    if (ph->fleet.on) {
        static const char *const timing[] = {"spread", "jitter", "aligned"};
        char d[32], j[32], l[32];
        out_print(o, "    fleet: %d agents every %s, %s%s%s%s%s%s%s\n", ph->fleet.agents,
                  dur_str(ph->fleet.every_ns, d, sizeof d), timing[ph->fleet.timing],
                  ph->fleet.join_ns ? ", joining over " : "",
                  ph->fleet.join_ns ? dur_str(ph->fleet.join_ns, j, sizeof j) : "",
                  ph->fleet.leave_ns ? ", leaving over the last " : "",
                  ph->fleet.leave_ns ? dur_str(ph->fleet.leave_ns, l, sizeof l) : "",
                  ph->fleet.watch.name ? ", each watching with " : "",
                  ph->fleet.watch.name ? ph->fleet.watch.name : "");
        bool after = false;
        for (size_t k = 0; k < ph->fleet.n_send; k++) {
            print_send(o, p, ph, &ph->fleet.send[k]);
            after |= ph->fleet.send[k].next == PLAN_NEXT_AFTER_ANSWER;
        }
        if (after)
            out_print(o, "      (after-answer counts below take every answer as instant: at most "
                         "as many)\n");
    }
    if (ph->churn.on)
        out_print(o, "    churn: %g/s around a population of %d\n", ph->churn.rate,
                  ph->churn.population);
    if (ph->replay.on) {
        char off[32];
        out_print(o, "    replay: %s at x%g, %d cop%s%s%s (counts come from the log)\n",
                  ph->replay.log, ph->replay.speed, ph->replay.copies,
                  ph->replay.copies > 1 ? "ies " : "y",
                  ph->replay.copies > 1 ? dur_str(ph->replay.offset_ns, off, sizeof off) : "",
                  ph->replay.copies > 1 ? " apart" : "");
    }
}

/* The widest name print_counts may print, measured as a table measures it. */
static size_t name_width(const plan_t *p)
{
    static const table_col_t col[] = {{NULL, TABLE_LEFT}};
    static const char *const teardown[] = {"(teardown deletes)"};
    table_t *t = table_new(col, 1);
    for (size_t k = 0; t && k < p->n_reqs; k++)
        table_add(t, &p->reqs[k].name);
    for (size_t i = 0; t && i < p->n_phases; i++)
        if (p->phases[i].teardown.on)
            table_add(t, teardown);
    size_t w = t ? table_width(t, 0) : 0;
    table_free(t);
    return w;
}

/* The expected count per class, the names' column as wide as the longest name. */
static void print_counts(const plan_t *p, const plan_phase_t *ph, const src_estimate_t *e,
                         size_t name_width, out_t *o)
{
    static const table_col_t cols[] = {{NULL, TABLE_LEFT}, {NULL, TABLE_RIGHT}, {NULL, TABLE_LEFT}};
    table_t *t = table_new(cols, 3);
    int rc = t ? 0 : SQ_ENOMEM;
    char a[32];
    for (size_t k = 0; rc == 0 && k < p->n_reqs; k++)
        if (e->per_class[k] > 0) {
            const char *cells[] = {p->reqs[k].name, count_str(e->per_class[k], a, 32),
                                   p->reqs[k].kind == PLAN_WATCH ? "streams" : "requests"};
            rc = table_add(t, cells);
        }
    if (rc == 0 && ph->teardown.on) {
        const char *cells[] = {"(teardown deletes)", count_str(e->deleted, a, 32), "requests"};
        rc = table_add(t, cells);
    }
    if (rc == 0 && ph->teardown.on && e->may_create > 0) {
        const char *cells[] = {"(teardown deletes)", count_str(e->may_create, a, 32),
                               "more at most: the objects other writes create (201)"};
        rc = table_add(t, cells);
    }
    if (rc == 0) {
        table_min_width(t, 0, name_width); /* every phase's names in one column */
        table_set_indent(t, 4);
        table_print(t, o);
    } else {
        out_print(o, "    (out of memory while laying out the counts)\n");
    }
    table_free(t);
}

static void print_phase(const plan_t *p, size_t i, const src_estimate_t *est, size_t name_width,
                        sched_shard_t sh, out_t *o)
{
    const plan_phase_t *ph = &p->phases[i];
    src_estimate_t e = est[i];
    char d[32], a[32], b[32], c[32];
    out_print(o, "\nphase %zu/%zu %s: %s\n", i + 1, p->n_phases, ph->name,
              e.open_ended ? "until done" : dur_str(e.duration_ns, d, sizeof d));
    print_shape(p, ph, &e, o);
    if (src_fleet_per_agent(p, ph, sh))
        out_print(o, "    connections: one per agent, up to %d, kept open across ticks\n",
                  src_phase_connections(p, i, sh));
    print_counts(p, ph, &e, name_width, o);
    out_print(o, "    total %s requests, peak %s/s", count_str(e.requests, a, 32),
              count_str(e.peak_rate, b, 32));
    if (e.burst > 0)
        out_print(o, ", bursts of %s at once", count_str(e.burst, c, 32));
    if (e.watches || e.agents)
        out_print(o, ", %d watches, %d agents", e.watches, e.agents);
    out_print(o, "\n    objects: %s created, %s deleted, %s alive after\n",
              count_str(e.created, a, 32), count_str(e.deleted, b, 32),
              count_str(e.alive_after, c, 32));
    if (!ph->teardown.on && e.may_create > 0)
        out_print(o,
                  "    and up to %s more created if other writes are answered 201 Created "
                  "(journaled and torn down too)\n",
                  count_str(e.may_create, a, 32));
}

/* One line per objective and brake, as the run will judge them. */
/* Requests of class cls the plan expects in phase `phase` (-1: every phase but a teardown). */
static double expected_of(const plan_t *p, const src_estimate_t *est, int cls, int phase)
{
    double n = 0;
    for (size_t i = 0; i < p->n_phases; i++)
        if (phase < 0 ? !p->phases[i].teardown.on : (int)i == phase)
            n += est[i].per_class[cls];
    return n;
}

/* A percentile the plan's own counts cannot resolve makes the run INCONCLUSIVE: said per scope
 * the run judges it in (each phase the class runs in, and the run). A list's count is of whole
 * lists; each has one page or more, and each page is a sample, so for lists it "may be". */
static void warn_few(const plan_t *p, const src_estimate_t *est, const plan_objective_t *ob,
                     out_t *o)
{
    int64_t needed = judge_samples_needed(ob->percentile);
    bool list = p->reqs[ob->cls.index].kind == PLAN_LIST;
    char a[32];
    for (int i = -1; i < (int)p->n_phases; i++) {
        if (ob->phase.index >= 0
                ? i != ob->phase.index
                : i >= 0 && (p->phases[i].teardown.on || est[i].per_class[ob->cls.index] <= 0))
            continue;
        double n = expected_of(p, est, ob->cls.index, i);
        if (n >= (double)needed)
            continue;
        out_print(o,
                  "warning    %s%s: about %s %s expected, and a p%g needs %lld samples: the run "
                  "%s INCONCLUSIVE (exit 7) unless the plan says accept: [few-samples]\n",
                  i < 0 ? "the run" : "phase ", i < 0 ? "" : p->phases[i].name, count_str(n, a, 32),
                  list ? "lists (pages count)" : "requests", ob->percentile, (long long)needed,
                  list ? "may be" : "would be");
    }
}

/* A max-sync objective on a fleet whose agents cannot fill a window with the sends it needs:
 * each agent sends once per period, so a window has at most `agents` sends. */
static void warn_sync_few(const plan_t *p, const plan_objective_t *ob, out_t *o)
{
    int64_t needed = judge_sync_min_sends(ob->value);
    for (size_t i = 0; i < p->n_phases; i++) {
        const plan_phase_t *ph = &p->phases[i];
        for (size_t k = 0; ph->fleet.on && k < ph->fleet.n_send; k++)
            if ((ob->phase.index < 0 || (size_t)ob->phase.index == i) &&
                (ob->cls.index < 0 || ph->fleet.send[k].cls.index == ob->cls.index) &&
                ph->fleet.agents < needed)
                out_print(o,
                          "warning    phase %s: %d agents send %s at most %d times a window, and "
                          "max-sync %g needs %lld: the run would be INCONCLUSIVE (exit 7) unless "
                          "the plan says accept: [few-samples]\n",
                          ph->name, ph->fleet.agents, p->reqs[ph->fleet.send[k].cls.index].name,
                          ph->fleet.agents, ob->value, (long long)needed);
    }
}

static void print_judges(const plan_t *p, const src_estimate_t *est, out_t *o)
{
    static const char *const metric[] = {"response", "service", "open", "propagation"};
    char d[32];
    bool all_errors = false;
    for (size_t i = 0; i < p->n_objectives; i++) {
        const plan_objective_t *ob = &p->objectives[i];
        out_print(o, "objective  %s: ", ob->cls.index < 0 ? "every class" : ob->cls.name);
        if (ob->limit == PLAN_LIMIT_PERCENTILE)
            out_print(o, "p%g %s time <= %s", ob->percentile, metric[ob->metric],
                      dur_str(ob->max_ns, d, sizeof d));
        else if (ob->limit == PLAN_LIMIT_ERROR_RATE)
            out_print(o, "error rate <= %g%%", ob->value * 100);
        else if (ob->limit == PLAN_LIMIT_MAX_SYNC)
            out_print(o, "sync R-bar <= %g in every whole window of %lld sends or more", ob->value,
                      (long long)judge_sync_min_sends(ob->value));
        else
            out_print(o, "rate >= %g/s", ob->value);
        out_print(o, "%s%s\n", ob->phase.index >= 0 ? " in phase " : "",
                  ob->phase.index >= 0 ? ob->phase.name : "");
        all_errors |= ob->limit == PLAN_LIMIT_ERROR_RATE && ob->cls.index < 0;
        if (ob->limit == PLAN_LIMIT_PERCENTILE && ob->cls.index >= 0 &&
            ob->metric <= PLAN_METRIC_SERVICE && !(p->accept & 1u << PLAN_ACCEPT_FEW_SAMPLES))
            warn_few(p, est, ob, o);
        if (ob->limit == PLAN_LIMIT_MAX_SYNC && !(p->accept & 1u << PLAN_ACCEPT_FEW_SAMPLES))
            warn_sync_few(p, ob, o);
    }
    if (!all_errors)
        out_print(o,
                  "objective  every class no objective above covers: error rate <= %g%% "
                  "(default)\n",
                  JUDGE_DEFAULT_ERROR_RATE * 100);
    for (size_t i = 0; p->accept && plan_accept_names[i]; i++)
        if (p->accept & 1u << i)
            out_print(o, "accept     %s: not a reason against a pass\n", plan_accept_names[i]);
    for (size_t i = 0; i < p->n_brakes; i++) {
        const plan_brake_t *b = &p->brakes[i];
        const char *who = b->cls.index < 0 ? "any class" : b->cls.name;
        char w[32];
        dur_str(b->for_ns, w, sizeof w);
        if (b->kind == PLAN_BRAKE_ERROR_RATE)
            out_print(o, "brake      stop if %s has error rate > %g%% for %s\n", who,
                      b->value * 100, w);
        else if (b->kind == PLAN_BRAKE_PERCENTILE)
            out_print(o, "brake      stop if %s has p%g response time > %s for %s\n", who,
                      b->percentile, dur_str(b->max_ns, d, sizeof d), w);
        else if (b->kind == PLAN_BRAKE_UNREACHABLE)
            out_print(o, "brake      stop if the target is unreachable for %s\n",
                      dur_str(b->max_ns, d, sizeof d));
        else
            out_print(o, "brake      stop if the generator cannot keep its schedule\n");
    }
}

static void print_summary(const plan_t *p, const src_estimate_t *est, sched_shard_t sh, out_t *o)
{
    print_target(p, o);
    double total = 0, peak = 0;
    int64_t dur = 0;
    for (size_t i = 0; i < p->n_phases; i++) {
        print_phase(p, i, est, name_width(p), sh, o);
        src_estimate_t e = est[i];
        total += e.requests;
        peak = e.peak_rate > peak ? e.peak_rate : peak;
        dur += e.duration_ns;
    }
    char a[32], b[32], d[32];
    out_print(o,
              "\nplan: %zu phases, at least %s, %s requests expected, peak %s/s; %zu "
              "objectives, %zu brakes\n",
              p->n_phases, dur_str(dur, d, sizeof d), count_str(total, a, 32),
              count_str(peak, b, 32), p->n_objectives, p->n_brakes);
    print_judges(p, est, o);
    if (!p->target.loopback)
        out_print(o,
                  "caution: %s is not loopback; `squall run` will refuse it without "
                  "--confirm-target. Make sure its owners know.\n",
                  p->target.host);
    for (size_t i = 0; i < p->n_phases; i++)
        for (size_t k = 0; k < p->phases[i].n_actions; k++)
            if (p->phases[i].actions[k].exec)
                out_print(o,
                          "caution: action '%s' of phase %s runs %s on this machine; `squall "
                          "run` will refuse it without --allow-exec.\n",
                          p->phases[i].actions[k].name, p->phases[i].name,
                          p->phases[i].actions[k].argv[0]);
}

/* ---- --json: the same figures as data ------------------------------------------------- */

#define CHECK_JSON_FORMAT  "squall-check"
#define CHECK_JSON_VERSION 1

static json_t *target_json(const plan_t *p)
{
    const plan_target_t *t = &p->target;
    json_t *classes = json_array();
    for (size_t i = 0; i < p->n_reqs; i++)
        json_array_append_new(classes, json_pack("{s:s, s:s}", "name", p->reqs[i].name, "kind",
                                                 plan_kind_name(p->reqs[i].kind)));
    return json_pack("{s:s, s:s, s:i, s:f, s:b, s:o}", "url", t->url, "http",
                     t->http == PLAN_HTTP_2 ? "2" : "1.1", "connections", t->connections,
                     "timeout_s", t->timeout_ns / 1e9, "loopback", t->loopback, "classes", classes);
}

static json_t *shape_json(const plan_phase_t *ph)
{
    static const char *const shape[] = {"none", "constant", "ramp", "steps"};
    json_t *j = json_pack("{s:s, s:s}", "shape", shape[ph->shape], "arrivals",
                          ph->arrivals == PLAN_ARRIVALS_POISSON ? "poisson" : "even");
    if (ph->shape == PLAN_LOAD_CONSTANT)
        json_object_set_new(j, "rate", json_real(ph->rate));
    else if (ph->shape == PLAN_LOAD_RAMP)
        json_object_set_new(j, "ramp",
                            json_pack("{s:f, s:f}", "from", ph->ramp_from, "to", ph->ramp_to));
    else if (ph->shape == PLAN_LOAD_STEPS)
        json_object_set_new(j, "steps", json_integer((json_int_t)ph->n_steps));
    return j;
}

/* One phase: its shape and every expected figure of src_estimate. */
/* A fleet action as planned: every period, its next instant and retry policy. */
static json_t *send_json(const plan_t *p, const plan_phase_t *ph, const plan_send_t *s)
{
    bool after = s->next == PLAN_NEXT_AFTER_ANSWER;
    json_t *j = json_pack("{s:s, s:f, s:s}", "class", p->reqs[s->cls.index].name, "every_s",
                          s->every_ns / 1e9, "next", plan_next_name(s->next));
    if (j && (after || ph->fleet.timing == PLAN_TIMING_JITTER))
        json_object_set_new(j, "jitter", json_real(s->jitter));
    if (j && after) {
        json_object_set_new(j, "retry",
                            json_pack("{s:s, s:f, s:f}", "policy",
                                      plan_backoff_name(s->retry.policy), "base_s",
                                      s->retry.base_ns / 1e9, "cap_s", s->retry.cap_ns / 1e9));
    }
    return j;
}

static json_t *phase_json(const plan_t *p, size_t i, const src_estimate_t *e, sched_shard_t sh)
{
    const plan_phase_t *ph = &p->phases[i];
    json_t *per = json_object();
    for (size_t k = 0; k < p->n_reqs; k++)
        if (e->per_class[k] > 0)
            json_object_set_new(per, p->reqs[k].name, json_real(e->per_class[k]));
    json_t *j = json_pack(
        "{s:s, s:o, s:o, s:o, s:f, s:f, s:f, s:b, s:b, s:i, s:i, s:i, s:f, s:f, s:f, s:f, s:b}",
        "name", ph->name, "duration_s",
        e->open_ended ? json_null() : json_real(e->duration_ns / 1e9), "load", shape_json(ph),
        "expected", per, "requests", e->requests, "peak_rate", e->peak_rate, "burst", e->burst,
        "closed_loop", e->closed_loop, "upper_bound", e->closed_loop && e->bounded, "clients",
        e->clients, "watches", e->watches, "agents", e->agents, "created", e->created, "deleted",
        e->deleted, "alive_after", e->alive_after, "may_create", e->may_create, "teardown",
        ph->teardown.on);
    if (ph->fleet.on) {
        json_t *acts = json_array();
        for (size_t k = 0; acts && k < ph->fleet.n_send; k++)
            json_array_append_new(acts, send_json(p, ph, &ph->fleet.send[k]));
        json_object_set_new(j, "fleet",
                            json_pack("{s:i, s:f, s:s, s:o*}", "agents", ph->fleet.agents,
                                      "every_s", ph->fleet.every_ns / 1e9, "connections",
                                      src_fleet_per_agent(p, ph, sh) ? "per-agent" : "shared",
                                      "actions", acts));
    }
    if (ph->churn.on)
        json_object_set_new(
            j, "churn",
            json_pack("{s:f, s:i}", "rate", ph->churn.rate, "population", ph->churn.population));
    if (ph->replay.on)
        json_object_set_new(
            j, "replay", json_pack("{s:s, s:f}", "log", ph->replay.log, "speed", ph->replay.speed));
    return j;
}

/* An objective as the run will judge it; a percentile of one class carries the samples the
 * plan expects per scope (each phase it runs in, and the run) and how many the judge needs. */
static json_t *objective_json(const plan_t *p, const src_estimate_t *est,
                              const plan_objective_t *ob)
{
    static const char *const metric[] = {"response", "service", "open", "propagation"};
    static const char *const limit[] = {"percentile", "error-rate", "min-rate", "max-sync"};
    json_t *j = json_pack("{s:o, s:o, s:s}", "class",
                          ob->cls.index < 0 ? json_null() : json_string(ob->cls.name), "phase",
                          ob->phase.index < 0 ? json_null() : json_string(ob->phase.name), "limit",
                          limit[ob->limit]);
    if (ob->limit == PLAN_LIMIT_PERCENTILE) {
        json_object_set_new(j, "percentile", json_real(ob->percentile));
        json_object_set_new(j, "metric", json_string(metric[ob->metric]));
        json_object_set_new(j, "max_s", json_real(ob->max_ns / 1e9));
    } else {
        json_object_set_new(j, "value", json_real(ob->value));
    }
    if (ob->limit != PLAN_LIMIT_PERCENTILE || ob->cls.index < 0)
        return j;
    json_t *scopes = json_array();
    for (int i = -1; i < (int)p->n_phases; i++) {
        if (ob->phase.index >= 0
                ? i != ob->phase.index
                : i >= 0 && (p->phases[i].teardown.on || est[i].per_class[ob->cls.index] <= 0))
            continue;
        json_array_append_new(scopes,
                              json_pack("{s:o, s:f}", "phase",
                                        i < 0 ? json_null() : json_string(p->phases[i].name),
                                        "expected", expected_of(p, est, ob->cls.index, i)));
    }
    json_object_set_new(j, "samples_needed",
                        json_integer((json_int_t)judge_samples_needed(ob->percentile)));
    json_object_set_new(j, "expected_samples", scopes);
    return j;
}

static json_t *brake_json(const plan_brake_t *b)
{
    static const char *const kind[] = {"error-rate", "percentile", "unreachable", "saturation"};
    json_t *j = json_pack("{s:s, s:o, s:f}", "kind", kind[b->kind], "class",
                          b->cls.index < 0 ? json_null() : json_string(b->cls.name), "for_s",
                          b->for_ns / 1e9);
    if (b->kind == PLAN_BRAKE_ERROR_RATE)
        json_object_set_new(j, "value", json_real(b->value));
    else if (b->kind == PLAN_BRAKE_PERCENTILE)
        json_object_set_new(j, "percentile", json_real(b->percentile));
    if (b->kind == PLAN_BRAKE_PERCENTILE || b->kind == PLAN_BRAKE_UNREACHABLE)
        json_object_set_new(j, "max_s", json_real(b->max_ns / 1e9));
    return j;
}

/* The plan as understood, with every expected figure: what the text summary says, as data. */
/* Which share of the plan the figures are: {"index", "count"} (1 of 1 without --shard). */
static json_t *shard_json(sched_shard_t sh)
{
    bool split = sched_shard_split(sh);
    return json_pack("{s:i, s:i}", "index", split ? sh.index : 1, "count", split ? sh.count : 1);
}

static json_t *check_json(const char *path, const plan_t *p, const src_estimate_t *est,
                          sched_shard_t sh)
{
    json_t *phases = json_array(), *objectives = json_array(), *brakes = json_array(),
           *accept = json_array();
    double total = 0, peak = 0;
    int64_t dur = 0;
    for (size_t i = 0; i < p->n_phases; i++) {
        json_array_append_new(phases, phase_json(p, i, &est[i], sh));
        total += est[i].requests;
        peak = est[i].peak_rate > peak ? est[i].peak_rate : peak;
        dur += est[i].duration_ns;
    }
    bool all_errors = false;
    for (size_t i = 0; i < p->n_objectives; i++) {
        json_array_append_new(objectives, objective_json(p, est, &p->objectives[i]));
        all_errors |=
            p->objectives[i].limit == PLAN_LIMIT_ERROR_RATE && p->objectives[i].cls.index < 0;
    }
    for (size_t i = 0; i < p->n_brakes; i++)
        json_array_append_new(brakes, brake_json(&p->brakes[i]));
    for (size_t i = 0; p->accept && plan_accept_names[i]; i++)
        if (p->accept & 1u << i)
            json_array_append_new(accept, json_string(plan_accept_names[i]));
    return json_pack("{s:s, s:i, s:s, s:b, s:o, s:o, s:o, s:{s:f, s:f, s:f}, s:o, s:o, s:o, s:o}",
                     "format", CHECK_JSON_FORMAT, "version", CHECK_JSON_VERSION, "plan", path,
                     "valid", 1, "shard", shard_json(sh), "target", target_json(p), "phases", phases, "total", "duration_s",
                     dur / 1e9, "requests", total, "peak_rate", peak, "objectives", objectives,
                     "default_error_rate",
                     all_errors ? json_null() : json_real(JUDGE_DEFAULT_ERROR_RATE), "brakes",
                     brakes, "accept", accept);
}

/* What `run` checks before it sends (the target's safety aside: check warns about that), then
 * the estimates, as text or JSON. The plan is freed. */
static int validate_and_print(const char *path, plan_t *p, bool as_json, sched_shard_t sh,
                              out_t *o)
{
    run_opts_t ro = {.confirm_target = true,
                     .allow_exec = true,
                     .shard_index = sh.index,
                     .shard_count = sh.count};
    src_estimate_t *est = calloc(p->n_phases ? p->n_phases : 1, sizeof(*est));
    int rc = est ? run_check(p, &ro, o) : SQ_ENOMEM;
    if (rc == 0)
        rc = src_estimate_shard(p, run_seed(p, &ro), run_shard(&ro), clock_real_ns(), o, est);
    json_t *j = rc == 0 && as_json ? check_json(path, p, est, sh) : NULL;
    char *text = j ? json_dumps(j, JSON_INDENT(2)) : NULL;
    if (rc == 0 && as_json && !text)
        rc = SQ_ENOMEM;
    else if (text)
        out_print(o, "%s\n", text);
    if (rc == 0 && !as_json) {
        out_print(o, "plan     %s: valid\n", path);
        if (sched_shard_split(sh))
            out_print(o, "shard    %d of %d: the figures below are this shard's share\n", sh.index,
                      sh.count);
        print_summary(p, est, sh, o);
    }
    free(text);
    json_decref(j);
    free(est);
    plan_free(p);
    return rc;
}

static const cli_opt_t check_opts[] = {
    {"set", 0, "KEY=VALUE", "override a plan value, e.g. phases.steady.rate=100/s (repeatable)"},
    {"json", 0, NULL, "print the plan as understood, with every expected figure, as JSON"},
    {"shard", 0, "I/N", "print shard I of N's share of the figures (what `run --shard I/N` sends)"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    const char **paths; /* the plans, in order */
    size_t n_paths;
    plan_override_t *sets;
    char **copies; /* KEY=VALUE copies split at '=' */
    size_t n;
    bool json;
    sched_shard_t shard;
} check_args_t;

/* One word of argv into *ca (cli_take_fn): the plan, or a --set. */
static int take_word(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    check_args_t *ca = ctx;
    (void)cmd;
    (void)o;
    if (k == CLI_POSITIONAL) {
        ca->paths[ca->n_paths++] = v;
        return -1;
    }
    if (k == 1) {
        ca->json = true;
        return -1;
    }
    if (k == 2) {
        const char *why;
        if (cli_shard_parse(v, &ca->shard.index, &ca->shard.count, &why))
            return cli_usage_error(cmd, o, "--shard %s: %s", v, why);
        return -1;
    }
    if (plan_override_split(v, &ca->sets[ca->n], &ca->copies[ca->n]))
        return cli_usage_error(cmd, o, "--set needs KEY=VALUE, got '%s'", v);
    ca->n++;
    return -1;
}

/* Reads argv into *ca. Returns -1 to go on, else the exit code (help shown or usage error). */
static int read_args(const cli_cmd_t *cmd, int argc, char **argv, out_t *o, check_args_t *ca)
{
    ca->sets = calloc((size_t)argc + 1, sizeof(*ca->sets));
    ca->copies = calloc((size_t)argc + 1, sizeof(*ca->copies));
    ca->paths = calloc((size_t)argc + 1, sizeof(*ca->paths));
    if (!ca->sets || !ca->copies || !ca->paths)
        return SQ_EXIT_FAILURE;
    int rc = cli_parse(cmd, argc, argv, o, take_word, ca);
    if (rc < 0 && !ca->n_paths)
        return cli_usage_error(cmd, o, "which plan? (expected PLAN.yaml)");
    return rc;
}

/* One error line as data: "FILE:LINE:COL: error: MESSAGE", "FILE: error: MESSAGE" or
 * "squall: error: MESSAGE" (the forms plan errors and out_error take); NULL for other lines. */
static json_t *error_json(const char *line, size_t len)
{
    static const char mark[] = ": error: ";
    char buf[2048];
    snprintf(buf, sizeof buf, "%.*s", (int)len, line);
    char *m = strstr(buf, mark);
    if (!m)
        return NULL;
    *m = '\0';
    const char *msg = m + strlen(mark);
    long ln = -1, col = -1;
    char *c2 = strrchr(buf, ':'), *c1 = NULL;
    if (c2) {
        *c2 = '\0';
        c1 = strrchr(buf, ':');
        *c2 = ':';
    }
    char *end1, *end2;
    if (c1 && c2 && (ln = strtol(c1 + 1, &end1, 10)) > 0 && end1 == c2 &&
        (col = strtol(c2 + 1, &end2, 10)) > 0 && *end2 == '\0')
        *c1 = '\0';
    else
        ln = col = -1;
    bool squall = strcmp(buf, "squall") == 0;
    return json_pack("{s:o, s:o, s:o, s:s}", "file", squall ? json_null() : json_string(buf),
                     "line", ln > 0 ? json_integer(ln) : json_null(), "column",
                     col > 0 ? json_integer(col) : json_null(), "message", msg);
}

/* --json for a plan that is not valid: the document says so, with every error as data (the
 * same lines go to stderr as text). */
static void invalid_json(const char *path, sched_shard_t sh, const char *diag, out_t *o)
{
    json_t *errs = json_array();
    while (errs && *diag) {
        const char *nl = strchr(diag, '\n');
        size_t len = nl ? (size_t)(nl - diag) : strlen(diag);
        json_t *e = error_json(diag, len);
        if (e)
            json_array_append_new(errs, e);
        diag += len + (nl != NULL);
    }
    json_t *j = json_pack("{s:s, s:i, s:s, s:b, s:o, s:o}", "format", CHECK_JSON_FORMAT, "version",
                          CHECK_JSON_VERSION, "plan", path, "valid", 0, "shard", shard_json(sh),
                          "errors", errs);
    char *text = j ? json_dumps(j, JSON_INDENT(2)) : NULL;
    if (text)
        out_print(o, "%s\n", text);
    free(text);
    json_decref(j);
}

/* One plan: its exit code (OK, USAGE for a plan error, FAILURE when out of memory). With --json
 * the check talks into a capture, so that an invalid plan still prints one document on stdout
 * (its errors as data); the captured lines then go to stderr as they would have. */
static int check_one(const check_args_t *ca, const char *path, out_t *o)
{
    out_t *cap = ca->json ? out_new_capture() : NULL;
    if (ca->json && !cap)
        return SQ_EXIT_FAILURE;
    out_t *to = cap ? cap : o;
    if (cap)
        out_set_level(cap, out_level(o));
    plan_t *p;
    int err = plan_load(path, ca->sets, ca->n, &p, to);
    if (err == 0)
        err = validate_and_print(path, p, ca->json, ca->shard, to);
    if (cap) {
        out_print(o, "%s", out_captured_results(cap));
        if (err && err != SQ_ENOMEM)
            invalid_json(path, ca->shard, out_captured_diag(cap), o);
        cli_lines_to_diag(out_captured_diag(cap), OUT_WARN, o);
        out_free(cap);
    }
    return err == 0 ? SQ_EXIT_OK : err == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
}

/* Every plan in turn; the exit code is the worst of theirs (FAILURE, then USAGE, then OK). With
 * several plans, each invalid one is named once more after its errors, and --json prints one
 * document per plan, one after another. */
static int check_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    check_args_t ca = {0};
    int rc = read_args(cmd, argc, argv, o, &ca);
    if (rc < 0) {
        rc = SQ_EXIT_OK;
        size_t bad = 0;
        for (size_t i = 0; i < ca.n_paths; i++) {
            if (i > 0 && !ca.json)
                out_print(o, "\n");
            int one = check_one(&ca, ca.paths[i], o);
            if (one != SQ_EXIT_OK && ca.n_paths > 1)
                out_raw(o, OUT_ERROR, "%s: not valid (the errors above)", ca.paths[i]);
            bad += one != SQ_EXIT_OK;
            rc = one > rc ? one : rc;
        }
        if (ca.n_paths > 1)
            out_info(o, "checked %zu plans: %zu valid, %zu not", ca.n_paths, ca.n_paths - bad, bad);
    }
    for (size_t i = 0; ca.copies && i < ca.n; i++)
        free(ca.copies[i]);
    free(ca.copies);
    free(ca.sets);
    free(ca.paths);
    return rc;
}

const cli_cmd_t cli_cmd_check = {
    .name = "check",
    .summary = "validate plans and print what each would send, without sending anything",
    .usage = "PLAN.yaml... [--set KEY=VALUE]... [--json] [--shard I/N]",
    .description = "Reads each plan (and its includes) and validates it exactly as `run` does\n"
                   "before sending (templates, sources, token, open files), reports every\n"
                   "problem as FILE:LINE:COL: error: ... sorted by position (a --set's as\n"
                   "--set #N KEY=VALUE: error: ..., N its order among the --set options), and\n"
                   "exits 2 if there is any. With several plans (`squall check scenarios/*.yaml`)\n"
                   "each is checked in turn with the same --set options, and the exit code is\n"
                   "the worst of theirs.\n"
                   "Otherwise prints, per phase, the expected requests per class (the same model\n"
                   "the run plans with), peak rate, watches, agents and objects created and\n"
                   "deleted. With --json the same figures are printed as one JSON document per\n"
                   "plan (format \"squall-check\", version 1; several follow one another, as jq\n"
                   "reads them) instead of the text. With --shard I/N the figures are shard I's\n"
                   "share (they add up over the N shards).",
    .opts = check_opts,
    .main = check_main,
};
