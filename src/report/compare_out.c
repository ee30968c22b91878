/* A comparison as output: the terminal table, the JSON document (--json) and the HTML
 * side-by-side page (--html). */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "compare_int.h"
#include "html_int.h"
#include "squall/err.h"
#include "squall/file.h"
#include "squall/table.h"

#define METHOD_MW                                                                                  \
    "Mann-Whitney U (Mann & Whitney 1947), two-sided: the exact null distribution when a side "    \
    "has at most 8 samples and none is tied, else the normal approximation with tie and "          \
    "continuity corrections; over series.csv's per-second values, or a fleet phase's per-tick "    \
    "values (the storms section), or a fleet action's R-bar per whole window of one period (the "  \
    "sync section: more or less synchronised, a change of at least 0.05 counts)"
#define METHOD_QT                                                                                  \
    "the quantile test (Mood's median test at the line's percentile, with Fisher's exact test) "   \
    "over a watch class's recorded values, counted as at most one sample per stream (a write "     \
    "reaches every stream, streams open together) and per second of the phase (values of one "     \
    "second share its conditions)"

static bool is_err(const report_cmp_line_t *l)
{
    return !l->latency;
}

static void metric_text(const report_cmp_line_t *l, char *buf, size_t cap)
{
    if (l->latency && strcmp(l->latency, "response") != 0)
        snprintf(buf, cap, "%s %s", l->latency, l->metric);
    else
        snprintf(buf, cap, "%s", l->metric);
}

void cmp_value_text(bool rate, double v, char *buf, size_t cap)
{
    if (isnan(v))
        snprintf(buf, cap, "-");
    else if (rate)
        snprintf(buf, cap, "%.2f%%", v * 100);
    else
        snprintf(buf, cap, "%.2f ms", v);
}

void cmp_change_text(bool rate, double base, double d, char *buf, size_t cap)
{
    if (isnan(d))
        snprintf(buf, cap, "-");
    else if (rate)
        snprintf(buf, cap, "%+.2f pt", d * 100);
    else if (base > 0)
        snprintf(buf, cap, "%+.2f ms (%+.0f%%)", d, 100 * d / base);
    else
        snprintf(buf, cap, "%+.2f ms", d);
}

/* A synchronisation line's values are R̄, without a unit. */
static bool is_sync(const report_cmp_line_t *l)
{
    return l->unit == REPORT_UNIT_WINDOWS;
}

static void value(const report_cmp_line_t *l, double v, char *buf, size_t cap)
{
    if (is_sync(l) && !isnan(v))
        snprintf(buf, cap, "%.3f", v);
    else
        cmp_value_text(is_err(l), v, buf, cap);
}

static void change(const report_cmp_line_t *l, char *buf, size_t cap)
{
    double d = l->new_value - l->base;
    if (is_sync(l) && !isnan(d))
        snprintf(buf, cap, "%+.3f", d);
    else
        cmp_change_text(is_err(l), l->base, d, buf, cap);
}

static void samples_text(const report_cmp_line_t *l, char *buf, size_t cap)
{
    snprintf(buf, cap, "%zu vs %zu %s", l->n_base, l->n_new, report_unit_name(l->unit));
}

/* The verdict, and for an untested line the sample counts that would do. */
static void verdict_text(const report_cmp_line_t *l, char *buf, size_t cap)
{
    if (l->verdict != REPORT_UNTESTED)
        snprintf(buf, cap, "%s", report_verdict_word(l));
    else if (l->need_base || l->need_new)
        snprintf(buf, cap, "untested: needs %zu vs %zu", l->need_base, l->need_new);
    else
        snprintf(buf, cap, "untested: no sample count would do");
}

/* p in plain decimals, two significant digits (0.046, 0.00019); below 0.0001 as "<0.0001"
 * (results.json keeps the exact value). */
static void p_text(const report_cmp_line_t *l, char *buf, size_t cap)
{
    if (l->verdict == REPORT_UNTESTED || l->test == REPORT_TEST_NONE)
        snprintf(buf, cap, "-");
    else if (l->p < 0.0001)
        snprintf(buf, cap, "<0.0001");
    else if (l->p >= 0.1)
        snprintf(buf, cap, "%.2f", l->p);
    else /* 0.0001 <= p < 0.1: decimals to the second significant digit */
        snprintf(buf, cap, "%.*f", 1 - (int)floor(log10(l->p)), l->p);
}

/* A line's cells as text, the same in the table and the HTML page. */
typedef struct {
    char metric[48], base[32], nw[32], change[48], p[16], samples[64], verdict[64];
} row_t;

static void row_text(const report_cmp_line_t *l, row_t *r)
{
    metric_text(l, r->metric, sizeof r->metric);
    value(l, l->base, r->base, sizeof r->base);
    value(l, l->new_value, r->nw, sizeof r->nw);
    change(l, r->change, sizeof r->change);
    p_text(l, r->p, sizeof r->p);
    samples_text(l, r->samples, sizeof r->samples);
    verdict_text(l, r->verdict, sizeof r->verdict);
}

void report_cmp_print(const report_cmp_t *c, out_t *o)
{
    size_t count[4] = {0};
    bool used[4] = {false};
    static const table_col_t cols[] = {
        {"phase", TABLE_LEFT}, {"class", TABLE_LEFT},   {"metric", TABLE_LEFT},
        {"base", TABLE_RIGHT}, {"new", TABLE_RIGHT},    {"change", TABLE_RIGHT},
        {"p", TABLE_RIGHT},    {"samples", TABLE_LEFT}, {"verdict", TABLE_LEFT}};
    table_t *t = table_new(cols, sizeof cols / sizeof cols[0]);
    int rc = t ? 0 : SQ_ENOMEM;
    for (size_t i = 0; rc == 0 && i < report_cmp_count(c); i++) {
        const report_cmp_line_t *l = report_cmp_at(c, i);
        row_t r;
        row_text(l, &r);
        const char *cells[] = {l->phase, l->cls, r.metric,  r.base,   r.nw,
                               r.change, r.p,    r.samples, r.verdict};
        rc = table_add(t, cells);
        count[l->verdict]++;
        used[l->test] = true;
    }
    if (rc == 0)
        table_print(t, o);
    else
        out_print(o, "(out of memory while laying out the comparison)\n");
    table_free(t);
    out_print(o,
              "\n%zu worse (slower, more errors or more synchronised), %zu better, %zu within "
              "noise, %zu untested; the chance of a false alarm is the level chosen, per line\n",
              count[REPORT_WORSE], count[REPORT_BETTER], count[REPORT_WITHIN_NOISE],
              count[REPORT_UNTESTED]);
    if (used[REPORT_TEST_MW_EXACT] || used[REPORT_TEST_MW_NORMAL])
        out_print(o, "seconds, ticks, windows: %s\n", METHOD_MW);
    if (used[REPORT_TEST_QUANTILE])
        out_print(o, "samples: %s\n", METHOD_QT);
}

/* ---- JSON ----------------------------------------------------------------------------------- */

static json_t *num(double v)
{
    return isnan(v) ? json_null() : json_real(v);
}

static json_t *line_json(const report_cmp_line_t *l)
{
    json_t *j = json_pack(
        "{s:s, s:s, s:o, s:s, s:o, s:o, s:o, s:o, s:s, s:I, s:I}", "phase", l->phase, "class",
        l->cls, "latency", l->latency ? json_string(l->latency) : json_null(), "metric", l->metric,
        "base", num(l->base), "new", num(l->new_value), "base_median", num(l->base_med),
        "new_median", num(l->new_med), "samples", report_unit_name(l->unit), "n_base",
        (json_int_t)l->n_base, "n_new", (json_int_t)l->n_new);
    if (!j)
        return NULL;
    if (l->unit == REPORT_UNIT_WATCH) {
        json_object_set_new(j, "recorded_base", json_integer((json_int_t)l->recorded_base));
        json_object_set_new(j, "recorded_new", json_integer((json_int_t)l->recorded_new));
        json_object_set_new(j, "streams_base", json_integer((json_int_t)l->streams_base));
        json_object_set_new(j, "streams_new", json_integer((json_int_t)l->streams_new));
        json_object_set_new(j, "seconds_base", json_integer((json_int_t)l->seconds_base));
        json_object_set_new(j, "seconds_new", json_integer((json_int_t)l->seconds_new));
    }
    json_object_set_new(j, "needs",
                        l->verdict == REPORT_UNTESTED && (l->need_base || l->need_new)
                            ? json_pack("{s:I, s:I}", "base", (json_int_t)l->need_base, "new",
                                        (json_int_t)l->need_new)
                            : json_null());
    json_object_set_new(j, "test", json_string(report_test_name(l->test)));
    json_object_set_new(j, "tested_on", json_string(l->tested_on ? l->tested_on : ""));
    json_object_set_new(j, "statistic", json_real(l->stat));
    json_object_set_new(j, "z", json_real(l->z));
    json_object_set_new(j, "p", json_real(l->p));
    json_object_set_new(j, "verdict", json_string(report_verdict_word(l)));
    return j;
}

json_t *report_cmp_json(const report_cmp_t *c, const report_cmp_opts_t *opts)
{
    json_t *lines = json_array();
    for (size_t i = 0; lines && i < report_cmp_count(c); i++)
        json_array_append_new(lines, line_json(report_cmp_at(c, i)));
    return json_pack("{s:s, s:i, s:{s:s, s:s}, s:f, s:f, s:f, s:f, s:f, s:b, s:o}", "format",
                     "squall-compare", "version", 2, "methods", "mann-whitney", METHOD_MW,
                     "quantile", METHOD_QT, "false_alarm", opts->false_alarm, "min_change_ms",
                     opts->min_abs_ms, "min_change_tail_ms", opts->min_tail_ms,
                     "min_change_fraction", opts->min_rel, "min_change_error_rate",
                     opts->min_abs_err, "worse", report_cmp_worse(c), "lines", lines);
}

/* ---- HTML side-by-side ------------------------------------------------------------------ */

static const char *overrides_of(const results_t *r, char *buf, size_t cap)
{
    json_t *ov = json_object_get(results_section(r, "run"), "overrides");
    if (!json_is_array(ov))
        return "unknown";
    size_t i, at = 0;
    json_t *v;
    snprintf(buf, cap, "none");
    json_array_foreach(ov, i, v)
    {
        int w = snprintf(buf + at, cap - at, "%s%s", i ? " " : "", json_string_value(v));
        at = w < 0 || (size_t)w >= cap - at ? cap - 1 : at + (size_t)w;
    }
    return buf;
}

static const char *started_of(const results_t *r, char *buf, size_t cap)
{
    int64_t ms = results_meta(r)->start_unix_ms;
    if (ms <= 0)
        return NULL;
    time_t t = (time_t)(ms / 1000);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(buf, cap, "%Y-%m-%d %H:%M:%S UTC", &tm);
    return buf;
}

static const char *seed_of(const results_t *r, char *buf, size_t cap)
{
    json_t *seed = json_object_get(results_section(r, "run"), "seed");
    if (!json_is_integer(seed))
        return NULL;
    snprintf(buf, cap, "%llu", (unsigned long long)json_integer_value(seed));
    return buf;
}

#define META_ROWS 9

/* A run's values for the rows of meta_rows, some written into the buffers of t. */
typedef struct {
    char overrides[512], started[40], seed[32];
} meta_text_t;

static void meta_values(const results_t *r, meta_text_t *t, const char **v)
{
    const results_meta_t *m = results_meta(r);
    const char *all[META_ROWS] = {m->plan_path,
                                  m->plan_sha256,
                                  m->target_url,
                                  overrides_of(r, t->overrides, sizeof t->overrides),
                                  seed_of(r, t->seed, sizeof t->seed),
                                  started_of(r, t->started, sizeof t->started),
                                  m->host,
                                  m->squall_version,
                                  m->stop_reason};
    memcpy(v, all, sizeof all);
}

static void meta_rows(FILE *f, const results_t *b, const results_t *n)
{
    const results_meta_t *mb = results_meta(b), *mn = results_meta(n);
    /* The first five differing are marked: a different plan, target or inputs. */
    const char *k[META_ROWS] = {"plan",    "plan sha256", "target", "overrides",    "seed",
                                "started", "host",        "squall", "stopped early"};
    const char *vb[META_ROWS], *vn[META_ROWS];
    meta_text_t tb, tn;
    meta_values(b, &tb, vb);
    meta_values(n, &tn, vn);
    fputs("<table class=\"runs\"><tr><th></th><th>BASE</th><th>NEW</th></tr>\n", f);
    for (size_t i = 0; i < sizeof k / sizeof k[0]; i++) {
        bool differ = vb[i] && vn[i] && strcmp(vb[i], vn[i]) && i < 5;
        fprintf(f, "<tr><th>%s</th><td%s>", k[i], differ ? " class=\"fail\"" : "");
        html_esc(f, vb[i] ? vb[i] : "-");
        fprintf(f, "</td><td%s>", differ ? " class=\"fail\"" : "");
        html_esc(f, vn[i] ? vn[i] : "-");
        fputs("</td></tr>\n", f);
    }
    fprintf(f, "<tr><th>duration</th><td>%.1f s</td><td>%.1f s</td></tr></table>\n",
            (double)mb->duration_ns / 1e9, (double)mn->duration_ns / 1e9);
}

static void verdict_row(FILE *f, const report_cmp_line_t *l)
{
    row_t r;
    row_text(l, &r);
    bool bad = l->verdict == REPORT_WORSE;
    static const char *const style[] = {[REPORT_WITHIN_NOISE] = "same", [REPORT_WORSE] = "fail",
                                        [REPORT_BETTER] = "pass", [REPORT_UNTESTED] = "untested"};
    fprintf(f, "<tr class=\"%s\"><td>", style[l->verdict]);
    html_esc(f, l->phase);
    fputs("</td><td>", f);
    html_esc(f, l->cls);
    fprintf(f,
            "</td><td>%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td>"
            "<td class=\"n\">%s</td><td class=\"n\">%s</td><td class=\"n\">%s</td>"
            "<td class=\"v %s\">%s%s</td></tr>\n",
            r.metric, r.base, r.nw, r.change, r.p, r.samples, style[l->verdict],
            bad ? "&#10008; " : l->verdict == REPORT_UNTESTED ? "? " : "", r.verdict);
}

static void verdict_rows(FILE *f, const report_cmp_t *c)
{
    fputs("<table><tr><th>phase</th><th>class</th><th>metric</th><th class=\"n\">BASE</th>"
          "<th class=\"n\">NEW</th><th class=\"n\">change</th><th class=\"n\">p</th>"
          "<th class=\"n\">samples</th><th>verdict</th></tr>\n",
          f);
    for (size_t i = 0; i < report_cmp_count(c); i++)
        verdict_row(f, report_cmp_at(c, i));
    fputs("</table>\n", f);
}

/* The metric a class's spectrum shows: response time, or for a watch class propagation (else
 * open) latency. */
static int spectrum_metric(const results_t *r, const char *cls)
{
    static const int order[] = {RESULTS_M_RESPONSE, RESULTS_M_PROPAGATION, RESULTS_M_OPEN};
    for (size_t k = 0; k < 3; k++)
        for (size_t i = 0; i < results_cell_count(r); i++) {
            const results_cell_t *c = results_cell_at(r, i);
            if (!strcmp(results_cell_class(c), cls) && results_cell_hist_find(c, order[k]))
                return order[k];
        }
    return RESULTS_M_RESPONSE;
}

#define TAIL_POINTS 400

/* The share of a class's requests slower than x, BASE and NEW on one plot (every phase). False,
 * with nothing written, when neither run has a histogram of the class. */
static bool spectrum(FILE *f, const results_t *b, const results_t *n, const char *cls, hist_t *h)
{
    static double x[2][TAIL_POINTS], y[2][TAIL_POINTS];
    int m = spectrum_metric(b, cls);
    html_line_t l[2] = {
        {x[0], y[0], html_exceed(b, m, NULL, cls, h, x[0], y[0], TAIL_POINTS), "BASE", 0, 0},
        {x[1], y[1], html_exceed(n, m, NULL, cls, h, x[1], y[1], TAIL_POINTS), "NEW", 1, 1},
    };
    if (l[0].n == 0 && l[1].n == 0)
        return false;
    char title[200], xlabel[64];
    snprintf(title, sizeof title, "%s: share of %s times slower than x, BASE and NEW", cls,
             results_metric_name(m));
    snprintf(xlabel, sizeof xlabel, "%s time x (ms, log scale)", results_metric_name(m));
    html_plot_t p = {.title = title,
                     .xlabel = xlabel,
                     .ylabel = "slower than x (%, log scale)",
                     .xaxis = HTML_X_LOG,
                     .ylog = true};
    html_figure(f, NULL, &p, l, 2, NULL, 0);
    return true;
}

/* The watch propagation p99 of each second of BASE and NEW (series.csv's run figure: every
 * watch class together), each from its own start, on one plot; nothing when neither run's
 * series.csv has it. */
static void watch_over_time(FILE *f, const report_cmp_t *c, const char *cls, size_t cap)
{
    double *buf = calloc(4 * cap, sizeof(double));
    if (!buf)
        return;
    double *x = buf, *y[2] = {buf + cap, buf + 2 * cap};
    bool any = false;
    for (size_t k = 0; k < cap; k++)
        x[k] = (double)k + 0.5;
    for (int k = 0; k < 2; k++)
        if (c->series[k])
            any |= html_run_figure(c->series[k], RESULTS_RUN_WATCH_P99, y[k], cap);
    html_line_t l[2] = {{x, y[0], cap, "BASE propagation p99", 0, 0},
                        {x, y[1], cap, "NEW propagation p99", 1, 1}};
    if (any) {
        char title[240];
        snprintf(title, sizeof title,
                 "%s: watch propagation p99 in each second, BASE and NEW (series.csv keeps it "
                 "over every watch class of the run)",
                 cls);
        html_plot_t p = {.title = title,
                         .xlabel = "time since each run started (s)",
                         .ylabel = "propagation p99 (ms, log scale)",
                         .ylog = true};
        html_figure(f, "over-time", &p, l, 2, NULL, 0);
    }
    free(buf);
}

/* A class's p99 in each second of BASE and of NEW, each from its own start, on one plot; for a
 * watch class (no request completes) the propagation p99 of each second, once for the first
 * watch class (series.csv has it for every watch class together). */
static void over_time(FILE *f, const report_cmp_t *c, const char *cls, bool watch, bool *watched)
{
    size_t cap = 0;
    for (int k = 0; k < 2; k++)
        for (size_t i = 0; c->series[k] && i < report_series_count(c->series[k]); i++)
            cap = fmax(cap, (double)report_series_at(c->series[k], i)->second + 1);
    double *buf = cap ? calloc(4 * cap, sizeof(double)) : NULL;
    if (!buf)
        return;
    bool any[2] = {false, false};
    double *x[2] = {buf, buf + 2 * cap}, *y[2] = {buf + cap, buf + 3 * cap};
    size_t n[2] = {0, 0};
    for (int k = 0; k < 2; k++)
        if (c->series[k])
            n[k] = html_class_p99(c->series[k], cls, x[k], y[k], cap, &any[k]);
    html_line_t l[2] = {{x[0], y[0], n[0], "BASE p99", 0, 0}, {x[1], y[1], n[1], "NEW p99", 1, 1}};
    if (!any[0] && !any[1] && watch && !*watched) {
        watch_over_time(f, c, cls, cap);
        *watched = true;
    } else if (any[0] || any[1]) {
        char title[200];
        snprintf(title, sizeof title, "%s: response time p99 in each second, BASE and NEW", cls);
        html_plot_t p = {.title = title,
                         .xlabel = "time since each run started (s)",
                         .ylabel = "response time p99 (ms, log scale)",
                         .ylog = true};
        html_figure(f, "over-time", &p, l, 2, NULL, 0);
    }
    free(buf);
}

/* Per class of BASE: its p99 over time, then the share slower than x; BASE solid, NEW dashed,
 * same colour per run. */
static void spectra(FILE *f, const report_cmp_t *c, const results_t *b, const results_t *n)
{
    int64_t lo, hi;
    int digits;
    hist_t *h = NULL;
    bool watched = false;
    results_hist_config(b, &lo, &hi, &digits);
    if (hist_new(lo, hi, digits, &h))
        return;
    for (size_t i = 0; i < results_cell_count(b); i++) {
        const char *cls = results_cell_class(results_cell_at(b, i));
        bool first = true;
        for (size_t k = 0; k < i && first; k++)
            first = strcmp(results_cell_class(results_cell_at(b, k)), cls) != 0;
        if (first) {
            over_time(f, c, cls, spectrum_metric(b, cls) == RESULTS_M_PROPAGATION, &watched);
            spectrum(f, b, n, cls, h);
        }
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
    bool worse = report_cmp_worse(c);
    fprintf(f, "<div class=\"banner %s\">%s</div>\n", worse ? "bad" : "good",
            worse ? "&#10008; NEW is slower (or has more errors) in a line below."
                  : "Nothing slower found: every tested line is within noise or faster.");
    fputs("<section id=\"runs\"><h2>Runs</h2>\n", f);
    meta_rows(f, b, n);
    fputs("</section><section id=\"verdicts\"><h2>Changes</h2>\n<p class=\"note\">BASE and NEW "
          "are whole-phase values from the histograms. A verdict needs the test below to call "
          "the difference unlikely between runs of one configuration, and a change larger than "
          "the minimum change. An untested line had too few samples for the test to ever reach "
          "the false-alarm level; it says how many would do.</p>\n",
          f);
    verdict_rows(f, c);
    fputs("<p class=\"note\">Seconds and ticks: " METHOD_MW
          ".</p>\n<p class=\"note\">Samples: " METHOD_QT
          ".</p></section>\n<section id=\"spectra\"><h2>Per class: over time and slower than "
          "x</h2>\n",
          f);
    spectra(f, c, b, n);
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
