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

enum html_xaxis { HTML_X_LINEAR, HTML_X_LOG /* log10 x axis; values <= 0 are left out */ };

/* A span of x shaded behind the lines (a generator-bound second). */
typedef struct {
    double x0, x1;
} html_band_t;

/* A horizontal line across the plot at y (an objective's threshold), labelled at its right end
 * in the colour of style (-1: grey). */
typedef struct {
    double y;
    const char *label;
    int style;
} html_level_t;

typedef struct {
    const char *title, *xlabel, *ylabel; /* labels carry their units: "time (s)" */
    enum html_xaxis xaxis;
    bool ylog;  /* log10 y axis; values <= 0 are left out */
    bool yzero; /* linear y axis starts at 0 */
    bool ywhole; /* y counts things (streams, requests): ticks on whole numbers only */
    const html_band_t *bands;
    size_t n_bands;
    const char *band_label; /* the legend's name for the bands ("generator-bound") */
    const html_level_t *levels;
    size_t n_levels;
    double xmin, xmax; /* when xmax > xmin: the linear x range (the run's seconds), or what a
                        * log x axis must at least show (the objectives' thresholds) */
    const char *xnote; /* written under the x axis label's right end ("0 s = 15:04:05 UTC") */
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
    bool alert; /* drawn in the alert colour (a moment streams were dropped) */
} html_mark_t;

/* html_plot inside <figure class="cls"> (no class when NULL) captioned with the plot's title. */
void html_figure(FILE *f, const char *cls, const html_plot_t *p, const html_line_t *lines,
                 size_t n_lines, const html_mark_t *marks, size_t n_marks);

/* A heat map: nx columns from x0 in steps of dx, ny rows between the ny + 1 edges yedge (in y's
 * units, increasing; a log axis when the plot's ylog), count[ix * ny + iy] per cell; the shade of
 * a cell grows with log(count), empty cells are left blank. */
typedef struct {
    size_t nx, ny;
    double x0, dx;
    const double *yedge, *count;
} html_heat_t;

/* Writes <svg class="plot heat"> with the plot's axes, the cells (<g class="heat">), marks and
 * bands, and a shade scale labelled with counts. */
void html_heat(FILE *f, const html_plot_t *p, const html_heat_t *h, const html_mark_t *marks,
               size_t n_marks);

/* A number for people, never in scientific notation and, as on the terminal, without thousands
 * separators: 12000 / 250 / 1.5 / 0.002. */
void html_num(double v, char *buf, size_t cap);

/* Writes <svg class="plot"> with axes, ticks, one <g class="series"> per line, marks and a
 * legend. Lines with no drawable point still get their (empty) group and legend entry. */
void html_plot(FILE *f, const html_plot_t *p, const html_line_t *lines, size_t n_lines,
               const html_mark_t *marks, size_t n_marks);

/* html_tables.c: per phase x class tables. html_plots.c: the plot sections of the page. */
void html_tables(FILE *f, const results_t *res, const report_series_t *s);
/* The style (colour and marker) of a class: its rank among the classes of res's cells, so a
 * class looks the same in every plot. */
int html_class_style(const results_t *res, const char *cls);
/* The share of class cls's requests in phase (NULL: every phase) slower than x, from the
 * histograms of metric m (cancelled left out): x in ms at each bucket's top, y in percent
 * (100 down to the last bucket's share above 0); at most cap points. h is scratch. */
size_t html_exceed(const results_t *res, int m, const char *phase, const char *cls, hist_t *h,
                   double *x, double *y, size_t cap);
/* An objective on a percentile of a metric ("response") of class cls, from the "objectives"
 * section's whole-run checks. */
typedef struct {
    double pct, ms;
    char label[96];
} html_threshold_t;
size_t html_thresholds(const results_t *res, const char *metric, const char *cls,
                       html_threshold_t *out, size_t cap);
/* The p99 of class cls in each second of s (the slower row when two phases share a second):
 * x = second + 0.5, y = NaN where nothing completed; returns the seconds written (at most cap)
 * and sets *any when some second has a value. */
size_t html_class_p99(const report_series_t *s, const char *cls, double *x, double *y, size_t cap,
                      bool *any);
/* A run's figure of the second (report_row_t's run[fig], e.g. RESULTS_RUN_WATCH_OPEN) over
 * seconds 0..secs-1 of s into y, from each second's first row (they all carry it); NaN where no
 * row or not written. True when some second has one. */
bool html_run_figure(const report_series_t *s, enum results_run_figure fig, double *y, size_t secs);
/* The generator-bound seconds as bands [s, s + 1) of the time axis. */
size_t html_bound_bands(const results_t *res, html_band_t *b, size_t cap);
/* A plot over the run's secs seconds: x in seconds since the start with the wall-clock start
 * written into note, the generator-bound seconds shaded (into bands, at most cap). */
html_plot_t html_time_plot(const results_t *res, size_t secs, html_band_t *bands, size_t cap,
                           char *note, size_t note_cap);
/* "0 s = 2026-12-02 15:04:05 UTC": the time axis's wall-clock start ("" when unknown). */
void html_time_note(const results_t *res, char *buf, size_t cap);
/* Marks on the run's time axis (s): phase boundaries (the "phases" section's starts when the run
 * wrote one, else the first second each phase appears in s, which may be NULL), then the
 * instants of actions and collects, then the seconds watch streams were dropped. */
size_t html_phase_marks(const results_t *res, const report_series_t *s, html_mark_t *m,
                        size_t cap);
/* Marks at the seconds watch streams were dropped, after n marks in m. */
size_t html_drop_marks(const results_t *res, const report_series_t *s, html_mark_t *m, size_t n,
                       size_t cap);
/* Adds each entry of the "watches" section's reconnect-log column key ("ended_ns", "sent_ns":
 * ns since the phase's start; 0 = not sent) to per[run second] over secs seconds; returns how
 * many it added. */
size_t html_reconnect_count(const results_t *res, const char *key, double *per, size_t secs);
/* A phase's start and end in run seconds (the "phases" section); false (NaN) when unknown. */
bool html_phase_span(const results_t *res, const char *phase, double *t0, double *t1);
/* The run's whole seconds (at least 1). */
size_t html_run_seconds(const results_t *res);
/* html_watches.c: watch streams open, dropped and reconnected, events and propagation p99 per
 * second (series.csv's run figures, else the "watches" section's reconnect log); nothing when
 * the run opened no watch stream. */
void html_watches(FILE *f, const results_t *res, const report_series_t *s);
/* html_metrics.c: the target's scraped metrics ("metrics" section), when the plan observed any. */
void html_metrics(FILE *f, const results_t *res, const report_series_t *s);
/* html_metrics.c: the actions and collects ("actions" section), each saved file linked. */
void html_actions(FILE *f, const results_t *res);
/* html_storms.c: the "storms" section's ticks, when a fleet phase ran. */
void html_storms(FILE *f, const results_t *res, const report_series_t *s);
/* html_sync.c: the "sync" section's R̄ per window of each fleet action, when a fleet ran. */
void html_sync(FILE *f, const results_t *res);
void html_plots_time(FILE *f, const results_t *res, const report_series_t *s);
/* html_tails.c: per phase, the share of requests slower than x; per class, the latency heat
 * map over time (series-hist.csv's bins). */
void html_plots_tails(FILE *f, const results_t *res);
void html_plots_heat(FILE *f, const results_t *res, const report_series_t *s);

#endif
