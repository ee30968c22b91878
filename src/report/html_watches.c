/* report.html's watches over time: the moments streams were dropped and the reconnects sent,
 * per second, from each phase's reconnect log (the "watches" section), on the run's time axis
 * (html_plots.c counts them and marks the drops on every plot over time). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

void html_watches(FILE *f, const results_t *res)
{
    json_t *w = results_section(res, "watches");
    if (!w || !json_object_size(w))
        return;
    size_t secs = html_run_seconds(res);
    double *all = calloc(3 * secs, sizeof(double));
    if (!all)
        return;
    double *x = all, *drops = all + secs, *recon = all + 2 * secs;
    for (size_t k = 0; k < secs; k++)
        x[k] = (double)k + 0.5;
    size_t nd = html_reconnect_count(res, "ended_ns", drops, secs);
    size_t nr = html_reconnect_count(res, "sent_ns", recon, secs);
    fputs("<section id=\"watches\"><h2>Watches over time</h2>\n<p class=\"note\">From each "
          "phase's reconnect log: when a stream ended and was reopened (its reconnect sent). "
          "Seconds with drops are marked on every plot over time.</p>\n",
          f);
    html_mark_t marks[128];
    html_band_t bands[256];
    char note[80];
    size_t nm = html_phase_marks(res, NULL, marks, 128);
    html_line_t l[] = {{x, drops, secs, "streams dropped", 1, 0},
                       {x, recon, secs, "reconnects sent", 0, 1}};
    html_plot_t p = html_time_plot(res, secs, bands, 256, note, sizeof note);
    p.title = "Watch streams dropped and reconnects sent in each second";
    p.ylabel = "streams per second";
    fputs("<figure id=\"watch-drops\">\n", f);
    html_plot(f, &p, l, 2, marks, nm);
    fprintf(f, "<figcaption>Watch streams dropped (%zu) and reconnects sent (%zu), every watch "
               "class</figcaption></figure>\n</section>\n",
            nd, nr);
    free(all);
}
