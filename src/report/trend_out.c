/* A trend as output: the terminal table, the JSON document (--json, "squall-trend" v1) and the
 * HTML page (--html): one plot per phase x class with change points marked. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "compare_int.h"
#include "html_int.h"
#include "squall/err.h"
#include "squall/file.h"
#include "squall/trend.h"

#define METHOD_TEXT                                                                                \
    TREND_METHOD ": cost sum (y - segment mean)^2 / sigma^2, sigma from the median absolute "      \
                 "deviation of first differences / (0.6745 sqrt 2), at least half the minimum "    \
                 "change; penalty 2 ln n per change; confidence 1 - p of the two-sided "           \
                 "Mann-Whitney U test between the segments before and after the change; a "        \
                 "change that is not significant is merged into its neighbours, the weakest "      \
                 "first, and the others are tested again"

static bool is_rate(const trend_series_t *s)
{
    return strcmp(s->metric, "error_rate") == 0;
}

/* A fleet action's largest R̄ per run: no unit. */
static bool is_sync(const trend_series_t *s)
{
    return strcmp(s->metric, "sync_max") == 0;
}

static void value_text(const trend_series_t *s, double v, char *buf, size_t cap)
{
    if (is_sync(s) && !isnan(v))
        snprintf(buf, cap, "%.3f", v);
    else
        cmp_value_text(is_rate(s), v, buf, cap);
}

static void size_text(const trend_series_t *s, const trend_change_t *c, char *buf, size_t cap)
{
    if (is_sync(s))
        snprintf(buf, cap, "%+.3f", c->after - c->before);
    else
        cmp_change_text(is_rate(s), c->before, c->after - c->before, buf, cap);
}

static const char *change_word(const trend_series_t *s, const trend_change_t *c)
{
    if (!c->significant)
        return "not significant";
    if (is_sync(s))
        return c->worse ? "more synchronised" : "less synchronised";
    return is_rate(s) ? (c->worse ? "more errors" : "fewer errors")
                      : (c->worse ? "slower" : "faster");
}

/* The last value of a series that is not NaN. */
static double last_value(const trend_series_t *s, size_t n)
{
    for (size_t i = n; i > 0; i--)
        if (!isnan(s->values[i - 1]))
            return s->values[i - 1];
    return NAN;
}

static void print_group(const trend_group_t *g, size_t gi, out_t *o)
{
    out_print(o, "group %zu: plan %s (sha256 %.12s), overrides: %s, squall %s: %zu runs\n", gi + 1,
              g->plan, g->plan_sha256, *g->overrides ? g->overrides : "none", g->version,
              g->n_runs);
    for (size_t r = 0; r < g->n_runs; r++)
        out_print(o, "  run %zu: %s\n", r + 1, g->dirs[r]);
    out_print(o, "%-12s %-16s %-10s %10s %10s  %s\n", "phase", "class", "metric", "first", "last",
              "changes (first run after; size; confidence)");
    for (size_t i = 0; i < g->n_series + g->n_sync; i++) {
        const trend_series_t *s = i < g->n_series ? &g->series[i] : &g->sync[i - g->n_series];
        char a[32], b[32];
        double first = NAN;
        for (size_t r = 0; r < g->n_runs && isnan(first); r++)
            first = s->values[r];
        value_text(s, first, a, sizeof a);
        value_text(s, last_value(s, g->n_runs), b, sizeof b);
        out_print(o, "%-12s %-16s %-10s %10s %10s  ", s->phase, s->cls, s->metric, a, b);
        if (!s->n_changes)
            out_print(o, "none");
        for (size_t c = 0; c < s->n_changes; c++) {
            char sz[48];
            size_text(s, &s->changes[c], sz, sizeof sz);
            out_print(o, "%srun %zu: %s, %.1f%%, %s", c ? "; " : "", s->changes[c].first + 1, sz,
                      100 * (1 - s->changes[c].p), change_word(s, &s->changes[c]));
        }
        out_print(o, "\n");
    }
}

void trend_print(const trend_t *t, out_t *o)
{
    out_print(o, "method: %s\n", TREND_METHOD);
    for (size_t g = 0; g < trend_group_count(t); g++)
        print_group(trend_group_at(t, g), g, o);
    out_print(o, "%s\n",
              trend_newest_worse(t) ? "verdict: the newest segment of a series is a significant "
                                      "change for the worse"
                                    : "verdict: no series ends in a significant change for the "
                                      "worse");
}

static json_t *num(double v)
{
    return isnan(v) ? json_null() : json_real(v);
}

static json_t *series_json(const trend_series_t *s, size_t n)
{
    json_t *vals = json_array(), *ch = json_array();
    for (size_t r = 0; r < n; r++)
        json_array_append_new(vals, num(s->values[r]));
    for (size_t c = 0; c < s->n_changes; c++) {
        const trend_change_t *x = &s->changes[c];
        json_array_append_new(
            ch, json_pack("{s:I, s:o, s:o, s:o, s:f, s:f, s:b, s:s}", "first_run",
                          (json_int_t)x->first + 1, "before", num(x->before), "after",
                          num(x->after), "size", num(x->after - x->before), "p", x->p, "confidence",
                          1 - x->p, "significant", x->significant, "verdict", change_word(s, x)));
    }
    return json_pack("{s:s, s:s, s:s, s:s, s:o, s:o, s:o, s:o}", "phase", s->phase, "class", s->cls,
                     "metric", s->metric, "unit",
                     is_sync(s) ? "r_bar" : is_rate(s) ? "fraction" : "ms", "objective",
                     num(s->objective), "sigma", num(s->sigma), "values", vals, "changes", ch);
}

static json_t *group_json(const trend_group_t *g)
{
    json_t *runs = json_array(), *series = json_array();
    for (size_t r = 0; r < g->n_runs; r++)
        json_array_append_new(runs,
                              json_pack("{s:I, s:s, s:I}", "run", (json_int_t)r + 1, "dir",
                                        g->dirs[r], "start_unix_ms", (json_int_t)g->start_ms[r]));
    for (size_t i = 0; i < g->n_series; i++)
        json_array_append_new(series, series_json(&g->series[i], g->n_runs));
    for (size_t i = 0; i < g->n_sync; i++)
        json_array_append_new(series, series_json(&g->sync[i], g->n_runs));
    return json_pack("{s:s, s:s, s:s, s:s, s:f, s:o, s:o}", "plan", g->plan, "plan_sha256",
                     g->plan_sha256, "overrides", g->overrides, "squall_version", g->version,
                     "penalty", trend_penalty(g->n_runs), "runs", runs, "series", series);
}

json_t *trend_json(const trend_t *t)
{
    json_t *groups = json_array();
    for (size_t g = 0; groups && g < trend_group_count(t); g++)
        json_array_append_new(groups, group_json(trend_group_at(t, g)));
    return json_pack("{s:s, s:i, s:s, s:b, s:o}", "format", "squall-trend", "version", 1, "method",
                     METHOD_TEXT, "newest_worse", trend_newest_worse(t), "groups", groups);
}

/* One plot of (phase, class): its three latency series over the runs, the objectives as flat
 * dashed lines, and every change of those series marked between the runs it separates. */
static void plot_key(FILE *f, const trend_group_t *g, const trend_series_t *s)
{
    size_t n = g->n_runs;
    double *x = calloc(n, sizeof(*x)), ox[2] = {1, (double)n}, oy[3][2];
    html_line_t lines[6];
    html_mark_t marks[64];
    char labels[64][96], olab[3][48];
    size_t nl = 0, nm = 0;
    if (!x)
        return;
    for (size_t r = 0; r < n; r++)
        x[r] = (double)r + 1;
    for (int m = 0; m < 4; m++) {
        if (m < 3)
            lines[nl++] =
                (html_line_t){.x = x, .y = s[m].values, .n = n, .label = s[m].metric, .style = m};
        for (size_t c = 0; c < s[m].n_changes; c++) {
            /* Changes of several metrics between the same two runs share one mark. */
            double at = (double)s[m].changes[c].first + 0.5;
            size_t k = 0;
            while (k < nm && marks[k].x != at)
                k++;
            if (k == nm && nm == 64)
                continue;
            size_t used = k < nm ? strlen(labels[k]) : 0;
            snprintf(labels[k] + used, sizeof labels[k] - used, "%s%s%s", used ? ", " : "",
                     m == 3 ? "errors" : s[m].metric,
                     s[m].changes[c].significant ? (s[m].changes[c].worse ? " up" : " down") : "?");
            marks[k] = (html_mark_t){.x = at, .label = labels[k]};
            nm += k == nm;
        }
    }
    for (int m = 0; m < 3; m++)
        if (!isnan(s[m].objective)) {
            oy[m][0] = oy[m][1] = s[m].objective;
            snprintf(olab[m], sizeof olab[m], "objective %s", s[m].metric);
            lines[nl++] =
                (html_line_t){.x = ox, .y = oy[m], .n = 2, .label = olab[m], .style = m, .dash = 1};
        }
    char title[256];
    snprintf(title, sizeof title, "%s / %s", s->phase, s->cls);
    html_plot_t p = {.title = title,
                     .xlabel = "run (in start order)",
                     .ylabel = "response time (ms)",
                     .yzero = true};
    fputs("<figure>", f);
    html_plot(f, &p, lines, nl, marks, nm);
    fputs("</figure>\n", f);
    free(x);
}

/* One plot of a fleet action's sync_max over the runs on a 0..1 axis, its max-sync bound as a
 * dashed line, its changes marked. */
static void plot_sync(FILE *f, const trend_group_t *g, const trend_series_t *s)
{
    size_t n = g->n_runs, nm = 0;
    double *x = calloc(n, sizeof(*x)), ox[2] = {1, (double)n}, oy[2] = {s->objective, s->objective};
    html_mark_t marks[64];
    if (!x)
        return;
    for (size_t r = 0; r < n; r++)
        x[r] = (double)r + 1;
    for (size_t c = 0; c < s->n_changes && nm < 64; c++)
        marks[nm++] = (html_mark_t){.x = (double)s->changes[c].first + 0.5,
                                    .label = !s->changes[c].significant ? "sync?"
                                             : s->changes[c].worse      ? "sync up"
                                                                        : "sync down"};
    html_line_t lines[2] = {
        {.x = x, .y = s->values, .n = n, .label = "largest R\xcc\x84 of a whole window"},
        {.x = ox, .y = oy, .n = 2, .label = "max-sync", .style = 1, .dash = 1},
    };
    html_level_t one = {.y = 1, .label = "all at one instant", .style = -1};
    char title[256];
    snprintf(title, sizeof title, "%s / %s: synchronisation", s->phase, s->cls);
    html_plot_t p = {.title = title,
                     .xlabel = "run (in start order)",
                     .ylabel = "R\xcc\x84 (0 spread, 1 all at once)",
                     .yzero = true,
                     .levels = &one,
                     .n_levels = 1};
    fputs("<figure>", f);
    html_plot(f, &p, lines, isnan(s->objective) ? 1 : 2, marks, nm);
    fputs("</figure>\n", f);
    free(x);
}

static void change_rows(FILE *f, const trend_group_t *g)
{
    fputs("<table><tr><th>phase</th><th>class</th><th>metric</th><th>first run after</th>"
          "<th class=\"n\">before</th><th class=\"n\">after</th><th class=\"n\">size</th>"
          "<th class=\"n\">confidence</th><th>verdict</th></tr>\n",
          f);
    for (size_t i = 0; i < g->n_series + g->n_sync; i++) {
        const trend_series_t *s = i < g->n_series ? &g->series[i] : &g->sync[i - g->n_series];
        for (size_t c = 0; c < s->n_changes; c++) {
            const trend_change_t *x = &s->changes[c];
            char a[32], b[32], sz[48];
            value_text(s, x->before, a, sizeof a);
            value_text(s, x->after, b, sizeof b);
            size_text(s, x, sz, sizeof sz);
            fputs("<tr><td>", f);
            html_esc(f, s->phase);
            fputs("</td><td>", f);
            html_esc(f, s->cls);
            fprintf(f, "</td><td>%s</td><td>%zu (", s->metric, x->first + 1);
            html_esc(f, g->dirs[x->first]);
            fprintf(f,
                    ")</td><td class=\"n\">%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td>"
                    "<td class=\"n\">%.1f%%</td><td class=\"%s\">%s</td></tr>\n",
                    a, b, sz, 100 * (1 - x->p),
                    x->significant && x->worse ? "fail"
                    : x->significant           ? "pass"
                                               : "",
                    change_word(s, x));
        }
    }
    fputs("</table>\n", f);
}

static void group_section(FILE *f, const trend_group_t *g, size_t gi)
{
    fprintf(f, "<section><h2>Group %zu: ", gi + 1);
    html_esc(f, g->plan);
    fputs("</h2>\n<p class=\"note\">plan sha256 ", f);
    html_esc(f, g->plan_sha256);
    fputs(", overrides: ", f);
    html_esc(f, *g->overrides ? g->overrides : "none");
    fputs(", squall ", f);
    html_esc(f, g->version);
    fprintf(f, ", %zu runs.</p>\n<ol>", g->n_runs);
    for (size_t r = 0; r < g->n_runs; r++) {
        fputs("<li>", f);
        html_esc(f, g->dirs[r]);
        fputs("</li>", f);
    }
    fputs("</ol>\n<h3>Changes</h3>\n", f);
    change_rows(f, g);
    for (size_t i = 0; i + 4 <= g->n_series; i += 4)
        plot_key(f, g, &g->series[i]);
    for (size_t i = 0; i < g->n_sync; i++)
        plot_sync(f, g, &g->sync[i]);
    fputs("</section>\n", f);
}

static int fill_page(FILE *f, void *ctx)
{
    const trend_t *t = ctx;
    fputs("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n<title>squall "
          "trend</title>\n<style>\n",
          f);
    fputs(html_css, f);
    fputs("</style></head><body>\n<h1>squall trend</h1>\n", f);
    bool worse = trend_newest_worse(t);
    fprintf(f, "<div class=\"banner %s\">%s</div>\n", worse ? "bad" : "good",
            worse ? "&#10008; The newest runs of a series are significantly worse."
                  : "No series ends in a significant change for the worse.");
    fputs("<p class=\"note\">Change points: " METHOD_TEXT
          ". A mark stands between the last run before a change and the first after it; "
          "dashed lines are the plan's objectives.</p>\n",
          f);
    for (size_t g = 0; g < trend_group_count(t); g++)
        group_section(f, trend_group_at(t, g), g);
    fputs("</body></html>\n", f);
    return ferror(f) ? SQ_EIO : 0;
}

int trend_html(const trend_t *t, const char *path, out_t *o)
{
    return file_write_atomic(path, fill_page, (void *)t, o);
}
