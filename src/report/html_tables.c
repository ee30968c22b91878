/* report.html's tables: per phase x class counts, rates, errors by kind and response-time
 * percentiles, from the histograms of results.json. */
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

static bool is_ok(const char *oc)
{
    return !strcmp(oc, "2xx") || !strcmp(oc, "3xx");
}

/* Seconds phase ran: the "phases" section when the run wrote one, else the seconds it has
 * rows for in series.csv (0 when unknown). */
static double phase_seconds(const results_t *res, const report_series_t *s, const char *phase)
{
    size_t i;
    json_t *p;
    json_array_foreach(json_object_get(results_section(res, "phases"), "phases"), i, p)
    {
        if (!strcmp(json_string_value(json_object_get(p, "name")) ?: "", phase))
            return json_number_value(json_object_get(p, "elapsed_s"));
    }
    int64_t lo = -1, hi = -1;
    for (size_t k = 0; k < report_series_count(s); k++) {
        const report_row_t *r = report_series_at(s, k);
        if (strcmp(r->phase, phase))
            continue;
        lo = lo < 0 || r->second < lo ? r->second : lo;
        hi = r->second > hi ? r->second : hi;
    }
    return lo < 0 ? 0 : (double)(hi - lo + 1);
}

/* Distinct (phase) or (class within phase) names of the cells, in first-seen order. */
static size_t names(const results_t *res, const char *phase, const char **out, size_t cap)
{
    size_t n = 0;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (phase && strcmp(results_cell_phase(c), phase))
            continue;
        const char *v = phase ? results_cell_class(c) : results_cell_phase(c);
        size_t k = 0;
        while (k < n && strcmp(out[k], v))
            k++;
        if (k == n && n < cap)
            out[n++] = v;
    }
    return n;
}

/* Watch classes count events, and record open and propagation latency, not response time. */
static bool is_watch(const results_t *res, const char *phase, const char *cls)
{
    int open = results_metric_from_name("open");
    for (size_t i = 0; open >= 0 && i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (!strcmp(results_cell_phase(c), phase) && !strcmp(results_cell_class(c), cls) &&
            results_cell_hist_find(c, open))
            return true;
    }
    return false;
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

/* The exact status codes answered, in increasing order: "200: 812, 429: 20, 503: 31". */
static void status_cell(FILE *f, results_counters_t *k)
{
    fputs("<td class=\"codes\">", f);
    bool any = false;
    for (int done = 0; done < RESULTS_STATUS_MAX; done++) {
        size_t best = RESULTS_STATUS_MAX;
        for (size_t j = 0; j < RESULTS_STATUS_MAX; j++)
            if (k->status[j].code && (best == RESULTS_STATUS_MAX ||
                                      k->status[j].code < k->status[best].code))
                best = j;
        if (best == RESULTS_STATUS_MAX)
            break;
        char n[32];
        html_num((double)k->status[best].n, n, sizeof n);
        fprintf(f, "%s<span class=\"code c%d\">%d</span>: %s", any ? ", " : "",
                k->status[best].code / 100, k->status[best].code, n);
        k->status[best].code = 0;
        any = true;
    }
    if (k->status_other)
        fprintf(f, "%sother codes: %lld", any ? ", " : "", (long long)k->status_other);
    fputs(any || k->status_other ? "</td>" : "-</td>", f);
}

static void row(FILE *f, const results_t *res, const char *phase, const char *cls, double secs,
                hist_t *h)
{
    int64_t count = 0, errors = 0, cancelled = 0;
    char kinds[512] = "";
    results_counters_t codes = {0}; /* every outcome's exact status codes */
    hist_reset(h);
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (strcmp(results_cell_phase(c), phase) || strcmp(results_cell_class(c), cls))
            continue;
        const char *oc = results_cell_outcome(c);
        int64_t n = results_cell_counters((results_cell_t *)c)->count;
        if (!strcmp(oc, "cancelled")) {
            cancelled += n;
            continue;
        }
        count += n;
        const results_counters_t *k = results_cell_counters((results_cell_t *)c);
        for (size_t j = 0; j < RESULTS_STATUS_MAX; j++)
            results_status_add(&codes, k->status[j].code, k->status[j].n);
        codes.status_other += k->status_other;
        const hist_t *rh = results_cell_hist_find(c, RESULTS_M_RESPONSE);
        if (rh)
            hist_merge(h, rh);
        if (is_ok(oc) || n == 0)
            continue;
        errors += n;
        size_t len = strlen(kinds);
        snprintf(kinds + len, sizeof kinds - len, "%s%s: %lld", len ? ", " : "", oc, (long long)n);
    }
    fputs("<tr><td>", f);
    html_esc(f, cls);
    if (is_watch(res, phase, cls))
        fputs(" <span class=\"note\">(watch: events)</span>", f);
    fprintf(f, "</td><td class=\"n\">%lld</td><td class=\"n\">", (long long)count);
    if (secs > 0)
        fprintf(f, "%.1f", (double)count / secs);
    else
        fputs("-", f);
    fprintf(f, "</td><td class=\"n\">%lld</td><td>", (long long)errors);
    html_esc(f, kinds);
    if (cancelled)
        fprintf(f, "%s(%lld cancelled at stop)", kinds[0] ? " " : "", (long long)cancelled);
    else if (!kinds[0])
        fputs("-", f);
    fputs("</td>", f);
    static const double pct[] = {50, 90, 99, 99.9, 100};
    for (size_t k = 0; k < 5; k++)
        if (hist_count(h))
            fprintf(f, "<td class=\"n\">%.2f</td>", ms(hist_value_at(h, pct[k])));
        else
            fputs("<td class=\"n\">-</td>", f);
    status_cell(f, &codes);
    fputs("</tr>\n", f);
}

void html_tables(FILE *f, const results_t *res, const report_series_t *s)
{
    int64_t lo, hi;
    int digits;
    hist_t *h = NULL;
    results_hist_config(res, &lo, &hi, &digits);
    fputs("<section id=\"tables\"><h2>Per phase and class</h2>\n<p class=\"note\">Response time "
          "(ms) from each request's intended start, over every answered request (errors "
          "included); rate = answered requests per second of the phase. Watch classes count the "
          "events they received; their latency is in the sections below. Status codes: every "
          "answer's exact HTTP code (results.json cells' \"status\").</p>\n",
          f);
    if (hist_new(lo, hi, digits, &h)) {
        fputs("</section>\n", f);
        return;
    }
    const char *phases[256], *classes[256];
    size_t np = names(res, NULL, phases, 256);
    for (size_t p = 0; p < np; p++) {
        double secs = phase_seconds(res, s, phases[p]);
        fputs("<h3>phase ", f);
        html_esc(f, phases[p]);
        if (secs > 0)
            fprintf(f, " <span class=\"note\">(%.1f s)</span>", secs);
        fputs("</h3>\n<table class=\"cells\"><tr><th>class</th><th class=\"n\">requests</th>"
              "<th class=\"n\">per s</th><th class=\"n\">errors</th><th>errors by kind</th>"
              "<th class=\"n\">p50</th><th class=\"n\">p90</th><th class=\"n\">p99</th>"
              "<th class=\"n\">p99.9</th><th class=\"n\">max</th><th>status codes</th></tr>\n",
              f);
        size_t nc = names(res, phases[p], classes, 256);
        for (size_t c = 0; c < nc; c++)
            row(f, res, phases[p], classes[c], secs, h);
        fputs("</table>\n", f);
    }
    if (np == 0)
        fputs("<p class=\"note\">No requests were recorded.</p>\n", f);
    hist_free(h);
    fputs("</section>\n", f);
}
