/* report.html's latency distributions: per phase, the share of requests slower than x (both
 * axes logarithmic, the objectives' thresholds marked), from the HDR histograms of results.json;
 * and per class a heat map of response times over time (second x latency bin, shade = count)
 * from series-hist.csv, which shows a storm's shape second by second. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"
#include "squall/hist.h"

#define MAX_CLASSES 16
#define MAX_POINTS  400

size_t html_exceed(const results_t *res, int m, const char *phase, const char *cls, hist_t *h,
                   double *x, double *y, size_t cap)
{
    hist_reset(h);
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        const hist_t *ch = results_cell_hist_find(c, m);
        if (ch && !strcmp(results_cell_class(c), cls) &&
            (!phase || !strcmp(results_cell_phase(c), phase)) &&
            strcmp(results_cell_outcome(c), "cancelled"))
            hist_merge(h, ch);
    }
    double total = (double)hist_count(h), seen = 0;
    size_t n = 0;
    hist_iter_t it;
    hist_iter_init(&it, h);
    /* Points at least 1 % apart on x (or where the share changes tenfold), and the last. */
    while (total > 0 && n < cap && hist_iter_next(&it)) {
        if (n == 0) {
            x[n] = (double)it.lo / 1e6, y[n] = 100;
            n += x[0] > 0;
        }
        seen += (double)it.count;
        double xv = (double)it.hi / 1e6, yv = 100 * (total - seen) / total;
        if (n > 0 && n < cap && xv < x[n - 1] * 1.01 && yv > y[n - 1] / 10 && yv > 0)
            continue;
        if (n < cap)
            x[n] = xv, y[n] = yv, n++;
        if (yv <= 0)
            break;
    }
    return n;
}

/* The phases of the run in order: the "phases" section, else the cells' first-seen order. */
static size_t phases(const results_t *res, const char **out, size_t cap)
{
    json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    size_t i, n = 0;
    json_array_foreach(list, i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        if (name && n < cap)
            out[n++] = name;
    }
    for (i = 0; i < results_cell_count(res); i++) {
        const char *ph = results_cell_phase(results_cell_at(res, i));
        size_t k = 0;
        while (k < n && strcmp(out[k], ph))
            k++;
        if (k == n && n < cap)
            out[n++] = ph;
    }
    return n;
}

/* Classes with a histogram of metric m in phase. */
static size_t classes(const results_t *res, int m, const char *phase, const char **out, size_t cap)
{
    size_t n = 0;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const results_cell_t *c = results_cell_at(res, i);
        if (!results_cell_hist_find(c, m) || !strcmp(results_cell_outcome(c), "cancelled") ||
            strcmp(results_cell_phase(c), phase))
            continue;
        size_t k = 0;
        while (k < n && strcmp(out[k], results_cell_class(c)))
            k++;
        if (k == n && n < cap)
            out[n++] = results_cell_class(c);
    }
    return n;
}

static void tail_plot(FILE *f, const results_t *res, int m, const char *phase, hist_t *h)
{
    const char *cls[MAX_CLASSES];
    size_t nc = classes(res, m, phase, cls, MAX_CLASSES);
    if (nc == 0)
        return;
    static double xs[MAX_CLASSES][MAX_POINTS], ys[MAX_CLASSES][MAX_POINTS];
    html_line_t l[MAX_CLASSES];
    html_mark_t marks[2 * MAX_CLASSES];
    html_level_t lv[2 * MAX_CLASSES];
    html_threshold_t thr[2 * MAX_CLASSES];
    size_t nt = 0;
    const char *metric = results_metric_name(m);
    for (size_t c = 0; c < nc; c++) {
        int st = html_class_style(res, cls[c]);
        size_t n = html_exceed(res, m, phase, cls[c], h, xs[c], ys[c], MAX_POINTS);
        l[c] = (html_line_t){xs[c], ys[c], n, cls[c], st, 0};
        size_t k0 = nt;
        nt += html_thresholds(res, metric, cls[c], thr + nt, 2 * MAX_CLASSES - nt);
        for (size_t k = k0; k < nt; k++) { /* p99 <= 1000 ms: at most 1 % slower than 1000 ms */
            marks[k] = (html_mark_t){.x = thr[k].ms, .label = thr[k].label};
            lv[k] = (html_level_t){100 - thr[k].pct, NULL, st};
        }
    }
    char title[200], xlabel[64];
    snprintf(title, sizeof title, "Phase %s: share of %s times slower than x, per class", phase,
             metric);
    snprintf(xlabel, sizeof xlabel, "%s time x (ms, log scale)", metric);
    html_plot_t p = {.title = title,
                     .xlabel = xlabel,
                     .ylabel = "slower than x (%, log scale)",
                     .xaxis = HTML_X_LOG,
                     .ylog = true,
                     .levels = lv,
                     .n_levels = nt};
    for (size_t k = 0; k < nt; k++) { /* the thresholds stay in view */
        p.xmin = k == 0 ? thr[k].ms / 1.5 : fmin(p.xmin, thr[k].ms / 1.5);
        p.xmax = fmax(p.xmax, thr[k].ms * 1.5);
    }
    fprintf(f, "<figure class=\"tail\" data-phase=\"");
    html_esc(f, phase);
    fprintf(f, "\" data-metric=\"%s\">\n", metric);
    html_plot(f, &p, l, nc, marks, nt);
    fputs("<figcaption>", f);
    html_esc(f, title);
    fputs(nt ? ". Each line ends at its slowest request. An objective is a corner: its dashed "
               "threshold (x) and share (level); the line must pass below the corner."
             : ". Each line ends at its slowest request.",
          f);
    fputs("</figcaption></figure>\n", f);
}

void html_plots_tails(FILE *f, const results_t *res)
{
    int64_t lo, hi;
    int digits;
    hist_t *h = NULL;
    results_hist_config(res, &lo, &hi, &digits);
    if (hist_new(lo, hi, digits, &h))
        return;
    const char *ph[64];
    size_t np = phases(res, ph, 64);
    static const char *const metrics[] = {"response", "propagation", "open"};
    static const char *const heads[] = {
        ("<section id=\"tails\"><h2>Slower than x, per phase</h2>\n<p class=\"note\">From "
         "each phase's full histograms (HDR, 3 significant digits): the share of requests whose "
         "response time (from the intended start) exceeded x. Reading across at 1 % gives the "
         "p99, at 0.1 % the p99.9.</p>\n"),
        ("<section id=\"propagation\"><h2>Propagation latency, per phase</h2>\n<p class="
         "\"note\">A write's send stamp to the moment a watcher saw its event (wall clocks of "
         "writer and watcher).</p>\n"),
        ("<section id=\"watch-open\"><h2>Watch open latency, per phase</h2>\n<p class="
         "\"note\">From a stream's intended open to its first body byte, reconnects "
         "included.</p>\n")};
    for (size_t k = 0; k < 3; k++) {
        int m = results_metric_from_name(metrics[k]);
        bool any = false;
        const char *one[1];
        for (size_t i = 0; m >= 0 && i < np; i++)
            any |= classes(res, m, ph[i], one, 1) > 0;
        if (!any)
            continue;
        fputs(heads[k], f);
        for (size_t i = 0; i < np; i++)
            tail_plot(f, res, m, ph[i], h);
        fputs("</section>\n", f);
    }
    hist_free(h);
}

/* One class's heat map: seconds x latency bins, every phase's rows of a second added. */
static void heat_plot(FILE *f, const results_t *res, const report_series_t *s, const char *cls,
                      size_t secs, const html_mark_t *marks, size_t nm)
{
    double *count = calloc(secs * REPORT_HEAT_BINS, sizeof(double));
    if (!count)
        return;
    for (size_t i = 0; i < report_series_heat_count(s); i++) {
        const report_heat_row_t *r = report_series_heat_at(s, i);
        if (strcmp(r->cls, cls) || r->second < 0 || (size_t)r->second >= secs)
            continue;
        for (size_t b = 0; b < REPORT_HEAT_BINS; b++)
            count[(size_t)r->second * REPORT_HEAT_BINS + b] += r->bins[b];
    }
    double edges[REPORT_HEAT_BINS + 1];
    for (size_t b = 0; b <= REPORT_HEAT_BINS; b++)
        edges[b] = report_heat_edge(b);
    html_threshold_t thr[8];
    html_level_t lv[8];
    size_t nt = html_thresholds(res, "response", cls, thr, 8);
    for (size_t k = 0; k < nt; k++)
        lv[k] = (html_level_t){thr[k].ms, thr[k].label, 1};
    char title[200], note[80];
    snprintf(title, sizeof title, "Response times of %s over time (shade: requests per second "
                                  "and bin)",
             cls);
    html_time_note(res, note, sizeof note);
    html_plot_t p = {.title = title,
                     .xlabel = "time since the run started (s)",
                     .ylabel = "response time (ms, log scale)",
                     .ylog = true,
                     .levels = lv,
                     .n_levels = nt,
                     .xnote = note};
    html_heat_t h = {.nx = secs, .ny = REPORT_HEAT_BINS, .x0 = 0, .dx = 1, .yedge = edges,
                     .count = count};
    fputs("<figure class=\"heat\">\n", f);
    html_heat(f, &p, &h, marks, nm);
    fputs("<figcaption>", f);
    html_esc(f, title);
    fputs("</figcaption></figure>\n", f);
    free(count);
}

void html_plots_heat(FILE *f, const results_t *res, const report_series_t *s)
{
    size_t n = report_series_heat_count(s);
    if (n == 0)
        return;
    int64_t last = 0;
    const char *cls[MAX_CLASSES];
    size_t nc = 0;
    for (size_t i = 0; i < n; i++) {
        const report_heat_row_t *r = report_series_heat_at(s, i);
        last = r->second > last ? r->second : last;
        size_t k = 0;
        while (k < nc && strcmp(cls[k], r->cls))
            k++;
        if (k == nc && nc < MAX_CLASSES)
            cls[nc++] = r->cls;
    }
    html_mark_t marks[64];
    size_t nm = html_phase_marks(res, s, marks, 64);
    fputs("<section id=\"heat\"><h2>Response times second by second</h2>\n<p class=\"note\">"
          "Each column is one second, each row a latency bin (four per decade); the darker the "
          "cell, the more requests answered in that time. From series-hist.csv.</p>\n",
          f);
    for (size_t c = 0; c < nc; c++)
        heat_plot(f, res, s, cls[c], (size_t)last + 1, marks, nm);
    fputs("</section>\n", f);
}
