/* An envelope search as output: the answer in words (terminal), envelope.json, envelope.csv and
 * envelope.html (the safe zone drawn, every point linked to its report). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "html_int.h"
#include "squall/envelope.h"
#include "squall/err.h"
#include "squall/file.h"

static const char *const verdict_words[] = {"pass", "fail", "inconclusive", "brake", "error"};

/* What to do about a point that was not a FAIL, from its first reason. */
static const char *hint(const envelope_column_t *c)
{
    if (c->fails_how == ENVELOPE_BRAKE)
        return "the brakes stopped it: the target was being harmed";
    if (strstr(c->limited, "could not offer"))
        return "squall was the limit there: raise target.connections or split the load over "
               "more processes (--shard)";
    if (strstr(c->limited, "too few samples"))
        return "lengthen the phases for more samples";
    return "see the point's report";
}

static void column_text(const envelope_t *e, const envelope_column_t *c, char *buf, size_t cap)
{
    const envelope_cfg_t *cfg = envelope_cfg(e);
    const envelope_dim_t *d = &cfg->dims[cfg->n_dims - 1];
    char lo[64], hi[64], from[64], to[64];
    envelope_value_text(d, c->holds_up_to, lo, sizeof lo);
    envelope_value_text(d, c->fails_at, hi, sizeof hi);
    envelope_value_text(d, d->from, from, sizeof from);
    envelope_value_text(d, d->to, to, sizeof to);
    size_t n = 0;
    if (cfg->n_dims == 2) {
        char v[64];
        envelope_value_text(&cfg->dims[0], c->value, v, sizeof v);
        n = (size_t)snprintf(buf, cap, "%s=%s: ", cfg->dims[0].path, v);
    }
    if (n >= cap)
        return;
    buf += n;
    cap -= n;
    if (!c->searched)
        snprintf(buf, cap, "not searched (%s)",
                 envelope_stopped(e) ? envelope_stopped(e)
                                     : "a smaller value held nowhere from FROM");
    else if (isnan(c->holds_up_to) && isnan(c->fails_at))
        snprintf(buf, cap, "no point decided (%s)", envelope_stopped(e));
    else if (isnan(c->holds_up_to))
        snprintf(buf, cap, "%s does not hold even at FROM = %s (%s%s%s)", d->path, hi,
                 verdict_words[c->fails_how], c->fails_how == ENVELOPE_FAIL ? "" : ": ",
                 c->fails_how == ENVELOPE_FAIL ? "" : hint(c));
    else if (isnan(c->fails_at))
        snprintf(buf, cap, "%s holds up to %s%s", d->path, lo,
                 c->holds_up_to >= d->to ? " = TO (the search never goes beyond TO)" : "");
    else
        snprintf(buf, cap, "%s holds up to %s; at %s: %s%s%s%s", d->path, lo, hi,
                 verdict_words[c->fails_how], c->resolved ? "" : " (not resolved)",
                 c->fails_how == ENVELOPE_FAIL ? "" : ": ",
                 c->fails_how == ENVELOPE_FAIL ? "" : hint(c));
}

void envelope_print(const envelope_t *e, out_t *o)
{
    const envelope_cfg_t *cfg = envelope_cfg(e);
    char a[64], b[64], buf[1024];
    out_print(o, "%-4s %-16s %-16s %-7s %-13s %s\n", "run", cfg->dims[0].path,
              cfg->n_dims == 2 ? cfg->dims[1].path : "", "repeat", "verdict", "what broke");
    for (size_t i = 0; i < envelope_run_count(e); i++) {
        const envelope_run_t *r = envelope_run_at(e, i);
        envelope_value_text(&cfg->dims[0], r->v[0], a, sizeof a);
        if (cfg->n_dims == 2)
            envelope_value_text(&cfg->dims[1], r->v[1], b, sizeof b);
        else
            b[0] = '\0';
        out_print(o, "%-4zu %-16s %-16s %-7d %-13s %s\n", i + 1, a, b, r->repeat,
                  verdict_words[r->verdict], r->broke[0] ? r->broke : r->limited);
    }
    for (size_t i = 0; i < envelope_column_count(e); i++) {
        column_text(e, envelope_column_at(e, i), buf, sizeof buf);
        out_print(o, "envelope: %s\n", buf);
    }
    if (envelope_stopped(e))
        out_print(o, "stopped: %s after %zu runs\n", envelope_stopped(e), envelope_run_count(e));
}

static json_t *num(double v)
{
    return isnan(v) ? json_null() : json_real(v);
}

/* The cool-down before a run: null before the first (or with none). */
static json_t *cool_json(const envelope_run_t *r)
{
    if (r->cool_mode == 0)
        return json_null();
    json_t *c = json_pack("{s:s, s:f}", "mode", r->cool_mode == 1 ? "fixed" : "idle", "seconds",
                          r->cool_s);
    if (c && r->cool_mode == 2) {
        json_t *bad = json_array();
        char copy[sizeof r->not_idle], *save = NULL;
        snprintf(copy, sizeof copy, "%s", r->not_idle);
        for (char *t = strtok_r(copy, "\n", &save); bad && t; t = strtok_r(NULL, "\n", &save))
            json_array_append_new(bad, json_string(t));
        json_object_set_new(c, "back_to_idle", json_boolean(r->cool_idle));
        json_object_set_new(c, "not_idle", bad ? bad : json_array());
    }
    return c ? c : json_null();
}

static json_t *runs_json(const envelope_t *e)
{
    json_t *a = json_array();
    const envelope_cfg_t *cfg = envelope_cfg(e);
    for (size_t i = 0; a && i < envelope_run_count(e); i++) {
        const envelope_run_t *r = envelope_run_at(e, i);
        json_t *vals = json_array();
        for (int d = 0; d < cfg->n_dims; d++)
            json_array_append_new(vals, json_real(r->v[d]));
        json_array_append_new(a, json_pack("{s:I, s:o, s:i, s:s, s:i, s:I, s:s, s:s?, s:s?, s:o}",
                                           "run",
                                           (json_int_t)i + 1, "values", vals, "repeat", r->repeat,
                                           "verdict", verdict_words[r->verdict], "exit_code",
                                           r->exit_code, "objects_left", (json_int_t)r->left, "dir",
                                           r->dir, "broke", r->broke[0] ? r->broke : NULL,
                                           "limited", r->limited[0] ? r->limited : NULL,
                                           "cool_down", cool_json(r)));
    }
    return a;
}

json_t *envelope_json(const envelope_t *e, const char *plan)
{
    const envelope_cfg_t *cfg = envelope_cfg(e);
    json_t *dims = json_array(), *cols = json_array();
    for (int d = 0; d < cfg->n_dims; d++)
        json_array_append_new(
            dims, json_pack("{s:s, s:f, s:f, s:f, s:s}", "path", cfg->dims[d].path, "from",
                            cfg->dims[d].from, "to", cfg->dims[d].to, "resolution",
                            cfg->dims[d].resolution, "unit", cfg->dims[d].suffix));
    for (size_t i = 0; i < envelope_column_count(e); i++) {
        const envelope_column_t *c = envelope_column_at(e, i);
        char text[1024];
        column_text(e, c, text, sizeof text);
        json_array_append_new(
            cols, json_pack("{s:o, s:o, s:o, s:b, s:b, s:s?, s:s?, s:s}", "value", num(c->value),
                            "holds_up_to", num(c->holds_up_to), "fails_at", num(c->fails_at),
                            "resolved", c->resolved, "searched", c->searched, "fails_how",
                            isnan(c->fails_at) ? NULL : verdict_words[c->fails_how], "limited_by",
                            c->limited[0] ? c->limited : NULL, "answer", text));
    }
    return json_pack("{s:s, s:i, s:s, s:o, s:i, s:i, s:I, s:b, s:s?, s:o, s:o}", "format",
                     "squall-envelope", "version", 1, "plan", plan, "dimensions", dims, "repeats",
                     cfg->repeats, "max_runs", cfg->max_runs, "runs_used",
                     (json_int_t)envelope_run_count(e), "complete", envelope_complete(e), "stopped",
                     envelope_stopped(e), "columns", cols, "runs", runs_json(e));
}

/* CSV fields are quoted when they hold a comma, a quote or a newline (RFC 4180). */
static void csv_field(FILE *f, const char *s)
{
    if (!strpbrk(s, ",\"\n\r")) {
        fputs(s, f);
        return;
    }
    fputc('"', f);
    for (; *s; s++) {
        if (*s == '"')
            fputc('"', f);
        fputc(*s, f);
    }
    fputc('"', f);
}

static int fill_csv(FILE *f, void *ctx)
{
    const envelope_t *e = ctx;
    const envelope_cfg_t *cfg = envelope_cfg(e);
    fputs("run,", f);
    for (int d = 0; d < cfg->n_dims; d++) {
        csv_field(f, cfg->dims[d].path);
        fputc(',', f);
    }
    fputs("repeat,verdict,exit_code,broke,limited,dir,cool_down_s,back_to_idle\n", f);
    for (size_t i = 0; i < envelope_run_count(e); i++) {
        const envelope_run_t *r = envelope_run_at(e, i);
        fprintf(f, "%zu,", i + 1);
        for (int d = 0; d < cfg->n_dims; d++)
            fprintf(f, "%.17g,", r->v[d]);
        fprintf(f, "%d,%s,%d,", r->repeat, verdict_words[r->verdict], r->exit_code);
        csv_field(f, r->broke);
        fputc(',', f);
        csv_field(f, r->limited);
        fputc(',', f);
        csv_field(f, r->dir);
        if (r->cool_mode)
            fprintf(f, ",%.3f,", r->cool_s);
        else
            fputs(",,", f);
        fputs(r->cool_mode == 2 ? (r->cool_idle ? "yes\n" : "no\n") : "\n", f);
    }
    return ferror(f) ? SQ_EIO : 0;
}

/* ---- the page: x = the first dimension (2-D) or the run's value (1-D), y = the searched one
 * (2-D) or nothing; the safe zone is the area under each column's holding value. */

#define W  720.0
#define H  420.0
#define ML 80.0
#define MB 50.0
#define MT 20.0
#define MR 20.0

typedef struct {
    double x0, x1, y0, y1;
} frame_t;

static double px(const frame_t *fr, double x)
{
    return ML + (x - fr->x0) / (fr->x1 - fr->x0) * (W - ML - MR);
}

static double py(const frame_t *fr, double y)
{
    return H - MB - (y - fr->y0) / (fr->y1 - fr->y0) * (H - MB - MT);
}

static const char *const verdict_colour[] = {"#009E73", "#D55E00", "#E69F00", "#CC79A7", "#000000"};

static void axes(FILE *f, const frame_t *fr, const envelope_cfg_t *cfg)
{
    fprintf(f,
            "<rect x=\"%g\" y=\"%g\" width=\"%g\" height=\"%g\" fill=\"none\" "
            "stroke=\"#444\"/>\n",
            ML, MT, W - ML - MR, H - MB - MT);
    for (int k = 0; k <= 4; k++) {
        double xv = fr->x0 + (fr->x1 - fr->x0) * k / 4, yv = fr->y0 + (fr->y1 - fr->y0) * k / 4;
        fprintf(f, "<text x=\"%g\" y=\"%g\" text-anchor=\"middle\" font-size=\"11\">%.4g</text>\n",
                px(fr, xv), H - MB + 16, xv);
        if (cfg->n_dims == 2)
            fprintf(f, "<text x=\"%g\" y=\"%g\" text-anchor=\"end\" font-size=\"11\">%.4g</text>\n",
                    ML - 6, py(fr, yv) + 4, yv);
    }
    fputs("<text x=\"400\" y=\"410\" text-anchor=\"middle\" font-size=\"12\">", f);
    html_esc(f, cfg->dims[0].path);
    fputs("</text>\n", f);
    if (cfg->n_dims == 2) {
        fputs("<text x=\"14\" y=\"210\" font-size=\"12\" transform=\"rotate(-90 14 210)\" "
              "text-anchor=\"middle\">",
              f);
        html_esc(f, cfg->dims[1].path);
        fputs("</text>\n", f);
    }
}

/* The safe zone: a staircase of the columns' holding values (2-D) or the band up to the
 * holding value (1-D). */
static void zone(FILE *f, const envelope_t *e, const frame_t *fr)
{
    const envelope_cfg_t *cfg = envelope_cfg(e);
    size_t n = envelope_column_count(e);
    for (size_t i = 0; i < n; i++) {
        const envelope_column_t *c = envelope_column_at(e, i);
        if (isnan(c->holds_up_to))
            continue;
        double a, b, top, bottom = H - MB;
        if (cfg->n_dims == 1) {
            a = px(fr, cfg->dims[0].from);
            b = px(fr, c->holds_up_to);
            top = MT;
        } else {
            double half = n > 1 ? (cfg->dims[0].to - cfg->dims[0].from) / (double)(n - 1) / 2 : 1;
            a = px(fr, fmax(fr->x0, c->value - half));
            b = px(fr, fmin(fr->x1, c->value + half));
            top = py(fr, c->holds_up_to);
        }
        fprintf(f,
                "<rect class=\"safe\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" "
                "fill=\"#009E73\" fill-opacity=\"0.18\"/>\n",
                a, top, b - a, bottom - top);
    }
}

static void points(FILE *f, const envelope_t *e, const frame_t *fr, const char *dir)
{
    const envelope_cfg_t *cfg = envelope_cfg(e);
    for (size_t i = 0; i < envelope_run_count(e); i++) {
        const envelope_run_t *r = envelope_run_at(e, i);
        double x = px(fr, r->v[0]);
        double y = cfg->n_dims == 2 ? py(fr, r->v[1]) : H - MB - 20 - 14.0 * (r->repeat - 1);
        const char *rel = strncmp(r->dir, dir, strlen(dir)) == 0 && r->dir[strlen(dir)] == '/'
                              ? r->dir + strlen(dir) + 1
                              : r->dir;
        fputs("<a href=\"", f);
        html_esc(f, rel);
        fprintf(f,
                "/report.html\"><circle class=\"point %s\" cx=\"%.1f\" cy=\"%.1f\" r=\"5\" "
                "fill=\"%s\"><title>run %zu: %s",
                verdict_words[r->verdict], x, y, verdict_colour[r->verdict], i + 1,
                verdict_words[r->verdict]);
        if (r->broke[0] || r->limited[0]) {
            fputs(": ", f);
            html_esc(f, r->broke[0] ? r->broke : r->limited);
        }
        fputs("</title></circle></a>\n", f);
    }
}

typedef struct {
    const envelope_t *e;
    const char *plan, *dir;
} page_t;

static int fill_page(FILE *f, void *ctx)
{
    const page_t *p = ctx;
    const envelope_t *e = p->e;
    const envelope_cfg_t *cfg = envelope_cfg(e);
    frame_t fr = {cfg->dims[0].from, cfg->dims[0].to, 0, 1};
    if (cfg->n_dims == 2) {
        fr.y0 = 0;
        fr.y1 = cfg->dims[1].to;
    }
    fr.x0 = cfg->n_dims == 2 ? cfg->dims[0].from : 0;
    fputs("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\n<title>squall "
          "envelope</title>\n<style>\n",
          f);
    fputs(html_css, f);
    fputs("</style></head><body>\n<h1>squall envelope: ", f);
    html_esc(f, p->plan);
    fprintf(f, "</h1>\n<div class=\"banner %s\">", envelope_complete(e) ? "good" : "bad");
    for (size_t i = 0; i < envelope_column_count(e); i++) {
        char text[1024];
        column_text(e, envelope_column_at(e, i), text, sizeof text);
        html_esc(f, text);
        fputs("<br>", f);
    }
    if (envelope_stopped(e)) {
        fputs("Stopped: ", f);
        html_esc(f, envelope_stopped(e));
    }
    fputs("</div>\n<p class=\"note\">The shaded area is where every run of every point passed "
          "(the safe zone). Each dot is one run (green pass, red fail, orange inconclusive, "
          "purple stopped by a brake); click it for its report.</p>\n<figure><svg "
          "class=\"plot\" viewBox=\"0 0 720 420\" width=\"720\" height=\"420\" "
          "xmlns=\"http://www.w3.org/2000/svg\">\n",
          f);
    zone(f, e, &fr);
    axes(f, &fr, cfg);
    points(f, e, &fr, p->dir);
    fputs("</svg></figure>\n</body></html>\n", f);
    return ferror(f) ? SQ_EIO : 0;
}

typedef struct {
    const envelope_t *e;
    const char *plan;
} doc_t;

static int fill_json(FILE *f, void *ctx)
{
    const doc_t *d = ctx;
    json_t *j = envelope_json(d->e, d->plan);
    int rc = j && json_dumpf(j, f, JSON_INDENT(2)) == 0 && fputc('\n', f) != EOF ? 0 : SQ_EIO;
    json_decref(j);
    return rc;
}

int envelope_write(const envelope_t *e, const char *plan, const char *dir, out_t *o)
{
    char path[4200];
    if (strlen(dir) > 4096)
        return SQ_EINVAL;
    int rc;
    snprintf(path, sizeof path, "%s/envelope.json", dir);
    if ((rc = file_write_atomic(path, fill_json, &(doc_t){e, plan}, o)))
        return rc;
    snprintf(path, sizeof path, "%s/envelope.csv", dir);
    if ((rc = file_write_atomic(path, fill_csv, (void *)e, o)))
        return rc;
    snprintf(path, sizeof path, "%s/envelope.html", dir);
    return file_write_atomic(path, fill_page, &(page_t){e, plan, dir}, o);
}
