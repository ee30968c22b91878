/* report.html, the report of one run: one self-contained page (inline SVG and CSS, no scripts);
 * the run header, objective verdicts, per phase x class tables and the plots. */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "html_int.h"
#include "squall/err.h"
#include "squall/file.h"

const char html_css[] =
    "body{font:15px/1.45 system-ui,sans-serif;color:#1a1a1a;background:#fff;margin:0 auto;"
    "max-width:1120px;padding:0 24px 48px}\n"
    "h1{font-size:26px;margin:24px 0 4px}h2{font-size:20px;margin:32px 0 8px;"
    "border-bottom:2px solid #0072B2;padding-bottom:3px}\n"
    "table{border-collapse:collapse;margin:8px 0;font-variant-numeric:tabular-nums}\n"
    "th,td{padding:4px 10px;border-bottom:1px solid #ddd;text-align:left}\n"
    "td.n,th.n{text-align:right}th{background:#f2f2f2}\n"
    "table.meta th{background:none;font-weight:600;padding-right:18px}\n"
    ".pass{color:#005a8c;font-weight:700}.fail{color:#b34700;font-weight:700}\n"
    ".banner{padding:10px 14px;margin:12px 0;border-left:6px solid;font-weight:600}\n"
    ".banner.good{border-color:#0072B2;background:#eaf3fa}.banner.bad{border-color:#D55E00;"
    "background:#fbeee6}.banner.unsure{border-color:#E69F00;background:#fdf5e1}\n"
    ".banner .word{font-size:20px;margin:0}.banner .limit,"
    ".banner ul{font-weight:400;margin:6px 0 0}\n"
    "table.runs td{word-break:break-all}tr.same td.v{color:#555}tr.untested td{color:#777;font-style:italic}"
    "tr.untested td.v{background:#f2f2f2}\n"
    "td.codes .c4,td.codes .c5{color:#b34700;font-weight:600}\n"
    ".note{color:#555;font-size:13px}figure{margin:12px 0 24px}figcaption{font-size:13px;"
    "color:#444}\n"
    "svg.plot{width:100%;height:auto;font:12px system-ui,sans-serif}\n"
    "svg .grid{stroke:#e6e6e6}svg .tick{stroke:#888;fill:#333}svg text.tick{stroke:none}\n"
    "svg .frame{fill:none;stroke:#999}svg .axis-label{font-size:13px;fill:#222}\n"
    "svg .mark line{stroke:#666;stroke-dasharray:3 3}svg .mark text{font-size:11px;fill:#444}\n"
    "svg .mark.drop line{stroke:#D55E00;stroke-dasharray:none}svg .mark.drop text{fill:#D55E00}"
    "svg .band{fill:#D55E00;fill-opacity:.16}svg .level line{stroke-dasharray:8 3 2 3;"
    "stroke-width:1.4}svg .level text{font-size:11px}svg .axis-note{font-size:11px;fill:#555}\n"
    "svg .legend text{font-size:12px;fill:#222}pre{background:#f6f6f6;padding:8px;"
    "overflow:auto;max-height:320px}\n";

static void kv(FILE *f, const char *k, const char *v)
{
    fprintf(f, "<tr><th>%s</th><td>", k);
    html_esc(f, v ? v : "-");
    fputs("</td></tr>\n", f);
}

static const char *jstr(json_t *o, const char *k)
{
    return json_string_value(json_object_get(o, k));
}

static double jnum(json_t *o, const char *k)
{
    return json_number_value(json_object_get(o, k));
}

static void header(FILE *f, const results_t *res)
{
    const results_meta_t *m = results_meta(res);
    char buf[256];
    fputs("<h1>squall run report</h1>\n<table class=\"meta\">\n", f);
    kv(f, "plan", m->plan_path);
    kv(f, "plan SHA-256", m->plan_sha256);
    kv(f, "target", m->target_url);
    if (m->start_unix_ms) {
        time_t t = (time_t)(m->start_unix_ms / 1000);
        struct tm tm;
        gmtime_r(&t, &tm);
        strftime(buf, sizeof buf, "%Y-%m-%d %H:%M:%S UTC", &tm);
        kv(f, "started", buf);
    }
    snprintf(buf, sizeof buf, "%.1f s", (double)m->duration_ns / 1e9);
    kv(f, "duration", buf);
    if (m->shard_count)
        snprintf(buf, sizeof buf, "%d of %d", m->shard_index, m->shard_count);
    else
        snprintf(buf, sizeof buf, "merged from %zu inputs", results_input_count(res));
    kv(f, "shard", buf);
    kv(f, "host", m->host);
    kv(f, "squall", m->squall_version);
    kv(f, "ended early", m->interrupted ? (m->stop_reason ? m->stop_reason : "yes") : "no");
    json_t *run = results_section(res, "run");
    if (run) { /* how to run it again, and how it ended */
        json_t *seed = json_object_get(run, "seed"), *v;
        size_t i;
        if (json_is_integer(seed)) {
            snprintf(buf, sizeof buf, "%llu", (unsigned long long)json_integer_value(seed));
            kv(f, "seed", buf);
        }
        kv(f, "command line", jstr(run, "command_line"));
        fputs("<tr><th>overrides</th><td>", f);
        json_array_foreach(json_object_get(run, "overrides"), i, v)
        {
            fputs(i ? "<br>" : "", f);
            html_esc(f, json_string_value(v));
        }
        fputs(json_array_size(json_object_get(run, "overrides")) ? "</td></tr>\n"
                                                                   : "none</td></tr>\n",
              f);
        kv(f, "verdict", jstr(run, "verdict"));
        snprintf(buf, sizeof buf, "%lld", (long long)json_integer_value(json_object_get(run, "exit_code")));
        kv(f, "exit code", buf);
    }
    fputs("</table>\n", f);
}

/* Seconds of a bound ("generator_bound" or "connection_bound") in the "generator" section. */
static double bound_seconds(const results_t *res, const char *kind)
{
    return jnum(json_object_get(results_section(res, "generator"), kind), "seconds");
}

/* The run's verdict and its reasons (the "run" section), before any figure. The limits of the
 * generator and of the connections are written inside it: a PASS reached with seconds the plan
 * accepted is shown as a qualified pass, never as a clean one above a warning. */
static void verdict(FILE *f, const results_t *res)
{
    json_t *run = results_section(res, "run"), *r;
    const char *v = run ? jstr(run, "verdict") : NULL;
    size_t i;
    if (!v) {
        fputs("<div class=\"banner bad\" id=\"verdict\"><p class=\"word\">NO VERDICT: "
              "results.json has no \"run\" section (merged or written by an older "
              "squall).</p></div>\n",
              f);
        return;
    }
    bool pass = !strcmp(v, "pass"), fail = !strcmp(v, "fail");
    double gs = bound_seconds(res, "generator_bound"), cs = bound_seconds(res, "connection_bound");
    const char *tone = fail ? "bad" : !pass ? "unsure" : gs > 0 || cs > 0 ? "unsure" : "good";
    fprintf(f, "<div class=\"banner %s\" id=\"verdict\" data-verdict=\"%s\"><p class=\"word\">%s</p>",
            tone, v,
            pass   ? "PASS: every objective held."
            : fail ? "FAIL: at least one objective did not hold."
                   : "INCONCLUSIVE: the evidence cannot support a pass.");
    if (gs > 0)
        fprintf(f, "<div class=\"limit\" id=\"limit-generator\">GENERATOR-BOUND for %.0f s: "
                   "squall itself fell behind its schedule (shaded on the plots over time); "
                   "the target's figures for those seconds are not evidence.%s</div>",
                gs, pass ? " The plan accepts them, so the pass rests on the other seconds." : "");
    if (cs > 0)
        fprintf(f, "<div class=\"limit\" id=\"limit-connection\">CONNECTION-BOUND for %.0f s: "
                   "the target answered so slowly that every connection of the plan was busy; times measured from each request's "
                   "intended start remain a correct verdict on the target, but less load was "
                   "offered than planned (raise target.connections).</div>",
                cs);
    static const char *const lists[] = {"reasons", "accepted"};
    for (size_t l = 0; l < 2; l++) {
        if (json_array_size(json_object_get(run, lists[l])) == 0)
            continue;
        fprintf(f, "<ul class=\"%s\">\n", lists[l]);
        json_array_foreach(json_object_get(run, lists[l]), i, r)
        {
            fputs(l ? "<li>accepted by the plan: " : "<li>", f);
            html_esc(f, json_string_value(r));
            fputs("</li>\n", f);
        }
        fputs("</ul>\n", f);
    }
    fputs("</div>\n", f);
}

/* The brakes in force (the "brakes" section), one line each. */
static void brakes(FILE *f, const results_t *res)
{
    json_t *b = results_section(res, "brakes"), *k;
    size_t i;
    if (!b)
        return;
    fprintf(f, "<p>Brakes in force (%s target):</p>\n<ul>\n",
            json_is_true(json_object_get(b, "shared_target")) ? "shared" : "loopback");
    json_array_foreach(json_object_get(b, "brakes"), i, k)
    {
        const char *kind = jstr(k, "kind") ? jstr(k, "kind") : "?";
        char what[128];
        if (!strcmp(kind, "error-rate"))
            snprintf(what, sizeof what, "error rate above %.1f %% over %.0f s",
                     100 * jnum(k, "error_rate"), jnum(k, "for_s"));
        else if (!strcmp(kind, "percentile"))
            snprintf(what, sizeof what, "p%g above %.0f ms held for %.0f s", jnum(k, "percentile"),
                     jnum(k, "max_ms"), jnum(k, "for_s"));
        else if (!strcmp(kind, "unreachable"))
            snprintf(what, sizeof what, "no answer for %.0f s", jnum(k, "after_s"));
        else
            snprintf(what, sizeof what, "squall could not offer the planned load for %.0f s",
                     jnum(k, "for_s"));
        fprintf(f, "<li>%s (%s, class ", what, jstr(k, "source") ? jstr(k, "source") : "?");
        html_esc(f, jstr(k, "class"));
        fputs(")</li>\n", f);
    }
    fputs("</ul>\n", f);
}

static void generator(FILE *f, const results_t *res)
{
    json_t *g = results_section(res, "generator");
    fputs("<section id=\"generator\"><h2>Generator health</h2>\n", f);
    if (!g) {
        fputs("<p class=\"note\">No generator section in results.json.</p></section>\n", f);
        return;
    }
    json_t *gb = json_object_get(g, "generator_bound"), *cb = json_object_get(g, "connection_bound");
    double gs = jnum(gb, "seconds"), cs = jnum(cb, "seconds");
    fputs(gs == 0 && cs == 0 ? "<p>squall offered the planned load: it kept its schedule and never "
                               "waited for a connection.</p>\n"
                             : "<p>The limits below are part of the verdict above.</p>\n",
          f);
    fputs("<table class=\"meta\">\n", f);
    char buf[160];
    static const char *const kinds[] = {"generator-bound", "connection-bound"};
    json_t *bound[] = {gb, cb};
    for (size_t b = 0; b < 2; b++) {
        if (jnum(bound[b], "seconds") == 0)
            continue;
        int n = snprintf(buf, sizeof buf, "%.0f s:", jnum(bound[b], "seconds"));
        size_t i;
        json_t *sec;
        json_array_foreach(json_object_get(bound[b], "list"), i, sec)
        {
            if (n < 0 || (size_t)n >= sizeof buf - 16) {
                snprintf(buf + sizeof buf - 16, 16, " ...");
                break;
            }
            n += snprintf(buf + n, sizeof buf - (size_t)n, " %lld", (long long)json_integer_value(sec));
        }
        char key[64];
        snprintf(key, sizeof key, "%s seconds", kinds[b]);
        kv(f, key, buf);
        snprintf(key, sizeof key, "%s: last reason", kinds[b]);
        kv(f, key, jstr(bound[b], "last_reason"));
    }
    snprintf(buf, sizeof buf, "%.2f / %.2f / %.2f ms", jnum(g, "schedule_lag_p50_ms"),
             jnum(g, "schedule_lag_p99_ms"), jnum(g, "schedule_lag_max_ms"));
    kv(f, "schedule lag p50 / p99 / max", buf);
    snprintf(buf, sizeof buf, "%.2f / %.2f / %.2f ms", jnum(g, "send_lag_p50_ms"),
             jnum(g, "send_lag_p99_ms"), jnum(g, "send_lag_max_ms"));
    kv(f, "send lag (on the wire - intended) p50 / p99 / max", buf);
    snprintf(buf, sizeof buf, "%.2f ms", jnum(g, "max_queue_wait_ms"));
    kv(f, "longest wait for a connection", buf);
    snprintf(buf, sizeof buf, "%.0f started, %.0f completed, %.0f errors", jnum(g, "started"),
             jnum(g, "completed"), jnum(g, "errors"));
    kv(f, "requests", buf);
    fputs("</table>\n", f);
    brakes(f, res);
    fputs("</section>\n", f);
}

static void fmt_value(double v, const char *unit, char *buf, size_t cap)
{
    if (!strcmp(unit, "ms"))
        snprintf(buf, cap, "%.2f ms", v);
    else if (!strcmp(unit, "fraction"))
        snprintf(buf, cap, "%.2f %%", v * 100);
    else
        snprintf(buf, cap, "%.1f /s", v);
}

static void objectives(FILE *f, const results_t *res)
{
    json_t *o = results_section(res, "objectives");
    fputs("<section id=\"objectives\"><h2>Objectives</h2>\n", f);
    if (!o) {
        fputs("<p class=\"note\">The plan sets no objectives.</p></section>\n", f);
        return;
    }
    fputs("<p class=\"note\">Checks marked (default) are the error rate of 1 % every class is "
          "judged on unless the plan sets its own. A percentile needs 1 / (1 - p) samples to be "
          "resolved: 100 for p99, 1000 for p99.9.</p>\n",
          f);
    fputs("<table><tr><th>verdict</th><th>class</th><th>scope</th><th>objective</th>"
          "<th class=\"n\">observed</th><th class=\"n\">threshold</th><th class=\"n\">samples"
          "</th></tr>\n",
          f);
    size_t i;
    json_t *c;
    json_array_foreach(json_object_get(o, "checks"), i, c)
    {
        const char *v = jstr(c, "verdict") ? jstr(c, "verdict") : "?";
        const char *unit = jstr(c, "unit") ? jstr(c, "unit") : "";
        bool ok = !strcmp(v, "pass");
        char obs[48] = "-", thr[48], word[64];
        if (strcmp(v, "no-data"))
            fmt_value(jnum(c, "observed"), unit, obs, sizeof obs);
        fmt_value(jnum(c, "threshold"), unit, thr, sizeof thr);
        if (!strcmp(v, "too-few"))
            snprintf(word, sizeof word, "TOO FEW (needs %.0f)", jnum(c, "needed"));
        else
            snprintf(word, sizeof word, "%s",
                     ok                   ? "pass"
                     : !strcmp(v, "fail") ? "FAIL"
                                          : "NO DATA");
        if (jstr(c, "why"))
            snprintf(word + strlen(word), sizeof word - strlen(word), ": %s", jstr(c, "why"));
        fprintf(f, "<tr><td class=\"%s\">%s ", ok ? "pass" : "fail", ok ? "&#10004;" : "&#10008;");
        html_esc(f, word);
        fputs("</td><td>", f);
        html_esc(f, jstr(c, "class"));
        fputs("</td><td>", f);
        html_esc(f, jstr(c, "scope"));
        fputs("</td><td>", f);
        html_esc(f, jstr(c, "text"));
        fprintf(f,
                "</td><td class=\"n\">%s</td><td class=\"n\">%s</td><td class=\"n\">%.0f</td>"
                "</tr>\n",
                obs, thr, jnum(c, "samples"));
    }
    fputs("</table></section>\n", f);
}

int report_html_write(FILE *f, const results_t *res, const report_series_t *s)
{
    fputs("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n"
          "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<title>"
          "squall report: ",
          f);
    html_esc(f, results_meta(res)->plan_path);
    fprintf(f, "</title>\n<style>\n%s</style></head><body>\n", html_css);
    header(f, res);
    verdict(f, res);
    objectives(f, res);
    generator(f, res);
    html_tables(f, res, s);
    html_plots_time(f, res, s);
    html_plots_heat(f, res, s);
    html_plots_tails(f, res);
    html_watches(f, res, s);
    html_storms(f, res, s);
    html_sync(f, res);
    html_metrics(f, res, s);
    html_actions(f, res);
    fputs("<p class=\"note\">Colours: Okabe&#8211;Ito palette; each class also has its own "
          "marker shape. Response time is measured from each request's intended start.</p>\n"
          "</body></html>\n",
          f);
    return ferror(f) ? SQ_EIO : 0;
}

typedef struct {
    const results_t *res;
    const report_series_t *series;
} page_t;

static int fill_page(FILE *f, void *ctx)
{
    const page_t *p = ctx;
    return report_html_write(f, p->res, p->series);
}

int report_html_write_dir(const char *dir, const results_t *res, out_t *o)
{
    char path[4096], series[4096];
    snprintf(path, sizeof path, "%s/%s", dir, REPORT_HTML_FILE);
    snprintf(series, sizeof series, "%s/%s", dir, REPORT_SERIES_FILE);
    report_series_t *s = NULL;
    out_t *quiet = out_new_capture(); /* a missing series.csv is noted in the page instead */
    int read = report_series_read(series, &s, quiet ? quiet : o);
    if (read == SQ_EPARSE && quiet) {
        const char *why = out_captured_diag(quiet), *e = strstr(why, "error: ");
        why = e ? e + strlen("error: ") : why;
        out_warn(o, "plots over time are left out: %.*s", (int)strcspn(why, "\n"), why);
    }
    out_free(quiet);
    if (read != 0 && report_series_new(&s) != 0)
        return SQ_ENOMEM;
    snprintf(series, sizeof series, "%s/%s", dir, RESULTS_SERIES_HIST_FILE);
    quiet = out_new_capture(); /* without series-hist.csv the heat maps are left out */
    if (read == 0 && report_series_read_hist(s, series, quiet ? quiet : o) == SQ_EPARSE && quiet) {
        const char *why = out_captured_diag(quiet), *e = strstr(why, "error: ");
        why = e ? e + strlen("error: ") : why;
        out_warn(o, "heat maps are left out: %.*s", (int)strcspn(why, "\n"), why);
    }
    out_free(quiet);
    int rc = file_write_atomic(path, fill_page, &(page_t){res, s}, o);
    report_series_free(s);
    return rc;
}
