/* The report's plots over time from series.csv: offered vs achieved load, errors, and per class
 * the response time with its objectives' thresholds; generator-bound seconds shaded, phase
 * boundaries and actions marked, the wall-clock start written on the time axis. */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "html_int.h"

#define MAX_LINES 16 /* classes drawn per plot; more are listed as left out */

/* Distinct values of a row field, in first-seen order. */
static size_t distinct(const report_series_t *s, bool phase, const char **out, size_t cap)
{
    size_t n = 0;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        const char *v = phase ? r->phase : r->cls;
        size_t k = 0;
        while (k < n && strcmp(out[k], v))
            k++;
        if (k == n && n < cap)
            out[n++] = v;
    }
    return n;
}

static size_t phase_starts(const results_t *res, const report_series_t *s, html_mark_t *m,
                           size_t cap);

/* The instants actions and collects fired at ("actions" section), after n marks already in m. */
static size_t action_marks(const results_t *res, html_mark_t *m, size_t n, size_t cap)
{
    json_t *items = json_object_get(results_section(res, "actions"), "items"), *it;
    int64_t t0 = results_meta(res)->start_unix_ms;
    size_t i;
    json_array_foreach(items, i, it)
    {
        json_t *at = json_object_get(it, "fired_unix_ms");
        if (n < cap && at && t0 > 0)
            m[n++] = (html_mark_t){.x = (double)(json_integer_value(at) - t0) / 1000.0,
                                   .label = json_string_value(json_object_get(it, "name"))};
    }
    return n;
}

size_t html_phase_marks(const results_t *res, const report_series_t *s, html_mark_t *m, size_t cap)
{
    size_t n = phase_starts(res, s, m, cap);
    n = action_marks(res, m, n, cap);
    return html_drop_marks(res, s, m, n, cap);
}

/* Phase boundaries: the "phases" section's starts when the run wrote one, else the first
 * second each phase appears in series.csv. */
static size_t phase_starts(const results_t *res, const report_series_t *s, html_mark_t *m,
                           size_t cap)
{
    json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    size_t i, n = 0;
    json_array_foreach(list, i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        if (n < cap && name && json_number_value(json_object_get(p, "elapsed_s")) > 0)
            m[n++] = (html_mark_t){.x = json_number_value(json_object_get(p, "start_s")), .label = name};
    }
    if (n > 0 || !s)
        return n;
    const char *names[MAX_LINES * 4];
    n = distinct(s, true, names, cap < MAX_LINES * 4 ? cap : MAX_LINES * 4);
    for (size_t k = 0; k < n; k++) {
        m[k].label = names[k];
        m[k].x = INFINITY;
        m[k].alert = false;
        for (i = 0; i < report_series_count(s); i++) {
            const report_row_t *r = report_series_at(s, i);
            if (strcmp(r->phase, names[k]) == 0 && (double)r->second < m[k].x)
                m[k].x = (double)r->second;
        }
    }
    return n;
}

bool html_phase_span(const results_t *res, const char *phase, double *t0, double *t1)
{
    json_t *list = json_object_get(results_section(res, "phases"), "phases"), *p;
    size_t i;
    *t0 = *t1 = NAN;
    json_array_foreach(list, i, p)
    {
        const char *name = json_string_value(json_object_get(p, "name"));
        if (name && !strcmp(name, phase)) {
            *t0 = json_number_value(json_object_get(p, "start_s"));
            *t1 = *t0 + json_number_value(json_object_get(p, "elapsed_s"));
            return true;
        }
    }
    return false;
}

/* The run second a phase started at; NAN when unknown. */
static double phase_start(const results_t *res, const char *phase)
{
    double t0, t1;
    html_phase_span(res, phase, &t0, &t1);
    return t0;
}

size_t html_reconnect_count(const results_t *res, const char *key, double *per, size_t secs)
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

size_t html_run_seconds(const results_t *res)
{
    double d = ceil((double)results_meta(res)->duration_ns / 1e9 - 1e-6);
    return d >= 1 ? (size_t)d : 1;
}

size_t html_drop_marks(const results_t *res, const report_series_t *s, html_mark_t *m, size_t n,
                       size_t cap)
{
    static char labels[64][32]; /* the page is written by one thread */
    size_t secs = html_run_seconds(res);
    double *per = calloc(secs, sizeof(double));
    if (!per)
        return n;
    /* series.csv's drops per second when it has them (so that marks and the watch plot's drops
     * fall in the same seconds, a merge's too), else the reconnect logs. */
    if (s && html_run_figure(s, RESULTS_RUN_WATCH_DROPPED, per, secs))
        for (size_t k = 0; k < secs; k++)
            per[k] = isnan(per[k]) ? 0 : per[k];
    else
        html_reconnect_count(res, "ended_ns", per, secs);
    for (size_t k = 0, used = 0; k < secs && n < cap && used < 64; k++)
        if (per[k] > 0) {
            snprintf(labels[used], sizeof labels[0], "%.0f dropped", per[k]);
            m[n++] = (html_mark_t){(double)k, labels[used++], true};
        }
    free(per);
    return n;
}

int html_class_style(const results_t *res, const char *cls)
{
    const char *seen[64];
    size_t n = 0;
    for (size_t i = 0; i < results_cell_count(res); i++) {
        const char *c = results_cell_class(results_cell_at(res, i));
        size_t k = 0;
        while (k < n && strcmp(seen[k], c))
            k++;
        if (k < n)
            continue;
        if (strcmp(c, cls) == 0)
            return (int)n;
        if (n < 64)
            seen[n++] = c;
    }
    return (int)n;
}

/* Per-second arrays of one class over seconds 0..secs-1; NaN latency where nothing completed. */
typedef struct {
    double *x, *completed, *errors, *p50, *p99, *p999;
} per_second_t;

static int fill(const report_series_t *s, const char *cls, size_t secs, per_second_t *ps)
{
    double *all = calloc(6 * secs, sizeof(double));
    if (!all)
        return -1;
    ps->x = all, ps->completed = all + secs, ps->errors = all + 2 * secs;
    ps->p50 = all + 3 * secs, ps->p99 = all + 4 * secs, ps->p999 = all + 5 * secs;
    for (size_t k = 0; k < secs; k++) {
        ps->x[k] = (double)k + 0.5;
        ps->p50[k] = ps->p99[k] = ps->p999[k] = NAN;
    }
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (strcmp(r->cls, cls) || r->second < 0 || (size_t)r->second >= secs)
            continue;
        size_t k = (size_t)r->second;
        ps->completed[k] += (double)r->completed;
        ps->errors[k] += (double)r->errors;
        if (r->completed > 0) /* a second two phases share: the slower of their rows */
            ps->p50[k] = isnan(ps->p50[k]) ? r->p50_ms : fmax(ps->p50[k], r->p50_ms),
            ps->p99[k] = isnan(ps->p99[k]) ? r->p99_ms : fmax(ps->p99[k], r->p99_ms),
            ps->p999[k] = isnan(ps->p999[k]) ? r->p999_ms : fmax(ps->p999[k], r->p999_ms);
    }
    return 0;
}

size_t html_class_p99(const report_series_t *s, const char *cls, double *x, double *y, size_t cap,
                      bool *any)
{
    size_t n = 0;
    *any = false;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (strcmp(r->cls, cls) || r->second < 0 || (size_t)r->second >= cap)
            continue;
        for (; n <= (size_t)r->second; n++)
            x[n] = (double)n + 0.5, y[n] = NAN;
        if (r->completed > 0) {
            y[r->second] = isnan(y[r->second]) ? r->p99_ms : fmax(y[r->second], r->p99_ms);
            *any = true;
        }
    }
    return n;
}

bool html_run_figure(const report_series_t *s, enum results_run_figure fig, double *y, size_t secs)
{
    bool any = false;
    int64_t last = -1;
    for (size_t k = 0; k < secs; k++)
        y[k] = NAN;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (r->second == last || r->second < 0 || (size_t)r->second >= secs)
            continue; /* every row of a second carries the same figures: the first one's */
        last = r->second;
        y[last] = r->run[fig];
        any |= !isnan(y[last]);
    }
    return any;
}

/* Queue and in flight per second: the peaks in flight and queued, and the longest wait in the
 * admission queue (the run's figures of series.csv), when the file has them. */
static void queue(FILE *f, const report_series_t *s, size_t secs, const html_plot_t *p,
                  const html_mark_t *m, size_t nm)
{
    double *all = calloc(4 * secs, sizeof(double));
    if (!all)
        return;
    double *x = all, *fl = all + secs, *qd = all + 2 * secs, *wait = all + 3 * secs;
    for (size_t k = 0; k < secs; k++)
        x[k] = (double)k + 0.5;
    bool any = html_run_figure(s, RESULTS_RUN_IN_FLIGHT, fl, secs);
    any &= html_run_figure(s, RESULTS_RUN_QUEUED, qd, secs);
    any &= html_run_figure(s, RESULTS_RUN_QUEUE_WAIT, wait, secs);
    if (any) {
        bool up = report_series_upper(s);
        html_line_t peaks[] = {
            {x, fl, secs, up ? "in flight, peak (upper bound)" : "in flight, peak", 0, 0},
            {x, qd, secs, up ? "queued, peak (upper bound)" : "queued, peak", 1, 1},
        };
        html_line_t w[] = {{x, wait, secs, "longest queue wait", 4, 0}};
        html_plot_t q = *p;
        q.title = "Queue wait and in flight over time: the peaks of the plan's requests in "
                  "flight and waiting in squall's admission queue in each second (the main "
                  "engine: the teardown's deletes and the watch streams have engines of their "
                  "own)";
        q.ylabel = "requests";
        q.ywhole = true;
        char title[400];
        snprintf(title, sizeof title, "%s%s", q.title,
                 up ? "; merged: the shards' peaks added, an upper bound (they need not "
                      "coincide)"
                    : "");
        q.title = title;
        html_figure(f, "in-flight", &q, peaks, 2, m, nm);
        q.title = "Queue wait over time: the longest wait of a request in squall's admission "
                  "queue in each second (the target's slowness or too few connections)";
        q.ylabel = "queue wait (ms)";
        q.ywhole = false;
        html_figure(f, "queue-wait", &q, w, 1, m, nm);
    }
    free(all);
}

/* The generator-bound seconds ("generator" section) as bands [s, s + 1). */
size_t html_bound_bands(const results_t *res, html_band_t *b, size_t cap)
{
    json_t *list = json_object_get(
               json_object_get(results_section(res, "generator"), "generator_bound"), "list"),
           *v;
    size_t i, n = 0;
    json_array_foreach(list, i, v)
    {
        if (n < cap && json_is_number(v))
            b[n++] = (html_band_t){json_number_value(v), json_number_value(v) + 1};
    }
    return n;
}

html_plot_t html_time_plot(const results_t *res, size_t secs, html_band_t *bands, size_t cap,
                           char *note, size_t note_cap)
{
    html_time_note(res, note, note_cap);
    return (html_plot_t){.xlabel = "time since the run started (s)",
                         .yzero = true,
                         .bands = bands,
                         .n_bands = html_bound_bands(res, bands, cap),
                         .band_label = "generator-bound second",
                         .xmin = 0,
                         .xmax = (double)secs,
                         .xnote = note};
}

void html_time_note(const results_t *res, char *buf, size_t cap)
{
    int64_t ms = results_meta(res)->start_unix_ms;
    buf[0] = '\0';
    if (ms > 0) {
        time_t t = (time_t)(ms / 1000);
        struct tm tm;
        gmtime_r(&t, &tm);
        strftime(buf, cap, "0 s = %Y-%m-%d %H:%M:%S UTC", &tm);
    }
}

size_t html_thresholds(const results_t *res, const char *metric, const char *cls,
                       html_threshold_t *out, size_t cap)
{
    json_t *checks = json_object_get(results_section(res, "objectives"), "checks"), *c;
    size_t i, n = 0;
    json_array_foreach(checks, i, c)
    {
        const char *text = json_string_value(json_object_get(c, "text")),
                   *scope = json_string_value(json_object_get(c, "scope")),
                   *ccls = json_string_value(json_object_get(c, "class"));
        char m[32];
        double pct;
        if (!text || !scope || !ccls || strcmp(scope, "run") || strcmp(ccls, cls) ||
            sscanf(text, "p%lf of %31s <=", &pct, m) != 2 || strcmp(m, metric))
            continue;
        double ms = json_number_value(json_object_get(c, "threshold"));
        bool dup = false;
        for (size_t k = 0; k < n; k++)
            dup |= out[k].pct == pct && out[k].ms == ms;
        if (!dup && n < cap) {
            out[n] = (html_threshold_t){pct, ms, ""};
            char v[32];
            html_num(ms, v, sizeof v);
            snprintf(out[n].label, sizeof out[n].label, "%s p%g objective: %s ms", cls, pct, v);
            n++;
        }
    }
    return n;
}

/* Planned starts, achieved starts and completions per second, every class added up. */
static void offered(FILE *f, const report_series_t *s, size_t secs, html_plot_t *p,
                    const html_mark_t *m, size_t nm)
{
    double *all = calloc(4 * secs, sizeof(double));
    if (!all)
        return;
    double *x = all, *planned = all + secs, *started = all + 2 * secs, *done = all + 3 * secs;
    bool any_planned = false;
    for (size_t k = 0; k < secs; k++)
        x[k] = (double)k + 0.5;
    for (size_t i = 0; i < report_series_count(s); i++) {
        const report_row_t *r = report_series_at(s, i);
        if (r->second < 0 || (size_t)r->second >= secs)
            continue;
        if (!isnan(r->planned))
            planned[r->second] += r->planned, any_planned = true;
        started[r->second] += (double)r->started;
        done[r->second] += (double)r->completed;
    }
    html_line_t l[] = {
        {x, done, secs, "completed", 2, 0},
        {x, started, secs, "started", 1, 0},
        {x, planned, secs, "planned starts", 6, 1},
    };
    p->title = "Offered vs achieved: planned starts, starts and completions in each second "
               "(every class; each list page completes on its own)";
    p->ylabel = "requests per second";
    html_figure(f, "offered", p, l, any_planned ? 3 : 2, m, nm);
    free(all);
}

void html_plots_time(FILE *f, const results_t *res, const report_series_t *s)
{
    fputs("<section id=\"over-time\"><h2>Over time</h2>\n", f);
    const char *cls[MAX_LINES];
    size_t nc = distinct(s, false, cls, MAX_LINES);
    int64_t last = -1;
    for (size_t i = 0; i < report_series_count(s); i++)
        last = report_series_at(s, i)->second > last ? report_series_at(s, i)->second : last;
    if (nc == 0 || last < 0) {
        fputs("<p class=\"note\">No per-second rows (series.csv is missing or empty).</p>"
              "</section>\n",
              f);
        return;
    }
    size_t secs = (size_t)last + 1;
    per_second_t ps[MAX_LINES] = {0};
    html_line_t errs[MAX_LINES];
    html_mark_t marks[MAX_LINES * 4];
    html_band_t bands[256];
    size_t nm = html_phase_marks(res, s, marks, MAX_LINES * 4);
    char note[80];
    html_plot_t p = html_time_plot(res, secs, bands, 256, note, sizeof note);
    offered(f, s, secs, &p, marks, nm);
    queue(f, s, secs, &p, marks, nm);
    size_t ok = 0;
    for (size_t c = 0; c < nc && fill(s, cls[c], secs, &ps[c]) == 0; c++, ok++)
        errs[c] = (html_line_t){ps[c].x, ps[c].errors, secs, cls[c],
                                html_class_style(res, cls[c]), 0};
    p.title = "Errors in each second, per class (every outcome but 2xx and 3xx)";
    p.ylabel = "errors per second";
    html_figure(f, "errors", &p, errs, ok, marks, nm);
    /* Response time per class, its objectives' thresholds drawn as levels. */
    for (size_t c = 0; c < ok; c++) {
        bool any = false; /* a watch class completes no request: its own section shows it */
        for (size_t k = 0; k < secs; k++)
            any |= !isnan(ps[c].p50[k]);
        if (!any)
            continue;
        int st = html_class_style(res, cls[c]);
        html_line_t lat[] = {{ps[c].x, ps[c].p99, secs, "p99", st, 0},
                             {ps[c].x, ps[c].p50, secs, "p50", st, 1},
                             {ps[c].x, ps[c].p999, secs, "p99.9", st, 2}};
        html_threshold_t thr[8];
        html_level_t lv[8];
        size_t nt = html_thresholds(res, "response", cls[c], thr, 8);
        for (size_t k = 0; k < nt; k++)
            lv[k] = (html_level_t){thr[k].ms, thr[k].label, -1};
        char title[200];
        snprintf(title, sizeof title, "Response time of %s in each second: p50, p99, p99.9",
                 cls[c]);
        html_plot_t q = p;
        q.title = title;
        q.ylabel = "response time (ms, log scale)";
        q.ylog = true;
        q.yzero = false;
        q.levels = lv;
        q.n_levels = nt;
        fputs("<figure class=\"latency\">\n", f);
        html_plot(f, &q, lat, report_series_has_p999(s) ? 3 : 2,
                  marks, nm);
        fputs("<figcaption>", f);
        html_esc(f, title);
        fputs(nt ? "; grey lines: the plan's objectives" : "", f);
        fputs("</figcaption></figure>\n", f);
    }
    for (size_t c = 0; c < ok; c++)
        free(ps[c].x);
    fputs("</section>\n", f);
}
