/* report.html's watches over time: the moments streams were dropped and the reconnects sent,
 * per second, from each phase's reconnect log (the "watches" section), on the run's time axis;
 * the drops are also marked on every plot over time. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

/* The run second a phase started at ("phases" section); NAN when unknown. */
static double phase_start(const results_t *res, const char *phase)
{
    json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    size_t i;
    json_array_foreach(list, i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        if (name && !strcmp(name, phase))
            return json_number_value(json_object_get(p, "start_s"));
    }
    return NAN;
}

/* Adds each entry of the reconnect log's column key (ns since the phase's start; 0 = not sent)
 * to per[second] over secs seconds; returns how many it added. */
static size_t count_column(const results_t *res, const char *key, double *per, size_t secs)
{
    json_t *w = results_section(res, "watches"), *ph, *v;
    const char *name;
    size_t n = 0, i;
    json_object_foreach(w, name, ph)
    {
        double t0 = phase_start(res, name);
        json_array_foreach(json_object_get(json_object_get(ph, "reconnect_log"), key), i, v)
        {
            double t = t0 + (double)json_integer_value(v) / 1e9;
            if (isnan(t) || json_integer_value(v) <= 0 || t < 0 || t >= (double)secs)
                continue;
            per[(size_t)t]++;
            n++;
        }
    }
    return n;
}

static size_t run_seconds(const results_t *res)
{
    double d = ceil((double)results_meta(res)->duration_ns / 1e9 - 1e-6);
    return d >= 1 ? (size_t)d : 1;
}

size_t html_drop_marks(const results_t *res, html_mark_t *m, size_t n, size_t cap)
{
    static char labels[64][32]; /* the page is written by one thread */
    size_t secs = run_seconds(res);
    double *per = calloc(secs, sizeof(double));
    if (!per)
        return n;
    count_column(res, "ended_ns", per, secs);
    for (size_t k = 0, used = 0; k < secs && n < cap && used < 64; k++)
        if (per[k] > 0) {
            snprintf(labels[used], sizeof labels[0], "%.0f dropped", per[k]);
            m[n++] = (html_mark_t){(double)k, labels[used++], true};
        }
    free(per);
    return n;
}

void html_watches(FILE *f, const results_t *res)
{
    json_t *w = results_section(res, "watches");
    if (!w || !json_object_size(w))
        return;
    size_t secs = run_seconds(res);
    double *all = calloc(3 * secs, sizeof(double));
    if (!all)
        return;
    double *x = all, *drops = all + secs, *recon = all + 2 * secs;
    for (size_t k = 0; k < secs; k++)
        x[k] = (double)k + 0.5;
    size_t nd = count_column(res, "ended_ns", drops, secs);
    size_t nr = count_column(res, "sent_ns", recon, secs);
    fputs("<section id=\"watches\"><h2>Watches over time</h2>\n<p class=\"note\">From each "
          "phase's reconnect log: when a stream ended and was reopened (its reconnect sent). "
          "Seconds with drops are marked on every plot over time.</p>\n",
          f);
    html_mark_t marks[128];
    html_band_t bands[256];
    char note[80];
    html_time_note(res, note, sizeof note);
    size_t nm = html_phase_marks(res, NULL, marks, 128);
    html_line_t l[] = {{x, drops, secs, "streams dropped", 1, 0},
                       {x, recon, secs, "reconnects sent", 0, 1}};
    html_plot_t p = {.title = "Watch streams dropped and reconnects sent in each second",
                     .xlabel = "time since the run started (s)",
                     .ylabel = "streams per second",
                     .yzero = true,
                     .bands = bands,
                     .n_bands = html_bound_bands(res, bands, 256),
                     .band_label = "generator-bound second",
                     .xmin = 0,
                     .xmax = (double)secs,
                     .xnote = note};
    fputs("<figure id=\"watch-drops\">\n", f);
    html_plot(f, &p, l, 2, marks, nm);
    fprintf(f, "<figcaption>Watch streams dropped (%zu) and reconnects sent (%zu), every watch "
               "class</figcaption></figure>\n</section>\n",
            nd, nr);
    free(all);
}
