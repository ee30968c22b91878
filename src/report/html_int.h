/* report.html's internals: escaping and the SVG line plot (html_svg.c), the page's sections
 * (report.c, html_plots.c). */
#ifndef SQUALL_HTML_INT_H
#define SQUALL_HTML_INT_H

#include <stdbool.h>
#include <stdio.h>

#include "squall/report.h"

/* The page's style sheet (report.c), shared by the comparison page. */
extern const char html_css[];

/* Writes s with &, <, >, " escaped. */
void html_esc(FILE *f, const char *s);

enum html_xaxis { HTML_X_LINEAR, HTML_X_SPECTRUM /* x = percentile, spaced as -log10(1-p) */ };

typedef struct {
    const char *title, *xlabel, *ylabel; /* labels carry their units: "time (s)" */
    enum html_xaxis xaxis;
    bool ylog;  /* log10 y axis; values <= 0 are left out */
    bool yzero; /* linear y axis starts at 0 */
} html_plot_t;

/* One line: n points; a NaN y breaks the line. style picks the colour (Okabe-Ito) and the marker
 * shape; dash picks the dash pattern (0 solid). */
typedef struct {
    const double *x, *y;
    size_t n;
    const char *label;
    int style, dash;
} html_line_t;

/* A vertical mark across the plot (a phase boundary) labelled at its top. */
typedef struct {
    double x;
    const char *label;
} html_mark_t;

/* Writes <svg class="plot"> with axes, ticks, one <g class="series"> per line, marks and a
 * legend. Lines with no drawable point still get their (empty) group and legend entry. */
void html_plot(FILE *f, const html_plot_t *p, const html_line_t *lines, size_t n_lines,
               const html_mark_t *marks, size_t n_marks);

/* html_tables.c: per phase x class tables. html_plots.c: the plot sections of the page. */
void html_tables(FILE *f, const results_t *res, const report_series_t *s);
/* The style (colour and marker) of a class: its rank among the classes of res's cells, so a
 * class looks the same in every plot. */
int html_class_style(const results_t *res, const char *cls);
/* The percentile spectrum of class cls, metric m (every phase pooled, cancelled left out) into
 * x (percentiles) and y (ms): p = 100 (1 - 10^(-k/10)) for k = 0, 1, ... up to the highest
 * percentile the sample count resolves; returns the number of points. h is scratch. */
#define HTML_SPECTRUM_POINTS 61
size_t html_spectrum(const results_t *res, int m, const char *cls, hist_t *h, double *x, double *y);
/* Marks on the run's time axis (s): phase boundaries (the "phases" section's starts when the run
 * wrote one, else the first second each phase appears in s), then the instants of actions and
 * collects. */
size_t html_phase_marks(const results_t *res, const report_series_t *s, html_mark_t *m,
                        size_t cap);
/* html_metrics.c: the target's scraped metrics ("metrics" section), when the plan observed any. */
void html_metrics(FILE *f, const results_t *res, const report_series_t *s);
/* html_metrics.c: the actions and collects ("actions" section), each saved file linked. */
void html_actions(FILE *f, const results_t *res);
/* html_storms.c: the "storms" section's ticks, when a fleet phase ran. */
void html_storms(FILE *f, const results_t *res);
void html_plots_time(FILE *f, const results_t *res, const report_series_t *s);
void html_plots_spectrum(FILE *f, const results_t *res);

#endif
