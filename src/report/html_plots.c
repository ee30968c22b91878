/* The report's plots: rate, errors and p50/p99 per second from series.csv (phase boundaries
 * marked), and latency percentile spectra from the histograms of results.json. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

#define MAX_LINES 16 /* classes drawn per plot; more are listed as left out */

/* Distinct values of a row field, in first-seen order. */
static size_t distinct(const report_series_t *s, bool phase, const char **out, size_t cap)
{
    size_t n = 0;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        const char *v = phase ? r->phase : r->cls;
        size_t k = 0;
        while (k < n && strcmp(out[k], v))
            k++;
        if (k == n && n < cap)
            out[n++] = v;
    }
    return n;
}

static size_t phase_starts(const results_t *res, const report_series_t *s, html_mark_t *m,
                           size_t cap);

/* The instants actions and collects fired at ("actions" section), after n marks already in m. */
static size_t action_marks(const results_t *res, html_mark_t *m, size_t n, size_t cap)
{
    json_t *items = json_object_get(results_section(res, "actions"), "items"), *it;
    int64_t t0 = results_meta(res)->start_unix_ms;
    size_t i;
    json_array_foreach(items, i, it)
    {
        json_t *at = json_object_get(it, "fired_unix_ms");
        if (n < cap && at && t0 > 0)
            m[n++] = (html_mark_t){(double)(json_integer_value(at) - t0) / 1000.0,
                                   json_string_value(json_object_get(it, "name"))};
    }
    return n;
}

size_t html_phase_marks(const results_t *res, const report_series_t *s, html_mark_t *m, size_t cap)
{
    size_t n = phase_starts(res, s, m, cap);
    return action_marks(res, m, n, cap);
}

/* Phase boundaries: the "phases" section's starts when the run wrote one, else the first
 * second each phase appears in series.csv. */
static size_t phase_starts(const results_t *res, const report_series_t *s, html_mark_t *m,
                           size_t cap)
{
    json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    size_t i, n = 0;
    json_array_foreach(list, i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        if (n < cap && name && json_number_value(json_object_get(p, "elapsed_s")) > 0)
            m[n++] = (html_mark_t){json_number_value(json_object_get(p, "start_s")), name};
    }
    if (n > 0)
        return n;
    const char *names[MAX_LINES * 4];
    n = distinct(s, true, names, cap < MAX_LINES * 4 ? cap : MAX_LINES * 4);
    for (size_t k = 0; k < n; k++) {
        m[k].label = names[k];
        m[k].x = INFINITY;
        for (i = 0; i < report_series_count(s); i++) {
            const report_row_t *r = report_series_at(s, i);
            if (strcmp(r->phase, names[k]) == 0 && (double)r->second < m[k].x)
                m[k].x = (double)r->second;
        }
    }
    return n;
}

int html_class_style(const results_t *res, const char *cls)
{
    const char *seen[64];
    size_t n = 0;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const char *c = results_cell_class(results_cell_at(res, i));
        size_t k = 0;
        while (k < n && strcmp(seen[k], c))
            k++;
        if (k < n)
            continue;
        if (strcmp(c, cls) == 0)
            return (int)n;
        if (n < 64)
            seen[n++] = c;
    }
    return (int)n;
}

typedef struct {
    double *x, *rate, *errors, *p50, *p99;
} per_second_t;

/* Per-second arrays of one class over seconds 0..secs-1; NaN latency where nothing completed. */
static int fill(const report_series_t *s, const char *cls, size_t secs, per_second_t *ps)
{
    double *all = calloc(5 * secs, sizeof(double));
    if (!all)
        return -1;
    ps->x = all, ps->rate = all + secs, ps->errors = all + 2 * secs;
    ps->p50 = all + 3 * secs, ps->p99 = all + 4 * secs;
    for (size_t k = 0; k < secs; k++) {
        ps->x[k] = (double)k + 0.5;
        ps->p50[k] = ps->p99[k] = NAN;
    }
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (strcmp(r->cls, cls) || r->second < 0 || (size_t)r->second >= secs)
            continue;
        size_t k = (size_t)r->second;
        ps->rate[k] += (double)r->completed;
        ps->errors[k] += (double)r->errors;
        if (r->completed > 0)
            ps->p50[k] = r->p50_ms, ps->p99[k] = r->p99_ms;
    }
    return 0;
}

static void plot_time(FILE *f, const char *title, const char *ylabel, bool ylog, html_line_t *l,
                      size_t n, const html_mark_t *m, size_t nm)
{
    html_plot_t p = {.title = title,
                     .xlabel = "time since the run started (s)",
                     .ylabel = ylabel,
                     .ylog = ylog,
                     .yzero = !ylog};
    fputs("<figure>\n", f);
    html_plot(f, &p, l, n, m, nm);
    fprintf(f, "<figcaption>");
    html_esc(f, title);
    fputs("</figcaption></figure>\n", f);
}

/* A log axis when latencies span more than a factor of 50. */
static bool wide(const per_second_t *ps, size_t n, size_t secs)
{
    double lo = INFINITY, hi = 0;
    for (size_t c = 0; c < n; c++)
        for (size_t k = 0; k < secs; k++)
            if (!isnan(ps[c].p50[k]) && ps[c].p50[k] > 0)
                lo = fmin(lo, ps[c].p50[k]), hi = fmax(hi, ps[c].p99[k]);
    return hi > 50 * lo;
}

void html_plots_time(FILE *f, const results_t *res, const report_series_t *s)
{
    fputs("<section id=\"over-time\"><h2>Over time</h2>\n", f);
    const char *cls[MAX_LINES];
    size_t nc = distinct(s, false, cls, MAX_LINES);
    int64_t last = -1;
    for (size_t i = 0; i < report_series_count(s); i++)
        last = report_series_at(s, i)->second > last ? report_series_at(s, i)->second : last;
    if (nc == 0 || last < 0) {
        fputs("<p class=\"note\">No per-second rows (series.csv is missing or empty).</p>"
              "</section>\n",
              f);
        return;
    }
    size_t secs = (size_t)last + 1;
    per_second_t ps[MAX_LINES] = {0};
    html_line_t rate[MAX_LINES], errs[MAX_LINES], lat[2 * MAX_LINES];
    html_mark_t marks[MAX_LINES * 4];
    size_t nm = html_phase_marks(res, s, marks, MAX_LINES * 4);
    char labels[2 * MAX_LINES][160];
    size_t ok = 0;
    for (size_t c = 0; c < nc && fill(s, cls[c], secs, &ps[c]) == 0; c++, ok++) {
        int st = html_class_style(res, cls[c]);
        rate[c] = (html_line_t){ps[c].x, ps[c].rate, secs, cls[c], st, 0};
        errs[c] = (html_line_t){ps[c].x, ps[c].errors, secs, cls[c], st, 0};
        snprintf(labels[2 * c], sizeof labels[0], "%s p99", cls[c]);
        snprintf(labels[2 * c + 1], sizeof labels[0], "%s p50", cls[c]);
        lat[2 * c] = (html_line_t){ps[c].x, ps[c].p99, secs, labels[2 * c], st, 0};
        lat[2 * c + 1] = (html_line_t){ps[c].x, ps[c].p50, secs, labels[2 * c + 1], st, 1};
    }
    plot_time(f, "Requests completed in each second, per class", "completed (requests/s)", false,
              rate, ok, marks, nm);
    plot_time(f, "Errors in each second, per class (every outcome but 2xx and 3xx)",
              "errors (requests/s)", false, errs, ok, marks, nm);
    plot_time(f, "Response time per second: p99 (solid) and p50 (dashed), per class",
              "response time (ms)", wide(ps, ok, secs), lat, 2 * ok, marks, nm);
    for (size_t c = 0; c < ok; c++)
        free(ps[c].x);
    fputs("</section>\n", f);
}

/* Classes with a histogram of metric m (answered outcomes, every phase pooled). */
static size_t metric_classes(const results_t *res, int m, const char **out, size_t cap)
{
    size_t n = 0;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (!results_cell_hist_find(c, m) || !strcmp(results_cell_outcome(c), "cancelled"))
            continue;
        size_t k = 0;
        while (k < n && strcmp(out[k], results_cell_class(c)))
            k++;
        if (k == n && n < cap)
            out[n++] = results_cell_class(c);
    }
    return n;
}

size_t html_spectrum(const results_t *res, int m, const char *cls, hist_t *h, double *x, double *y)
{
    hist_reset(h);
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        const hist_t *ch = results_cell_hist_find(c, m);
        if (ch && !strcmp(results_cell_class(c), cls) &&
            strcmp(results_cell_outcome(c), "cancelled"))
            hist_merge(h, ch);
    }
    int64_t count = hist_count(h);
    size_t n = 0;
    for (int k = 0; k < HTML_SPECTRUM_POINTS && count > 0; k++) {
        double tail = pow(10, -k / 10.0);
        if (k > 0 && 1 / tail > (double)count)
            break;
        x[n] = 100 * (1 - tail);
        y[n] = (double)hist_value_at(h, x[n]) / 1e6;
        n++;
    }
    return n;
}

static void spectrum_plot(FILE *f, const results_t *res, const char *metric, const char *title)
{
    int m = results_metric_from_name(metric);
    const char *cls[MAX_LINES];
    size_t nc = m >= 0 ? metric_classes(res, m, cls, MAX_LINES) : 0;
    int64_t lo, hi;
    int digits;
    hist_t *h = NULL;
    results_hist_config(res, &lo, &hi, &digits);
    if (nc == 0 || hist_new(lo, hi, digits, &h))
        return;
    static double xs[MAX_LINES][HTML_SPECTRUM_POINTS], ys[MAX_LINES][HTML_SPECTRUM_POINTS];
    html_line_t l[MAX_LINES];
    for (size_t c = 0; c < nc; c++) {
        int st = html_class_style(res, cls[c]);
        size_t n = html_spectrum(res, m, cls[c], h, xs[c], ys[c]);
        l[c] = (html_line_t){xs[c], ys[c], n, cls[c], st, st % 4};
    }
    hist_free(h);
    char ylabel[64];
    snprintf(ylabel, sizeof ylabel, "%s time (ms, log scale)", metric);
    html_plot_t p = {.title = title,
                     .xlabel = "percentile (spaced by 1/(1 - p))",
                     .ylabel = ylabel,
                     .xaxis = HTML_X_SPECTRUM,
                     .ylog = true};
    fprintf(f, "<figure id=\"spectrum-%s\">\n", metric);
    html_plot(f, &p, l, nc, NULL, 0);
    fputs("<figcaption>", f);
    html_esc(f, title);
    fputs("</figcaption></figure>\n", f);
}

void html_plots_spectrum(FILE *f, const results_t *res)
{
    fputs("<section id=\"spectrum\"><h2>Latency percentile spectrum</h2>\n"
          "<p class=\"note\">From the full histograms (HDR, 3 significant digits), every phase "
          "pooled; each line ends at the highest percentile its sample count resolves.</p>\n",
          f);
    spectrum_plot(f, res, "response", "Response time by percentile, per class (whole run)");
    fputs("</section>\n", f);
    int m = results_metric_from_name("propagation");
    const char *cls[1];
    if (m >= 0 && metric_classes(res, m, cls, 1)) {
        fputs("<section id=\"propagation\"><h2>Propagation latency</h2>\n"
              "<p class=\"note\">A write's send stamp to the moment a watcher saw its event "
              "(wall clocks of writer and watcher).</p>\n",
              f);
        spectrum_plot(f, res, "propagation", "Propagation latency by percentile, per watch class");
        fputs("</section>\n", f);
    }
    m = results_metric_from_name("open");
    if (m >= 0 && metric_classes(res, m, cls, 1)) {
        fputs("<section id=\"watch-open\"><h2>Watch open latency</h2>\n"
              "<p class=\"note\">From a stream's intended open to its first body byte, "
              "reconnects included.</p>\n",
              f);
        spectrum_plot(f, res, "open", "Watch open latency by percentile, per watch class");
        fputs("</section>\n", f);
    }
}
