/* The table printed at the end of a run: per phase and class, counts, errors and latency. */
#include <string.h>

#include "run_int.h"
#include "squall/judge.h"

static bool outcome_is_ok(const char *oc)
{
    return strcmp(oc, "2xx") == 0 || strcmp(oc, "3xx") == 0;
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

/* Sums every outcome of (phase, class) into h and the counters; false when nothing ran. */
static bool gather(const run_t *r, const char *phase, const char *cls, hist_t *h, hist_t *svc,
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

/* Requests per second are over the time the phase actually ran. */
static void row(run_t *r, const judge_phase_t *ph, const char *cls, hist_t *h, hist_t *svc)
{
    int64_t count, errors, cancelled;
    if (!gather(r, ph->name, cls, h, svc, &count, &errors, &cancelled))
        return;
    double secs = (double)ph->elapsed_ns / 1e9;
    char svc99[32] = "-";
    if (hist_count(svc))
        snprintf(svc99, sizeof svc99, "%.2f", ms(hist_value_at(svc, 99)));
    out_print(r->o, "%-12s %-24s %8lld %8.1f %7lld %9.2f %9.2f %9.2f %9.2f %9s\n", ph->name, cls,
              (long long)count, secs > 0 ? (double)count / secs : 0.0, (long long)errors,
              ms(hist_value_at(h, 50)), ms(hist_value_at(h, 90)), ms(hist_value_at(h, 99)),
              ms(hist_max(h)), svc99);
    if (cancelled)
        out_print(r->o, "%-12s %-24s %8lld cancelled when the run stopped\n", "", "",
                  (long long)cancelled);
}

/* A watch class counts events, not requests: one line with its events and the p99 of its open
 * and propagation times. */
static void watch_row(run_t *r, const judge_phase_t *ph, const char *cls)
{
    results_cell_t *c = results_cell_find(r->res, ph->name, cls, "2xx");
    if (!c)
        return;
    const hist_t *open = results_cell_hist_find(c, RESULTS_M_OPEN);
    const hist_t *prop = results_cell_hist_find(c, RESULTS_M_PROPAGATION);
    char o99[32] = "-", p99[32] = "-";
    if (open && hist_count(open))
        snprintf(o99, sizeof o99, "%.2f ms", ms(hist_value_at(open, 99)));
    if (prop && hist_count(prop))
        snprintf(p99, sizeof p99, "%.2f ms", ms(hist_value_at(prop, 99)));
    out_print(r->o, "%-12s %-24s %8lld events (watch); open p99 %s, propagation p99 %s\n", ph->name,
              cls, (long long)results_cell_counters(c)->count, o99, p99);
}

static void phase_rows(run_t *r, size_t p, const judge_phase_t *ph, hist_t *h, hist_t *svc)
{
    const plan_phase_t *pp = &r->plan->phases[p];
    if (pp->clients.on)
        out_print(r->o,
                  "%-12s closed loop: %d clients, think %.0f ms (response time is "
                  "from each client's next intended start)\n",
                  pp->name, pp->clients.count, ms(pp->clients.think_ns));
    for (size_t c = 0; c < r->plan->n_reqs; c++) {
        const src_class_t *k = src_class(r->issuer, (int)c);
        if (k->pr->kind == PLAN_WATCH)
            watch_row(r, ph, k->pr->name);
        else
            row(r, ph, k->pr->name, h, svc);
        if (k->paginate)
            row(r, ph, k->all_name, h, svc);
    }
    if (pp->teardown.on)
        row(r, ph, "teardown", h, svc);
}

/* Could squall offer the planned load: the seconds it could not, by kind. */
static void bound_lines(run_t *r, const obs_totals_t *t)
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
static void kept_lines(run_t *r)
{
    ledger_t *g = obs_ledger(r->obs);
    for (size_t c = 0; g && c < r->plan->n_reqs; c++) {
        size_t n = ledger_kept(g, (int)c);
        if (n == 0)
            continue;
        const char *why = r->plan->reqs[c].write.keep_why;
        out_print(r->o, "kept %zu objects of class %s on the target%s%s (`squall cleanup %s` "
                  "deletes them)\n",
                  n, r->plan->reqs[c].name, why ? ": " : " (the plan keeps them)",
                  why ? why : "", r->dir);
    }
}

/* The verdict, and why when it is not a plain pass. */
static void verdict_lines(run_t *r, const run_result_t *res, const json_t *reasons,
                          const json_t *accepted)
{
    static const char *const word[] = {"PASS", "FAIL", "INCONCLUSIVE"};
    out_print(r->o, "\nverdict: %s\n", word[res->outcome]);
    size_t i;
    const json_t *why;
    json_array_foreach(reasons, i, why)
    out_print(r->o, "  %s\n", json_string_value(why));
    json_array_foreach(accepted, i, why)
    out_print(r->o, "  accepted by the plan: %s\n", json_string_value(why));
}

void run_summary(run_t *r, const judge_phase_t *ph, const judge_t *j, const run_result_t *res,
                 const json_t *reasons, const json_t *accepted)
{
    hist_t *h = NULL, *svc = NULL;
    if (hist_new_ns(&h) || hist_new_ns(&svc)) {
        hist_free(h);
        return;
    }
    out_print(r->o, "\nresponse time is measured from each request's intended start (ms)\n");
    out_print(r->o, "%-12s %-24s %8s %8s %7s %9s %9s %9s %9s %9s\n", "phase", "class", "requests",
              "per s", "errors", "p50", "p90", "p99", "max", "svc p99");
    for (size_t p = 0; p < r->plan->n_phases; p++)
        phase_rows(r, p, &ph[p], h, svc);
    hist_free(h);
    hist_free(svc);
    obs_totals_t t;
    obs_totals(r->obs, &t);
    out_print(r->o,
              "\nsent %lld requests in %.1f s, %lld errors; schedule lag p99 %.2f ms, send lag "
              "p50 %.3f / p99 %.3f ms\n",
              (long long)t.started, (double)(r->end_ns - r->start_ns) / 1e9, (long long)t.errors,
              ms(hist_value_at(t.sched_lag, 99)), ms(hist_value_at(t.send_lag, 50)),
              ms(hist_value_at(t.send_lag, 99)));
    bound_lines(r, &t);
    kept_lines(r);
    if (j)
        judge_print(j, r->o);
    if (r->end != RUN_END_DONE)
        out_print(r->o, "stopped early: %s\n", r->why);
    verdict_lines(r, res, reasons, accepted);
    out_print(r->o, "results: %s/\n", r->dir);
}
