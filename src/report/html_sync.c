/* report.html's synchronisation gauge: for each fleet action of the "sync" section (gauge.c),
 * R̄ of its windows of one period over the run's time, on a 0..1 axis (0 = sends evenly spread
 * over the period, 1 = all at one instant), with a reference line at each max-sync bound the
 * plan's objectives set on it (the "judgement" section) and the moments of the phases, actions
 * and target faults marked (html_phase_marks). Partial windows (cut by the end of the phase or
 * run) are drawn as a line of their own, since few sends make R̄ large by chance. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"

#define MAX_WINDOWS 4096
#define MAX_LEVELS  8
#define MAX_MARKS   128

/* The max-sync bounds the plan set on class cls (or on every fleet action: "*"). */
static size_t bounds(const results_t *res, const char *cls, html_level_t *lv, char (*text)[48],
                     size_t cap)
{
    json_t *objs = json_object_get(results_section(res, "judgement"), "objectives"), *o;
    size_t i, n = 0;
    json_array_foreach(objs, i, o)
    {
        const char *lim = json_string_value(json_object_get(o, "limit"));
        const char *c = json_string_value(json_object_get(o, "class"));
        if (n + 1 >= cap || !lim || strcmp(lim, "max-sync") || !c || (strcmp(c, "*") && strcmp(c, cls)))
            continue;
        double v = json_number_value(json_object_get(o, "value"));
        snprintf(text[n], sizeof text[n], "max-sync %g", v);
        lv[n] = (html_level_t){.y = v, .label = text[n], .style = 1};
        n++;
    }
    return n;
}

static void action_plot(FILE *f, const results_t *res, const char *phase, json_t *a, double *buf,
                        html_mark_t *marks, size_t n_marks)
{
    json_t *wins = json_object_get(a, "windows"), *w;
    size_t n = json_array_size(wins), i;
    n = n > MAX_WINDOWS ? MAX_WINDOWS : n;
    double *x = buf, *whole = buf + n, *partial = buf + 2 * n;
    double period = json_number_value(json_object_get(a, "period_s"));
    json_array_foreach(wins, i, w)
    {
        if (i >= n)
            break;
        /* Each window at its middle; a partial one only on its own line. */
        x[i] = json_number_value(json_object_get(w, "start_s")) + period / 2;
        json_t *rj = json_object_get(w, "r_bar"); /* null: a window without sends, no point */
        double r = json_is_number(rj) ? json_number_value(rj) : NAN;
        bool cut = json_is_true(json_object_get(w, "partial"));
        whole[i] = cut ? NAN : r;
        partial[i] = cut ? r : NAN;
    }
    const char *cls = json_string_value(json_object_get(a, "class"));
    html_level_t lv[MAX_LEVELS];
    char text[MAX_LEVELS][48];
    size_t nl = bounds(res, cls ? cls : "", lv, text, MAX_LEVELS);
    lv[nl++] = (html_level_t){.y = 1, .label = "all at one instant", .style = -1};
    char title[256], per[32];
    html_num(period, per, sizeof per);
    snprintf(title, sizeof title, "Synchronisation of %s in phase %s (windows of %s s)",
             cls ? cls : "?", phase, per);
    html_line_t lines[] = {
        {x, whole, n, "R\xcc\x84 of a whole window", 0, 0},
        {x, partial, n, "R\xcc\x84 of a partial window", 0, 1},
    };
    html_plot_t p = {.title = title,
                     .xlabel = "time since the run started (s)",
                     .ylabel = "R\xcc\x84 (0 spread, 1 all at once)",
                     .yzero = true,
                     .xmin = 0,
                     .xmax = (double)html_run_seconds(res),
                     .levels = lv,
                     .n_levels = nl};
    size_t cut = 0;
    for (i = 0; i < n; i++)
        cut += !isnan(partial[i]);
    html_figure(f, "sync", &p, lines, cut ? 2 : 1, marks, n_marks);
}

void html_sync(FILE *f, const results_t *res)
{
    json_t *s = results_section(res, "sync"), *ph;
    const char *phase;
    if (!s || !json_object_size(s))
        return;
    double *buf = malloc(3 * MAX_WINDOWS * sizeof(double));
    html_mark_t *marks = malloc(MAX_MARKS * sizeof(*marks));
    if (!buf || !marks) {
        free(buf);
        free(marks);
        return;
    }
    size_t n_marks = html_phase_marks(res, NULL, marks, MAX_MARKS);
    fputs("<section id=\"sync\"><h2>Synchronisation</h2>\n<p class=\"note\">Fleet actions: "
          "per window of one period from the phase's start, the mean resultant length "
          "R&#772; of the sends' phases in the period (Rayleigh; 0 = evenly spread, "
          "1 = all at one instant). Vertical lines: phases, actions and target faults.</p>\n",
          f);
    json_object_foreach(s, phase, ph)
    {
        json_t *a;
        size_t i;
        json_array_foreach(json_object_get(ph, "actions"), i, a)
            action_plot(f, res, phase, a, buf, marks, n_marks);
    }
    free(buf);
    free(marks);
    fputs("</section>\n", f);
}
