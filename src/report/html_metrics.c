/* The report's section on the target's own metrics (results.json "metrics", squall/scrape.h):
 * what each endpoint gave, then one plot per metric on the run's time axis with the phase
 * boundaries marked: counters as rates, histograms as p50/p90/p99 of each interval, gauges as
 * they are. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

#define MAX_PLOT_LINES 8 /* lines in one plot; more label sets are named as left out */
#define MAX_MARKS      64

static void endpoints(FILE *f, json_t *eps)
{
    fputs("<table><tr><th>endpoint</th><th>format</th><th class=\"n\">scrapes</th>"
          "<th class=\"n\">failed</th><th class=\"n\">skipped</th><th>last failure</th></tr>\n",
          f);
    size_t i;
    json_t *e;
    json_array_foreach(eps, i, e)
    {
        fputs("<tr><td>", f);
        html_esc(f, json_string_value(json_object_get(e, "url")));
        fputs("</td><td>", f);
        html_esc(f, json_string_value(json_object_get(e, "format")));
        fprintf(f, "</td><td class=\"n\">%lld</td><td class=\"n\">%lld</td><td class=\"n\">%lld",
                (long long)json_integer_value(json_object_get(e, "scrapes")),
                (long long)json_integer_value(json_object_get(e, "failed")),
                (long long)json_integer_value(json_object_get(e, "skipped")));
        fputs("</td><td>", f);
        html_esc(f, json_string_value(json_object_get(e, "last_error")));
        fputs("</td></tr>\n", f);
    }
    fputs("</table>\n", f);
}

/* Whether derived series a and b belong in one plot: the same metric and kind family. */
static bool same_plot(json_t *a, json_t *b)
{
    const char *ka = json_string_value(json_object_get(a, "kind"));
    const char *kb = json_string_value(json_object_get(b, "kind"));
    bool qa = ka && ka[0] == 'p', qb = kb && kb[0] == 'p';
    return json_equal(json_object_get(a, "metric"), json_object_get(b, "metric")) &&
           json_equal(json_object_get(a, "endpoint"), json_object_get(b, "endpoint")) &&
           (qa == qb) && (qa || json_equal(json_object_get(a, "kind"), json_object_get(b, "kind")));
}

typedef struct {
    double *x, *y;
    char label[200];
} line_buf_t;

/* One plot of the series list[from..] that belong with list[from]; marks them used. */
static void plot_metric(FILE *f, json_t *list, size_t from, bool *used, int64_t t0_ms,
                        const html_mark_t *marks, size_t nm, const char *note)
{
    json_t *first = json_array_get(list, from);
    const char *metric = json_string_value(json_object_get(first, "metric"));
    const char *kind = json_string_value(json_object_get(first, "kind"));
    bool quant = kind && kind[0] == 'p';
    size_t ml = strlen(metric);
    bool secs = ml > 8 && strcmp(metric + ml - 8, "_seconds") == 0;
    double scale = quant && secs ? 1000.0 : 1.0;
    line_buf_t lb[MAX_PLOT_LINES];
    html_line_t lines[MAX_PLOT_LINES];
    size_t n = 0, left = 0;
    for (size_t i = from; i < json_array_size(list); i++) {
        json_t *d = json_array_get(list, i);
        if (used[i] || !same_plot(first, d))
            continue;
        used[i] = true;
        if (n == MAX_PLOT_LINES) {
            left++;
            continue;
        }
        json_t *pts = json_object_get(d, "points");
        size_t np = json_array_size(pts);
        lb[n].x = malloc((np ? np : 1) * sizeof(double));
        lb[n].y = malloc((np ? np : 1) * sizeof(double));
        if (!lb[n].x || !lb[n].y) {
            free(lb[n].x);
            free(lb[n].y);
            break;
        }
        for (size_t k = 0; k < np; k++) {
            json_t *p = json_array_get(pts, k);
            lb[n].x[k] = (double)(json_integer_value(json_array_get(p, 0)) - t0_ms) / 1000.0;
            lb[n].y[k] = json_number_value(json_array_get(p, 1)) * scale;
        }
        const char *labels = json_string_value(json_object_get(d, "labels"));
        const char *k = json_string_value(json_object_get(d, "kind"));
        snprintf(lb[n].label, sizeof lb[n].label, "%s%s%s", quant ? k : "",
                 quant && labels && *labels ? " " : "",
                 labels && *labels ? labels
                 : quant           ? ""
                                   : "all");
        lines[n] = (html_line_t){lb[n].x, lb[n].y, np, lb[n].label, (int)n, quant ? (int)n % 3 : 0};
        n++;
    }
    char title[300], ylabel[120];
    snprintf(title, sizeof title, "%s: %s%s", metric,
             !quant ? (strcmp(kind, "rate") == 0 ? "rate per second" : "value at each scrape")
                    : "p50, p90 and p99 of the observations in each interval between scrapes",
             left ? " (more label sets in metrics.csv)" : "");
    snprintf(ylabel, sizeof ylabel, "%s",
             quant                       ? (secs ? "ms" : "value")
             : strcmp(kind, "rate") == 0 ? "per second"
                                         : "value");
    html_plot_t p = {.title = title,
                     .xlabel = "time since the run started (s)",
                     .ylabel = ylabel,
                     .yzero = true,
                     .xnote = note};
    fputs("<figure>\n", f);
    html_plot(f, &p, lines, n, marks, nm);
    fputs("<figcaption>", f);
    html_esc(f, title);
    fputs("</figcaption></figure>\n", f);
    for (size_t i = 0; i < n; i++) {
        free(lb[i].x);
        free(lb[i].y);
    }
}

void html_metrics(FILE *f, const results_t *res, const report_series_t *s)
{
    json_t *m = results_section(res, "metrics");
    if (m == NULL)
        return;
    fputs("<section id=\"target-metrics\"><h2>The target's own metrics</h2>\n"
          "<p class=\"note\">Scraped by squall during the run (every point in metrics.csv). "
          "Counters are drawn as their rate between scrapes, histograms as percentiles of what "
          "they observed between scrapes (linear within a bucket, as Prometheus's "
          "histogram_quantile), gauges as read.</p>\n",
          f);
    endpoints(f, json_object_get(m, "endpoints"));
    json_t *list = json_object_get(m, "series");
    size_t n = json_array_size(list);
    html_mark_t marks[MAX_MARKS];
    size_t nm = s ? html_phase_marks(res, s, marks, MAX_MARKS) : 0;
    int64_t t0 = results_meta(res)->start_unix_ms;
    char note[80]; /* the wall-clock start, on every plot's time axis */
    html_time_note(res, note, sizeof note);
    bool *used = calloc(n ? n : 1, sizeof *used);
    for (size_t i = 0; used && i < n; i++)
        if (!used[i])
            plot_metric(f, list, i, used, t0, marks, nm, note);
    free(used);
    json_int_t more = json_integer_value(json_object_get(m, "derived_not_shown"));
    if (more > 0)
        fprintf(f, "<p class=\"note\">%lld more derived series are in metrics.csv only.</p>\n",
                (long long)more);
    fputs("</section>\n", f);
}

/* What an item did, in a few words: its status, exit code, or why it did not run. */
static void item_result(FILE *f, json_t *it)
{
    const char *err = json_string_value(json_object_get(it, "error"));
    json_t *code = json_object_get(it, "exit_code"), *status = json_object_get(it, "status");
    if (json_is_true(json_object_get(it, "timed_out")))
        fputs("killed at its timeout", f);
    else if (code)
        fprintf(f, "exit %lld", (long long)json_integer_value(code));
    else if (status)
        fprintf(f, "%lld %s%s", (long long)json_integer_value(status),
                json_string_value(json_object_get(it, "outcome")),
                json_is_true(json_object_get(it, "truncated")) ? ", cut at its max" : "");
    if (err) {
        fputs(code || status ? "; " : "", f);
        html_esc(f, err);
    }
}

void html_actions(FILE *f, const results_t *res)
{
    json_t *items = json_object_get(results_section(res, "actions"), "items"), *it;
    if (json_array_size(items) == 0)
        return;
    int64_t t0 = results_meta(res)->start_unix_ms;
    fputs("<section id=\"actions\"><h2>Actions and collected artifacts</h2>\n<table><tr>"
          "<th>name</th><th>kind</th><th>when</th><th class=\"n\">fired (s)</th><th>result</th>"
          "<th>saved</th></tr>\n",
          f);
    size_t i;
    json_array_foreach(items, i, it)
    {
        const char *saved = json_string_value(json_object_get(it, "saved"));
        json_t *at = json_object_get(it, "fired_unix_ms");
        fputs("<tr><td>", f);
        html_esc(f, json_string_value(json_object_get(it, "name")));
        fputs("</td><td>", f);
        html_esc(f, json_string_value(json_object_get(it, "kind")));
        fputs("</td><td>", f);
        html_esc(f, json_string_value(json_object_get(it, "phase")));
        fputs(json_object_get(it, "phase") && !json_is_null(json_object_get(it, "phase")) ? " at "
                                                                                          : "",
              f);
        html_esc(f, json_string_value(json_object_get(it, "at")));
        if (at && t0 > 0)
            fprintf(f, "</td><td class=\"n\">%.3f</td><td>",
                    (double)(json_integer_value(at) - t0) / 1000.0);
        else
            fputs("</td><td class=\"n\">&#8211;</td><td>", f);
        item_result(f, it);
        fputs("</td><td>", f);
        if (saved) { /* relative to report.html, which sits in the same directory */
            fputs("<a href=\"", f);
            html_esc(f, saved);
            fputs("\">", f);
            html_esc(f, saved);
            fputs("</a>", f);
        }
        fputs("</td></tr>\n", f);
    }
    fputs("</table></section>\n", f);
}
