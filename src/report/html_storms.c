/* report.html's storm ticks: for each fleet action of the "storms" section (written by the
 * runner for fleet phases), per tick the dispatch spread, the burst length and the latency of
 * the tick's requests, plotted over the phase; and the phase's burst vs quiet latency. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

#define MAX_TICKS 4096

static double ms_of(json_t *o, const char *k)
{
    return (double)json_integer_value(json_object_get(o, k)) / 1e6;
}

/* Burst vs quiet latency of a phase: requests due at a tick vs the rest. */
static void burst_table(FILE *f, json_t *ph)
{
    json_t *b = json_object_get(ph, "burst"), *q = json_object_get(ph, "quiet");
    if (!b || !q)
        return;
    fputs("<table><tr><th>requests</th><th class=\"n\">count</th><th class=\"n\">p50</th>"
          "<th class=\"n\">p90</th><th class=\"n\">p99</th><th class=\"n\">max</th></tr>\n",
          f);
    json_t *rows[] = {b, q};
    const char *names[] = {"due at a tick (burst)", "the rest (quiet)"};
    static const char *const keys[] = {"p50_ns", "p90_ns", "p99_ns", "max_ns"};
    for (size_t i = 0; i < 2; i++) {
        long long count = (long long)json_integer_value(json_object_get(rows[i], "count"));
        fprintf(f, "<tr><td>%s</td><td class=\"n\">%lld</td>", names[i], count);
        for (size_t k = 0; k < 4; k++)
            if (count)
                fprintf(f, "<td class=\"n\">%.2f</td>", ms_of(rows[i], keys[k]));
            else
                fputs("<td class=\"n\">-</td>", f);
        fputs("</tr>\n", f);
    }
    fputs("</table>\n", f);
}

/* The phase's span on the run's time axis, with the marks (phase starts, actions, drops) and
 * generator-bound seconds that fall in it; the tick times' own phase axis when the run wrote no
 * "phases" section (an older squall). */
typedef struct {
    double t0;
    html_plot_t p;
    html_mark_t marks[128];
    size_t nm;
    html_band_t bands[256];
    char note[80];
} span_t;

static void span_init(span_t *s, const results_t *res, const report_series_t *series,
                      const char *phase)
{
    double t1;
    s->nm = 0;
    s->p = (html_plot_t){.xlabel = "tick time since the phase started (s)", .yzero = true};
    s->t0 = 0;
    if (!html_phase_span(res, phase, &s->t0, &t1) || !(t1 > s->t0)) {
        s->t0 = 0;
        return;
    }
    s->p = html_time_plot(res, html_run_seconds(res), s->bands, 256, s->note, sizeof s->note);
    s->p.xmin = s->t0;
    s->p.xmax = t1;
    html_mark_t all[128];
    size_t n = html_phase_marks(res, series, all, 128);
    for (size_t i = 0; i < n; i++)
        if (all[i].x >= s->t0 && all[i].x <= t1)
            s->marks[s->nm++] = all[i];
    size_t nb = 0;
    for (size_t i = 0; i < s->p.n_bands; i++)
        if (s->bands[i].x1 > s->t0 && s->bands[i].x0 < t1)
            s->bands[nb++] = s->bands[i];
    s->p.n_bands = nb;
}

static void action_plot(FILE *f, const span_t *sp, const char *phase, json_t *a, double *buf)
{
    json_t *ticks = json_object_get(a, "ticks"), *t;
    size_t n = json_array_size(ticks), i;
    n = n > MAX_TICKS ? MAX_TICKS : n;
    double *x = buf, *spread = buf + n, *burst = buf + 2 * n, *p99 = buf + 3 * n,
           *p50 = buf + 4 * n;
    json_array_foreach(ticks, i, t)
    {
        if (i >= n)
            break;
        x[i] = sp->t0 + ms_of(t, "t_ns") / 1e3;
        spread[i] = ms_of(t, "dispatch_spread_ns");
        burst[i] = ms_of(t, "burst_ns");
        p99[i] = ms_of(t, "p99_ns");
        p50[i] = ms_of(t, "p50_ns");
    }
    const char *cls = json_string_value(json_object_get(a, "class"));
    char title[256];
    char period[32];
    html_num(ms_of(a, "period_ns") / 1e3, period, sizeof period);
    snprintf(title, sizeof title, "Storm ticks of %s in phase %s (%s, every %s s)",
             cls ? cls : "?", phase, json_string_value(json_object_get(a, "timing")) ?: "?",
             period);
    /* Two plots, each on an axis that fits its timings: with `spread` timing the dispatch
     * spread is the whole period and would flatten the response times beside it. */
    html_line_t spans[] = {
        {x, spread, n, "dispatch spread (first to last write)", 0, 0},
        {x, burst, n, "burst (first write to last answer)", 1, 1},
    };
    html_line_t lat[] = {
        {x, p99, n, "tick's response p99", 2, 0},
        {x, p50, n, "tick's response p50", 3, 1},
    };
    html_plot_t p = sp->p;
    p.title = title;
    p.ylabel = "duration (ms)";
    fputs("<figure class=\"ticks\">\n", f);
    html_plot(f, &p, spans, 2, sp->marks, sp->nm);
    char t2[300];
    snprintf(t2, sizeof t2, "%s: response times of each tick's requests", title);
    p.title = t2;
    p.ylabel = "response time (ms)";
    html_plot(f, &p, lat, 2, sp->marks, sp->nm);
    char spread_max[32];
    html_num(ms_of(a, "max_dispatch_spread_ns"), spread_max, sizeof spread_max);
    fprintf(f, "<figcaption>");
    html_esc(f, title);
    fprintf(f,
            ": %lld requests over %zu ticks; widest dispatch spread %s ms; at most %lld in "
            "flight at once</figcaption></figure>\n",
            (long long)json_integer_value(json_object_get(a, "requests")), n, spread_max,
            (long long)json_integer_value(json_object_get(a, "max_peak_in_flight")));
}

void html_storms(FILE *f, const results_t *res, const report_series_t *series)
{
    json_t *s = results_section(res, "storms"), *ph;
    const char *phase;
    if (!s || !json_object_size(s))
        return;
    double *buf = malloc(5 * MAX_TICKS * sizeof(double));
    if (!buf)
        return;
    fputs("<section id=\"storms\"><h2>Storm ticks</h2>\n<p class=\"note\">Fleet phases: every "
          "tick's requests, from the first written to the last answered; response times from "
          "each request's intended start.</p>\n",
          f);
    json_object_foreach(s, phase, ph)
    {
        json_t *a;
        size_t i;
        fputs("<h3>phase ", f);
        html_esc(f, phase);
        fputs("</h3>\n", f);
        burst_table(f, ph);
        span_t *sp = malloc(sizeof(*sp));
        if (!sp)
            break;
        span_init(sp, res, series, phase);
        json_array_foreach(json_object_get(ph, "actions"), i, a) action_plot(f, sp, phase, a, buf);
        free(sp);
    }
    free(buf);
    fputs("</section>\n", f);
}
