/* The run's end on the terminal: per phase and class, counts, errors and latency (requests and
 * watches in two tables whose name columns line up), the run's totals, whether squall could
 * offer the load, the objects kept on purpose, the objectives, and the verdict with its
 * reasons. It reads only the results, the plan and the observers' totals: the conductor hands
 * it the phases as they ran and the verdict. */
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"
#include "squall/judge.h"
#include "squall/table.h"

/* What the summary reads: the list's plan, results and output, and the conductor's account. */
typedef struct {
    const plan_t *plan;
    const results_t *res;
    out_t *o;
    obs_t *obs;
    const obs_summary_t *in;
} sum_t;

static bool outcome_is_ok(const char *oc)
{
    return strcmp(oc, "2xx") == 0 || strcmp(oc, "3xx") == 0;
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

/* Sums every outcome of (phase, class) into h and the counters; false when nothing ran. */
static bool gather(const sum_t *r, const char *phase, const char *cls, hist_t *h, hist_t *svc,
                   int64_t *count, int64_t *errors, int64_t *cancelled)
{
    *count = *errors = *cancelled = 0;
    hist_reset(h);
    hist_reset(svc);
    for (size_t i = 0; i < results_cell_count(r->res); i++) {
        results_cell_t *c = results_cell_at(r->res, i);
        if (strcmp(results_cell_phase(c), phase) || strcmp(results_cell_class(c), cls))
            continue;
        const char *oc = results_cell_outcome(c);
        int64_t n = results_cell_counters(c)->count;
        if (strcmp(oc, "cancelled") == 0) {
            *cancelled += n;
            continue;
        }
        *count += n;
        if (!outcome_is_ok(oc))
            *errors += n;
        const hist_t *rh = results_cell_hist_find(c, RESULTS_M_RESPONSE);
        const hist_t *sh = results_cell_hist_find(c, RESULTS_M_SERVICE);
        if (rh)
            hist_merge(h, rh);
        if (sh)
            hist_merge(svc, sh);
    }
    return *count > 0 || *cancelled > 0;
}

#define REQ_COLS 10

/* "12.40" (ms, two decimals), or "-" when h holds nothing. */
static const char *ms_text(const hist_t *h, double pct, char *buf, size_t cap)
{
    if (!h || hist_count(h) == 0)
        snprintf(buf, cap, "-");
    else
        snprintf(buf, cap, "%.2f", ms(pct >= 100 ? hist_max(h) : hist_value_at(h, pct)));
    return buf;
}

/* A request class's row; requests per second are over the time the phase actually ran. */
static int row(sum_t *r, table_t *t, const judge_phase_t *ph, const char *cls, hist_t *h,
               hist_t *svc)
{
    int64_t count, errors, cancelled;
    if (!gather(r, ph->name, cls, h, svc, &count, &errors, &cancelled))
        return 0;
    double secs = (double)ph->elapsed_ns / 1e9;
    char n[24], rate[24], err[24], p50[24], p90[24], p99[24], max[24], s99[24];
    snprintf(n, sizeof n, "%lld", (long long)count);
    snprintf(rate, sizeof rate, "%.1f", secs > 0 ? (double)count / secs : 0.0);
    snprintf(err, sizeof err, "%lld", (long long)errors);
    const char *cells[REQ_COLS] = {ph->name,
                                   cls,
                                   n,
                                   rate,
                                   err,
                                   ms_text(h, 50, p50, sizeof p50),
                                   ms_text(h, 90, p90, sizeof p90),
                                   ms_text(h, 99, p99, sizeof p99),
                                   ms_text(h, 100, max, sizeof max),
                                   ms_text(svc, 99, s99, sizeof s99)};
    int rc = table_add(t, cells);
    if (rc == 0 && cancelled) {
        char note[64];
        snprintf(note, sizeof note, "%lld cancelled when the run stopped", (long long)cancelled);
        rc = table_note(t, 2, note);
    }
    return rc;
}

#define WATCH_COLS 12

/* A figure of the phase's "watches" section for cls, as text ("-" when absent). */
static const char *watch_figure(const json_t *figs, const char *key, char *buf, size_t cap)
{
    const json_t *v = json_object_get(figs, key);
    if (json_is_integer(v))
        snprintf(buf, cap, "%lld", (long long)json_integer_value(v));
    else
        snprintf(buf, cap, "-");
    return buf;
}

/* A watch class counts streams and events, not requests: its own row, from the phase's
 * "watches" section (streams, drops, reconnects, relists) and its events cell (open and
 * propagation times). */
static int watch_row(sum_t *r, table_t *t, const judge_phase_t *ph, const char *cls)
{
    const json_t *figs = json_object_get(
        json_object_get(json_object_get(results_section(r->res, "watches"), ph->name), "classes"),
        cls);
    results_cell_t *c = results_cell_find(r->res, ph->name, cls, "2xx");
    if (!c && !figs)
        return 0;
    const hist_t *open = c ? results_cell_hist_find(c, RESULTS_M_OPEN) : NULL;
    const hist_t *prop = c ? results_cell_hist_find(c, RESULTS_M_PROPAGATION) : NULL;
    char st[24], ev[24], dr[24], rc_[24], rl[24], o50[24], o99[24], p50[24], p99[24], pmax[24];
    if (c && !json_object_get(figs, "events"))
        snprintf(ev, sizeof ev, "%lld", (long long)results_cell_counters(c)->count);
    else
        watch_figure(figs, "events", ev, sizeof ev);
    const char *cells[WATCH_COLS] = {ph->name,
                                     cls,
                                     watch_figure(figs, "streams", st, sizeof st),
                                     ev,
                                     watch_figure(figs, "drops", dr, sizeof dr),
                                     watch_figure(figs, "reconnects", rc_, sizeof rc_),
                                     watch_figure(figs, "relists", rl, sizeof rl),
                                     ms_text(open, 50, o50, sizeof o50),
                                     ms_text(open, 99, o99, sizeof o99),
                                     ms_text(prop, 50, p50, sizeof p50),
                                     ms_text(prop, 99, p99, sizeof p99),
                                     ms_text(prop, 100, pmax, sizeof pmax)};
    return table_add(t, cells);
}

static int phase_rows(sum_t *r, const judge_phase_t *ph, table_t *req, table_t *watch, hist_t *h,
                      hist_t *svc)
{
    int rc = 0;
    for (size_t c = 0; rc == 0 && c < r->plan->n_reqs; c++) {
        const plan_req_t *pr = &r->plan->reqs[c];
        if (pr->kind == PLAN_WATCH) {
            rc = watch_row(r, watch, ph, pr->name);
            continue;
        }
        rc = row(r, req, ph, pr->name, h, svc);
        /* A paginated list's whole-list twin has cells only when the class paginated. */
        char whole[300];
        if (rc == 0 && pr->kind == PLAN_LIST)
            rc = row(r, req, ph, obs_whole_name(pr->name, whole, sizeof whole), h, svc);
    }
    if (rc == 0)
        rc = row(r, req, ph, "teardown", h, svc);
    return rc;
}

/* The closed-loop phases: their response times count from each client's next intended start. */
static void closed_lines(sum_t *r)
{
    for (size_t p = 0; p < r->plan->n_phases; p++) {
        const plan_phase_t *pp = &r->plan->phases[p];
        if (pp->clients.on)
            out_print(r->o,
                      "phase %s is a closed loop: %d clients, think %.0f ms (response time is "
                      "from each client's next intended start)\n",
                      pp->name, pp->clients.count, ms(pp->clients.think_ns));
    }
}

/* The request table, then the watch table (when the plan has watches), all columns as wide as
 * their longest phase or class name. */
static int tables(sum_t *r, const judge_phase_t *ph, hist_t *h, hist_t *svc)
{
    static const table_col_t req_cols[REQ_COLS] = {
        {"phase", TABLE_LEFT},   {"class", TABLE_LEFT},   {"requests", TABLE_RIGHT},
        {"per s", TABLE_RIGHT},  {"errors", TABLE_RIGHT}, {"p50", TABLE_RIGHT},
        {"p90", TABLE_RIGHT},    {"p99", TABLE_RIGHT},    {"max", TABLE_RIGHT},
        {"svc p99", TABLE_RIGHT}};
    static const table_col_t watch_cols[WATCH_COLS] = {
        {"phase", TABLE_LEFT},     {"class", TABLE_LEFT},     {"streams", TABLE_RIGHT},
        {"events", TABLE_RIGHT},   {"drops", TABLE_RIGHT},    {"reconnects", TABLE_RIGHT},
        {"relists", TABLE_RIGHT},  {"open p50", TABLE_RIGHT}, {"open p99", TABLE_RIGHT},
        {"prop p50", TABLE_RIGHT}, {"prop p99", TABLE_RIGHT}, {"prop max", TABLE_RIGHT}};
    table_t *req = table_new(req_cols, REQ_COLS), *watch = table_new(watch_cols, WATCH_COLS);
    int rc = req && watch ? 0 : SQ_ENOMEM;
    for (size_t p = 0; rc == 0 && p < r->plan->n_phases; p++)
        rc = phase_rows(r, &ph[p], req, watch, h, svc);
    if (rc == 0) {
        /* The two tables share their phase and class columns' widths, so they line up. */
        for (size_t c = 0; c < 2; c++) {
            size_t w = table_width(req, c) > table_width(watch, c) ? table_width(req, c)
                                                                   : table_width(watch, c);
            table_min_width(req, c, w);
            table_min_width(watch, c, w);
        }
        out_print(r->o, "\nrequests: response time from each request's intended start (ms)\n");
        table_print(req, r->o);
        if (table_rows(watch)) {
            out_print(r->o, "\nwatches: open and propagation times (ms)\n");
            table_print(watch, r->o);
        }
        closed_lines(r);
    }
    table_free(req);
    table_free(watch);
    return rc;
}

/* Could squall offer the planned load: the seconds it could not, by kind. */
static void bound_lines(sum_t *r, const obs_totals_t *t)
{
    if (t->generator_bound_s)
        out_print(r->o,
                  "GENERATOR-BOUND for %lld s (seconds %s; last: %s): squall could not offer the "
                  "planned load, so the target's figures for those seconds are not evidence\n",
                  (long long)t->generator_bound_s, t->generator_seconds, t->generator_why);
    if (t->connection_bound_s)
        out_print(r->o,
                  "CONNECTION-BOUND for %lld s (seconds %s; last: %s): every connection was busy "
                  "because the target answered slowly; response times from the intended starts "
                  "are a verdict on the target\n",
                  (long long)t->connection_bound_s, t->connection_seconds, t->connection_why);
}

/* The objects classes with `keep` left on the target on purpose, and why. */
static void kept_lines(sum_t *r)
{
    ledger_t *g = obs_ledger(r->obs);
    for (size_t c = 0; g && c < r->plan->n_reqs; c++) {
        size_t n = ledger_kept(g, (int)c);
        if (n == 0)
            continue;
        const char *why = r->plan->reqs[c].write.keep_why;
        out_print(r->o,
                  "kept %zu objects of class %s on the target%s%s (`squall cleanup %s` "
                  "deletes them)\n",
                  n, r->plan->reqs[c].name, why ? ": " : " (the plan keeps them)", why ? why : "",
                  r->in->dir);
    }
}

/* The verdict, and why when it is not a plain pass. */
static void verdict_lines(sum_t *r)
{
    out_print(r->o, "\nverdict: %s\n", r->in->verdict);
    size_t i;
    const json_t *why;
    json_array_foreach(r->in->reasons, i, why) out_print(r->o, "  %s\n", json_string_value(why));
    json_array_foreach(r->in->accepted, i, why)
        out_print(r->o, "  accepted by the plan: %s\n", json_string_value(why));
}

void obs_summary(obs_t *l, const obs_summary_t *in)
{
    const obs_cfg_t *cfg = obs_cfg(l);
    sum_t sum = {.plan = cfg->plan, .res = cfg->res, .o = cfg->o, .obs = l, .in = in}, *r = &sum;
    hist_t *h = NULL, *svc = NULL;
    if (hist_new_ns(&h) || hist_new_ns(&svc)) {
        hist_free(h);
        return;
    }
    size_t n = r->plan->n_phases;
    judge_phase_t *ph = calloc(n ? n : 1, sizeof(*ph));
    for (size_t i = 0; ph && i < n; i++)
        ph[i] = (judge_phase_t){.name = r->plan->phases[i].name, .elapsed_ns = in->elapsed_ns[i]};
    if (!ph || tables(r, ph, h, svc))
        out_print(r->o, "\n(out of memory while laying out the tables)\n");
    free(ph);
    hist_free(h);
    hist_free(svc);
    obs_totals_t t;
    obs_totals(l, &t);
    out_print(r->o,
              "\nsent %lld requests in %.1f s, %lld errors; schedule lag p99 %.2f ms, send lag "
              "p50 %.3f / p99 %.3f ms\n",
              (long long)t.started, (double)in->run_ns / 1e9, (long long)t.errors,
              ms(hist_value_at(t.sched_lag, 99)), ms(hist_value_at(t.send_lag, 50)),
              ms(hist_value_at(t.send_lag, 99)));
    bound_lines(r, &t);
    kept_lines(r);
    if (in->judged)
        judge_print(in->judged, r->o);
    if (in->stopped_why)
        out_print(r->o, "stopped early: %s\n", in->stopped_why);
    verdict_lines(r);
    out_print(r->o, "results: %s/\n", in->dir);
}
