/* A comparison as output: the terminal table, the JSON document (--json) and the HTML
 * side-by-side page (--html). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"
#include "squall/err.h"
#include "squall/file.h"

#define METHOD                                                                                     \
    "Mann-Whitney U (Mann & Whitney 1947), two-sided, normal approximation with tie and "          \
    "continuity corrections, over the per-second samples of series.csv"

static bool is_err(const report_cmp_line_t *l)
{
    return strcmp(l->metric, "error_rate") == 0;
}

static void value(const report_cmp_line_t *l, double v, char *buf, size_t cap)
{
    if (isnan(v))
        snprintf(buf, cap, "-");
    else if (is_err(l))
        snprintf(buf, cap, "%.2f%%", v * 100);
    else
        snprintf(buf, cap, "%.2f ms", v);
}

static void change(const report_cmp_line_t *l, char *buf, size_t cap)
{
    double d = l->new_value - l->base;
    if (isnan(d))
        snprintf(buf, cap, "-");
    else if (is_err(l))
        snprintf(buf, cap, "%+.2f pt", d * 100);
    else if (l->base > 0)
        snprintf(buf, cap, "%+.2f ms (%+.0f%%)", d, 100 * d / l->base);
    else
        snprintf(buf, cap, "%+.2f ms", d);
}

void report_cmp_print(const report_cmp_t *c, out_t *o)
{
    size_t regressions = 0, improvements = 0;
    out_print(o, "%-12s %-20s %-10s %11s %11s %18s %9s  %s\n", "phase", "class", "metric", "base",
              "new", "change", "p", "verdict");
    for (size_t i = 0; i < report_cmp_count(c); i++) {
        const report_cmp_line_t *l = report_cmp_at(c, i);
        char b[32], n[32], d[48], p[16] = "-";
        value(l, l->base, b, sizeof b);
        value(l, l->new_value, n, sizeof n);
        change(l, d, sizeof d);
        if (l->verdict != REPORT_UNTESTED)
            snprintf(p, sizeof p, "%.2g", l->p);
        const char *v =
            l->verdict == REPORT_REGRESSION ? "REGRESSION" : report_verdict_name(l->verdict);
        out_print(o, "%-12s %-20s %-10s %11s %11s %18s %9s  %s\n", l->phase, l->cls, l->metric, b,
                  n, d, p, v);
        regressions += l->verdict == REPORT_REGRESSION;
        improvements += l->verdict == REPORT_IMPROVEMENT;
    }
    out_print(o, "\n%zu regression(s), %zu improvement(s); test: %s\n", regressions, improvements,
              METHOD);
}

static json_t *num(double v)
{
    return isnan(v) ? json_null() : json_real(v);
}

json_t *report_cmp_json(const report_cmp_t *c, const report_cmp_opts_t *opts)
{
    json_t *lines = json_array();
    for (size_t i = 0; lines && i < report_cmp_count(c); i++) {
        const report_cmp_line_t *l = report_cmp_at(c, i);
        json_array_append_new(
            lines,
            json_pack("{s:s, s:s, s:s, s:o, s:o, s:o, s:o, s:I, s:I, s:s, s:f, s:f, s:f, "
                      "s:s}",
                      "phase", l->phase, "class", l->cls, "metric", l->metric, "base", num(l->base),
                      "new", num(l->new_value), "base_median", num(l->base_med), "new_median",
                      num(l->new_med), "n_base", (json_int_t)l->n_base, "n_new",
                      (json_int_t)l->n_new, "tested_on", l->tested_on, "u", l->u, "z", l->z, "p",
                      l->p, "verdict", report_verdict_name(l->verdict)));
    }
    return json_pack("{s:s, s:i, s:s, s:f, s:f, s:f, s:f, s:f, s:b, s:o}", "format",
                     "squall-compare", "version", 1, "method", METHOD, "alpha", opts->alpha,
                     "min_change_ms", opts->min_abs_ms, "min_change_tail_ms", opts->min_tail_ms,
                     "min_change_fraction", opts->min_rel, "min_change_error_rate",
                     opts->min_abs_err, "regression", report_cmp_regressed(c), "lines", lines);
}

/* ---- HTML side-by-side ------------------------------------------------------------------ */

static void meta_rows(FILE *f, const results_t *b, const results_t *n)
{
    const results_meta_t *mb = results_meta(b), *mn = results_meta(n);
    const char *k[] = {"plan", "target", "host", "stopped early"};
    const char *vb[] = {mb->plan_path, mb->target_url, mb->host, mb->stop_reason};
    const char *vn[] = {mn->plan_path, mn->target_url, mn->host, mn->stop_reason};
    fputs("<table><tr><th></th><th>BASE</th><th>NEW</th></tr>\n", f);
    for (size_t i = 0; i < 4; i++) {
        fprintf(f, "<tr><th>%s</th><td>", k[i]);
        html_esc(f, vb[i] ? vb[i] : "-");
        fputs("</td><td>", f);
        html_esc(f, vn[i] ? vn[i] : "-");
        fputs("</td></tr>\n", f);
    }
    fprintf(f, "<tr><th>duration</th><td>%.1f s</td><td>%.1f s</td></tr></table>\n",
            (double)mb->duration_ns / 1e9, (double)mn->duration_ns / 1e9);
}

static void verdict_rows(FILE *f, const report_cmp_t *c)
{
    fputs("<table><tr><th>phase</th><th>class</th><th>metric</th><th class=\"n\">BASE</th>"
          "<th class=\"n\">NEW</th><th class=\"n\">change</th><th class=\"n\">p</th>"
          "<th>verdict</th></tr>\n",
          f);
    for (size_t i = 0; i < report_cmp_count(c); i++) {
        const report_cmp_line_t *l = report_cmp_at(c, i);
        char b[32], n[32], d[48];
        value(l, l->base, b, sizeof b);
        value(l, l->new_value, n, sizeof n);
        change(l, d, sizeof d);
        bool bad = l->verdict == REPORT_REGRESSION;
        fputs("<tr><td>", f);
        html_esc(f, l->phase);
        fputs("</td><td>", f);
        html_esc(f, l->cls);
        fprintf(f,
                "</td><td>%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td>"
                "<td class=\"n\">%s</td><td class=\"n\">%.2g</td><td class=\"%s\">%s%s</td>"
                "</tr>\n",
                l->metric, b, n, d, l->p, bad ? "fail" : "pass", bad ? "&#10008; " : "",
                bad ? "REGRESSION" : report_verdict_name(l->verdict));
    }
    fputs("</table>\n", f);
}

/* One spectrum per class present in both: BASE solid, NEW dashed, same colour per run. */
static void spectra(FILE *f, const results_t *b, const results_t *n)
{
    int m = results_metric_from_name("response");
    int64_t lo, hi;
    int digits;
    hist_t *h = NULL;
    results_hist_config(b, &lo, &hi, &digits);
    if (m < 0 || hist_new(lo, hi, digits, &h))
        return;
    static double x[2][HTML_SPECTRUM_POINTS], y[2][HTML_SPECTRUM_POINTS];
    for (size_t i = 0; i < results_cell_count(b); i++) {
        const char *cls = results_cell_class(results_cell_at(b, i));
        bool first = true;
        for (size_t k = 0; k < i && first; k++)
            first = strcmp(results_cell_class(results_cell_at(b, k)), cls) != 0;
        if (!first)
            continue;
        html_line_t l[2] = {
            {x[0], y[0], html_spectrum(b, m, cls, h, x[0], y[0]), "BASE", 0, 0},
            {x[1], y[1], html_spectrum(n, m, cls, h, x[1], y[1]), "NEW", 1, 1},
        };
        char title[200];
        snprintf(title, sizeof title, "%s: response time by percentile, BASE and NEW", cls);
        html_plot_t p = {.title = title,
                         .xlabel = "percentile (spaced by 1/(1 - p))",
                         .ylabel = "response time (ms, log scale)",
                         .xaxis = HTML_X_SPECTRUM,
                         .ylog = true};
        fputs("<figure>", f);
        html_plot(f, &p, l, 2, NULL, 0);
        fputs("<figcaption>", f);
        html_esc(f, title);
        fputs("</figcaption></figure>\n", f);
    }
    hist_free(h);
}

static int write_page(FILE *f, const report_cmp_t *c, const results_t *b, const results_t *n)
{
    fputs("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n<title>squall "
          "comparison</title>\n<style>\n",
          f);
    fputs(html_css, f);
    fputs("</style></head><body>\n<h1>squall comparison: BASE vs NEW</h1>\n", f);
    bool reg = report_cmp_regressed(c);
    fprintf(f, "<div class=\"banner %s\">%s</div>\n", reg ? "bad" : "good",
            reg ? "&#10008; REGRESSION: NEW is significantly worse somewhere below."
                : "No regression found.");
    fputs("<section id=\"runs\"><h2>Runs</h2>\n", f);
    meta_rows(f, b, n);
    fputs("</section><section id=\"verdicts\"><h2>Changes</h2>\n<p class=\"note\">BASE and NEW "
          "are whole-phase values from the histograms; the verdict comes from the test named "
          "below over the per-second samples (p99.9 over the per-second max), and needs a "
          "significant difference of the per-second medians larger than the minimum change.</p>\n",
          f);
    verdict_rows(f, c);
    fputs("<p class=\"note\">Test: " METHOD ".</p></section>\n<section id=\"spectra\"><h2>"
          "Percentile spectra</h2>\n",
          f);
    spectra(f, b, n);
    fputs("</section></body></html>\n", f);
    return ferror(f) ? SQ_EIO : 0;
}

typedef struct {
    const report_cmp_t *cmp;
    const results_t *base, *nw;
} page_t;

static int fill_page(FILE *f, void *ctx)
{
    const page_t *p = ctx;
    return write_page(f, p->cmp, p->base, p->nw);
}

int report_cmp_html(const report_cmp_t *c, const results_t *base, const results_t *nw,
                    const char *path, out_t *o)
{
    return file_write_atomic(path, fill_page, &(page_t){c, base, nw}, o);
}
