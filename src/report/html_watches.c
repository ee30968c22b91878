/* report.html's watches over time: per second, the streams open at its end, dropped and
 * reconnected in it, the events received and their propagation p99 (the run's figures of
 * series.csv); a series.csv without them falls back to each phase's reconnect log (the "watches"
 * section) for the drops and reconnects. On the run's time axis; html_plots.c marks the seconds
 * streams were dropped on every plot over time. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

/* Sums a per-second array (NaN seconds left out). */
static double total(const double *y, size_t n)
{
    double t = 0;
    for (size_t k = 0; k < n; k++)
        t += isnan(y[k]) ? 0 : y[k];
    return t;
}

/* The series' events per second and propagation p99, each on its own plot. */
static void events(FILE *f, const report_series_t *s, const html_plot_t *p, const double *x,
                   size_t secs, double *y, const html_mark_t *m, size_t nm)
{
    html_plot_t q = *p;
    if (html_run_figure(s, RESULTS_RUN_WATCH_EVENTS, y, secs)) {
        html_line_t l[] = {{x, y, secs, "events received", 2, 0}};
        q.title = "Watch events received in each second, every watch class";
        q.ylabel = "events per second";
        fputs("<figure id=\"watch-events\">\n", f);
        html_plot(f, &q, l, 1, m, nm);
        fprintf(f,
                "<figcaption>Watch events received in each second (%.0f in all)"
                "</figcaption></figure>\n",
                total(y, secs));
    }
    if (html_run_figure(s, RESULTS_RUN_WATCH_P99, y, secs)) {
        bool up = report_series_upper(s);
        html_line_t l[] = {
            {x, y, secs, up ? "propagation p99 (upper bound)" : "propagation p99", 3, 0}};
        q.title = "Watch propagation p99 in each second: from the stamp written into an object "
                  "to its event's arrival, events that carried a stamp";
        q.ylabel = "propagation (ms, log scale)";
        q.ylog = true;
        q.yzero = false;
        fputs("<figure id=\"watch-propagation\">\n", f);
        html_plot(f, &q, l, 1, m, nm);
        fputs("<figcaption>Watch propagation p99 in each second (no point: no stamped event)", f);
        fputs(up ? "; merged: each second shows the largest shard's p99, an upper bound of the "
                   "pooled p99"
                 : "",
              f);
        fputs("</figcaption></figure>\n", f);
    }
}

void html_watches(FILE *f, const results_t *res, const report_series_t *s)
{
    json_t *w = results_section(res, "watches");
    size_t secs = html_run_seconds(res);
    double *all = calloc(5 * secs, sizeof(double));
    if (!all)
        return;
    double *x = all, *open = all + secs, *drops = all + 2 * secs, *recon = all + 3 * secs,
           *y = all + 4 * secs;
    for (size_t k = 0; k < secs; k++)
        x[k] = (double)k + 0.5;
    bool from_series =
        s && html_run_figure(s, RESULTS_RUN_WATCH_OPEN, open, secs) && total(open, secs) > 0;
    if (!from_series && (!w || !json_object_size(w))) {
        free(all); /* no watch stream in the run */
        return;
    }
    if (from_series) {
        html_run_figure(s, RESULTS_RUN_WATCH_DROPPED, drops, secs);
        html_run_figure(s, RESULTS_RUN_WATCH_RECONNECTS, recon, secs);
    } else {
        html_reconnect_count(res, "ended_ns", drops, secs);
        html_reconnect_count(res, "sent_ns", recon, secs);
    }
    fprintf(f,
            "<section id=\"watches\"><h2>Watches over time</h2>\n<p class=\"note\">%s "
            "Seconds with drops are marked on every plot over time.</p>\n",
            from_series ? "Every watch class, per second (series.csv's run_watch_* columns)."
                        : "From each phase's reconnect log: when a stream ended and was "
                          "reopened (its reconnect sent).");
    html_mark_t marks[128];
    html_band_t bands[256];
    char note[80];
    size_t nm = html_phase_marks(res, s, marks, 128);
    html_line_t l[] = {{x, drops, secs, "streams dropped", 1, 0},
                       {x, recon, secs, "reconnects sent", 0, 1},
                       {x, open, secs, "streams open (end of the second)", 2, 2}};
    html_plot_t p = html_time_plot(res, secs, bands, 256, note, sizeof note);
    p.title = from_series ? "Watch streams open at the end of each second, dropped and "
                            "reconnects sent in it"
                          : "Watch streams dropped and reconnects sent in each second";
    p.ylabel = "streams";
    p.ywhole = true;
    fputs("<figure id=\"watch-drops\">\n", f);
    html_plot(f, &p, l, from_series ? 3 : 2, marks, nm);
    fprintf(f,
            "<figcaption>Watch streams dropped (%.0f) and reconnects sent (%.0f), every watch "
            "class</figcaption></figure>\n",
            total(drops, secs), total(recon, secs));
    if (from_series)
        events(f, s, &p, x, secs, y, marks, nm);
    fputs("</section>\n", f);
    free(all);
}
