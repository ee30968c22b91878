/* results.json: writing (atomically, squall/file.h) and reading back, with one clear line per
 * problem. The layout is documented in DEVELOPERS.md ("Results files"). */
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "results_int.h"
#include "squall/err.h"
#include "squall/file.h"

/* Percentiles listed in each cell's human-readable summary (readers ignore it). */
static const struct {
    const char *key;
    double p;
} summary_pcts[] = {{"p50", 50}, {"p90", 90}, {"p99", 99}, {"p99.9", 99.9}};

static json_t *summary_json(const hist_t *h)
{
    json_t *s =
        json_pack("{s:I, s:I, s:I, s:f}", "count", (json_int_t)hist_count(h), "min",
                  (json_int_t)hist_min(h), "max", (json_int_t)hist_max(h), "mean", hist_mean(h));
    for (size_t i = 0; s && i < sizeof summary_pcts / sizeof summary_pcts[0]; i++)
        json_object_set_new(s, summary_pcts[i].key,
                            json_integer(hist_value_at(h, summary_pcts[i].p)));
    return s;
}

static json_t *cell_json(const results_cell_t *c)
{
    json_t *hists = json_object(), *summary = json_object();
    for (int m = 0; hists && summary && m < RESULTS_M__COUNT; m++) {
        char *text;
        if (!c->hists[m])
            continue;
        if (hist_encode(c->hists[m], &text) != 0)
            goto fail;
        json_object_set_new(hists, results_metric_name(m), json_string(text));
        json_object_set_new(summary, results_metric_name(m), summary_json(c->hists[m]));
        free(text);
    }
    json_t *cj = json_pack("{s:s, s:s, s:s, s:I, s:I, s:I, s:o, s:o}", "phase", c->phase, "class",
                           c->class_name, "outcome", c->outcome, "count",
                           (json_int_t)c->counters.count, "bytes_in",
                           (json_int_t)c->counters.bytes_in, "bytes_out",
                           (json_int_t)c->counters.bytes_out, "hist", hists, "summary", summary);
    json_t *st = json_object(); /* {"429": 12, "503": 3}, when any answer had a code */
    for (size_t k = 0; st && k < RESULTS_STATUS_MAX && c->counters.status[k].code; k++) {
        char code[8];
        snprintf(code, sizeof code, "%d", c->counters.status[k].code);
        json_object_set_new(st, code, json_integer(c->counters.status[k].n));
    }
    if (st && c->counters.status_other)
        json_object_set_new(st, "other", json_integer(c->counters.status_other));
    if (cj && st && json_object_size(st))
        json_object_set(cj, "status", st);
    json_decref(st);
    return cj;
fail:
    json_decref(hists);
    json_decref(summary);
    return NULL;
}

json_t *results_meta_json(const results_t *r)
{
    const results_meta_t *m = &r->meta;
    char start[32];
    if (m->start_unix_ms)
        results_format_time(m->start_unix_ms, start);
    json_t *plan = m->plan_path || m->plan_sha256
                       ? json_pack("{s:s?, s:s?}", "path", m->plan_path, "sha256", m->plan_sha256)
                       : NULL;
    json_t *shard = m->shard_count
                        ? json_pack("{s:i, s:i}", "index", m->shard_index, "count", m->shard_count)
                        : NULL;
    json_t *meta = json_pack("{s:o?, s:s?, s:I, s:s?, s:s?, s:o?, s:b, s:s?, s:s?}", "plan", plan,
                             "start", m->start_unix_ms ? start : NULL, "duration_ns",
                             (json_int_t)m->duration_ns, "squall_version", m->squall_version,
                             "host", m->host, "shard", shard, "interrupted", m->interrupted,
                             "stop_reason", m->stop_reason, "target", m->target_url);
    if (meta && json_array_size(r->inputs))
        json_object_set(meta, "inputs", r->inputs);
    return meta;
}

static json_t *results_json(const results_t *r)
{
    json_t *cells = json_array();
    for (size_t i = 0; cells && i < r->ncells; i++)
        if (json_array_append_new(cells, cell_json(r->cells[i])) != 0) {
            json_decref(cells);
            return NULL;
        }
    return json_pack("{s:s, s:i, s:o, s:{s:s, s:I, s:I, s:i}, s:o, s:O}", "format", RESULTS_FORMAT,
                     "version", RESULTS_VERSION, "meta", results_meta_json(r), "histogram", "unit",
                     "ns", "lowest", (json_int_t)r->lowest, "highest", (json_int_t)r->highest,
                     "digits", r->digits, "cells", cells, "sections", r->sections);
}

static int dump_json(FILE *f, void *root)
{
    if (json_dumpf(root, f, JSON_INDENT(1) | JSON_REAL_PRECISION(17)) != 0 || fputc('\n', f) == EOF)
        return SQ_EIO;
    return 0;
}

int results_write(const results_t *r, const char *path, out_t *o)
{
    json_t *root = results_json(r);
    if (!root)
        return SQ_ENOMEM;
    int rc = file_write_atomic(path, dump_json, root, o);
    json_decref(root);
    return rc;
}

int results_write_dir(const results_t *r, const char *dir, out_t *o)
{
    if (mkdir(dir, 0777) != 0 && errno != EEXIST) {
        out_raw(o, OUT_ERROR, "%s: error: cannot create results directory: %s", dir,
                strerror(errno));
        return SQ_EIO;
    }
    struct stat st;
    if (stat(dir, &st) != 0 || !S_ISDIR(st.st_mode)) {
        out_raw(o, OUT_ERROR, "%s: error: exists and is not a directory", dir);
        return SQ_EIO;
    }
    size_t n = strlen(dir) + sizeof RESULTS_FILE + 1;
    char *path = malloc(n);
    if (!path)
        return SQ_ENOMEM;
    snprintf(path, n, "%s/%s", dir, RESULTS_FILE);
    int rc = results_write(r, path, o);
    free(path);
    return rc;
}

/* Reading: a context naming the file, so every message says which file and where. */
typedef struct {
    const char *file;
    out_t *o;
} reader_t;

static int bad(reader_t *rd, int code, const char *fmt, ...) __attribute__((format(printf, 3, 4)));
static int bad(reader_t *rd, int code, const char *fmt, ...)
{
    char msg[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    out_raw(rd->o, OUT_ERROR, "%s: error: %s", rd->file, msg);
    return code;
}

/* An optional string member (absent or null -> NULL) copied into a meta slot. */
static int opt_str(reader_t *rd, json_t *obj, const char *key, const char *where, const char **slot)
{
    json_t *v = json_object_get(obj, key);
    if (!v || json_is_null(v))
        return results_meta_str(slot, NULL);
    if (!json_is_string(v))
        return bad(rd, SQ_EPARSE, "%s.%s: expected a string or null", where, key);
    return results_meta_str(slot, json_string_value(v));
}

#define MAX_START_MS    INT64_C(4102444800000)       /* 2100-01-01T00:00:00Z */
#define MAX_DURATION_NS INT64_C(4000000000000000000) /* 126 years */

static int req_int(reader_t *rd, json_t *obj, const char *key, const char *where, int64_t min,
                   int64_t *v)
{
    json_t *x = json_object_get(obj, key);
    if (!json_is_integer(x) || json_integer_value(x) < min)
        return bad(rd, SQ_EPARSE, "%s.%s: expected an integer >= %lld", where, key, (long long)min);
    *v = json_integer_value(x);
    return 0;
}

static int read_plan_and_start(reader_t *rd, json_t *meta, results_t *r)
{
    json_t *plan = json_object_get(meta, "plan");
    int rc = 0;
    if (plan && !json_is_null(plan)) {
        if (!json_is_object(plan))
            return bad(rd, SQ_EPARSE, "meta.plan: expected an object or null");
        if ((rc = opt_str(rd, plan, "path", "meta.plan", &r->meta.plan_path)) ||
            (rc = opt_str(rd, plan, "sha256", "meta.plan", &r->meta.plan_sha256)))
            return rc;
    }
    json_t *start = json_object_get(meta, "start");
    if (start && !json_is_null(start) &&
        (!json_is_string(start) ||
         !results_parse_time(json_string_value(start), &r->meta.start_unix_ms)))
        return bad(rd, SQ_EPARSE, "meta.start: expected a time like \"2026-01-31T12:00:00.000Z\"");
    /* Start and end are added in ns (merge): both stay far from int64's end (fuzz-results). */
    if (r->meta.start_unix_ms < 0 || r->meta.start_unix_ms > MAX_START_MS)
        return bad(rd, SQ_EPARSE, "meta.start: expected a time from 1970 to 2099");
    return 0;
}

static int read_shard(reader_t *rd, json_t *meta, results_t *r)
{
    json_t *shard = json_object_get(meta, "shard");
    if (!shard || json_is_null(shard)) {
        r->meta.shard_index = r->meta.shard_count = 0;
        return 0;
    }
    int64_t index, count;
    int rc;
    if (!json_is_object(shard))
        return bad(rd, SQ_EPARSE, "meta.shard: expected an object or null");
    if ((rc = req_int(rd, shard, "index", "meta.shard", 1, &index)) ||
        (rc = req_int(rd, shard, "count", "meta.shard", 1, &count)))
        return rc;
    if (index > count || count > 1000000)
        return bad(rd, SQ_EPARSE, "meta.shard: index %lld is not within 1..%lld", (long long)index,
                   (long long)count);
    r->meta.shard_index = (int)index;
    r->meta.shard_count = (int)count;
    return 0;
}

static int read_meta(reader_t *rd, json_t *meta, results_t *r)
{
    if (!json_is_object(meta))
        return bad(rd, SQ_EPARSE, "meta: expected an object");
    int rc;
    if ((rc = read_plan_and_start(rd, meta, r)) || (rc = read_shard(rd, meta, r)) ||
        (rc = req_int(rd, meta, "duration_ns", "meta", 0, &r->meta.duration_ns)) ||
        (r->meta.duration_ns > MAX_DURATION_NS &&
         (rc = bad(rd, SQ_EPARSE, "meta.duration_ns: expected at most %lld",
                   (long long)MAX_DURATION_NS))) ||
        (rc = opt_str(rd, meta, "squall_version", "meta", &r->meta.squall_version)) ||
        (rc = opt_str(rd, meta, "host", "meta", &r->meta.host)) ||
        (rc = opt_str(rd, meta, "stop_reason", "meta", &r->meta.stop_reason)) ||
        (rc = opt_str(rd, meta, "target", "meta", &r->meta.target_url)))
        return rc;
    json_t *intr = json_object_get(meta, "interrupted");
    if (!json_is_boolean(intr))
        return bad(rd, SQ_EPARSE, "meta.interrupted: expected true or false");
    r->meta.interrupted = json_is_true(intr);
    json_t *inputs = json_object_get(meta, "inputs");
    if (inputs) {
        size_t i;
        json_t *in;
        if (!json_is_array(inputs))
            return bad(rd, SQ_EPARSE, "meta.inputs: expected an array");
        json_array_foreach(inputs, i, in)
        {
            if (!json_is_object(in))
                return bad(rd, SQ_EPARSE, "meta.inputs[%zu]: expected an object", i);
        }
        json_decref(r->inputs);
        r->inputs = json_incref(inputs);
    }
    return 0;
}

static int read_hists(reader_t *rd, json_t *hists, results_cell_t *c, size_t ci)
{
    const char *key;
    json_t *v;
    if (!json_is_object(hists))
        return bad(rd, SQ_EPARSE, "cells[%zu].hist: expected an object", ci);
    json_object_foreach(hists, key, v)
    {
        int m = results_metric_from_name(key);
        if (m < 0)
            return bad(rd, SQ_EPARSE, "cells[%zu].hist: unknown metric \"%s\"", ci, key);
        hist_t *h;
        if (!json_is_string(v) || hist_decode(json_string_value(v), &h) != 0)
            return bad(rd, SQ_EPARSE, "cells[%zu].hist.%s: malformed histogram", ci, key);
        if (hist_lowest(h) != c->owner->lowest || hist_highest(h) != c->owner->highest ||
            hist_digits(h) != c->owner->digits) {
            hist_free(h);
            return bad(rd, SQ_EPARSE,
                       "cells[%zu].hist.%s: histogram configuration differs from the file's "
                       "\"histogram\"",
                       ci, key);
        }
        c->hists[m] = h;
    }
    return 0;
}

static int read_cell(reader_t *rd, json_t *jc, size_t ci, results_t *r)
{
    const char *keys[3] = {"phase", "class", "outcome"}, *val[3];
    if (!json_is_object(jc))
        return bad(rd, SQ_EPARSE, "cells[%zu]: expected an object", ci);
    for (int k = 0; k < 3; k++) {
        val[k] = json_string_value(json_object_get(jc, keys[k]));
        if (!val[k])
            return bad(rd, SQ_EPARSE, "cells[%zu].%s: expected a string", ci, keys[k]);
    }
    if (results_cell_find(r, val[0], val[1], val[2]))
        return bad(rd, SQ_EPARSE, "cells[%zu]: a second cell for (%s, %s, %s)", ci, val[0], val[1],
                   val[2]);
    results_cell_t *c = results_cell(r, val[0], val[1], val[2]);
    if (!c)
        return SQ_ENOMEM;
    char where[32];
    snprintf(where, sizeof where, "cells[%zu]", ci);
    int rc;
    if ((rc = req_int(rd, jc, "count", where, 0, &c->counters.count)) ||
        (rc = req_int(rd, jc, "bytes_in", where, 0, &c->counters.bytes_in)) ||
        (rc = req_int(rd, jc, "bytes_out", where, 0, &c->counters.bytes_out)))
        return rc;
    json_t *st = json_object_get(jc, "status"), *n; /* optional: written since 0.1 */
    const char *code;
    if (st && !json_is_object(st))
        return bad(rd, SQ_EPARSE, "%s.status: expected an object", where);
    json_object_foreach(st, code, n)
    {
        char *end;
        long v = strtol(code, &end, 10);
        if (!json_is_integer(n) || json_integer_value(n) < 0 ||
            (strcmp(code, "other") && (*end || v < 100 || v > 999)))
            return bad(rd, SQ_EPARSE, "%s.status.%s: expected a count under a status code", where,
                       code);
        if (!strcmp(code, "other"))
            c->counters.status_other += json_integer_value(n);
        else
            results_status_add(&c->counters, (int)v, json_integer_value(n));
    }
    json_t *hists = json_object_get(jc, "hist");
    return hists ? read_hists(rd, hists, c, ci) : 0;
}

static int read_sections(reader_t *rd, json_t *sections, results_t *r)
{
    const char *name;
    json_t *v;
    if (!sections)
        return 0;
    if (!json_is_object(sections))
        return bad(rd, SQ_EPARSE, "sections: expected an object");
    json_object_foreach(sections, name, v)
    {
        if (results_reserved_name(name) || !*name || !json_is_object(v))
            return bad(rd, SQ_EPARSE, "sections.%s: expected an object under a free name", name);
    }
    json_decref(r->sections);
    r->sections = json_incref(sections);
    return 0;
}

/* Format and version come first, so an unknown file gets exactly one line about that. */
static int check_format(reader_t *rd, json_t *root)
{
    if (!json_is_object(root))
        return bad(rd, SQ_EVERSION, "not a squall results file (expected a JSON object)");
    const char *format = json_string_value(json_object_get(root, "format"));
    if (!format || strcmp(format, RESULTS_FORMAT) != 0)
        return bad(rd, SQ_EVERSION, "not a squall results file (format \"%s\", expected \"%s\")",
                   format ? format : "(none)", RESULTS_FORMAT);
    json_t *version = json_object_get(root, "version");
    if (!json_is_integer(version))
        return bad(rd, SQ_EVERSION, "results version missing (this squall reads version %d)",
                   RESULTS_VERSION);
    if (json_integer_value(version) != RESULTS_VERSION)
        return bad(rd, SQ_EVERSION,
                   "results version %lld is not supported (this squall reads "
                   "version %d)",
                   (long long)json_integer_value(version), RESULTS_VERSION);
    return 0;
}

static int results_from_json(reader_t *rd, json_t *root, results_t **out)
{
    int rc = check_format(rd, root);
    if (rc != 0)
        return rc;
    json_t *hc = json_object_get(root, "histogram");
    int64_t lowest, highest, digits;
    const char *unit = json_string_value(json_object_get(hc, "unit"));
    if (!json_is_object(hc) || !unit || strcmp(unit, "ns") != 0)
        return bad(rd, SQ_EPARSE, "histogram: expected {\"unit\": \"ns\", ...}");
    if ((rc = req_int(rd, hc, "lowest", "histogram", 1, &lowest)) ||
        (rc = req_int(rd, hc, "highest", "histogram", 2, &highest)) ||
        (rc = req_int(rd, hc, "digits", "histogram", 1, &digits)))
        return rc;
    results_t *r;
    if (digits > 5 || results_new_with(lowest, highest, (int)digits, &r) != 0)
        return bad(rd, SQ_EPARSE, "histogram: unusable configuration");
    json_t *cells = json_object_get(root, "cells"), *jc;
    size_t i;
    if (!json_is_array(cells))
        rc = bad(rd, SQ_EPARSE, "cells: expected an array");
    json_array_foreach(cells, i, jc)
    {
        if (rc == 0)
            rc = read_cell(rd, jc, i, r);
    }
    if (rc == 0)
        rc = read_meta(rd, json_object_get(root, "meta"), r);
    if (rc == 0)
        rc = read_sections(rd, json_object_get(root, "sections"), r);
    if (rc != 0) {
        results_free(r);
        return rc;
    }
    *out = r;
    return 0;
}

int results_read(const char *path, results_t **out, out_t *o)
{
    *out = NULL;
    struct stat st;
    char *file = NULL;
    if (stat(path, &st) == 0 && S_ISDIR(st.st_mode)) {
        size_t n = strlen(path) + sizeof RESULTS_FILE + 1;
        if (!(file = malloc(n)))
            return SQ_ENOMEM;
        snprintf(file, n, "%s/%s", path, RESULTS_FILE);
    } else if (!(file = strdup(path))) {
        return SQ_ENOMEM;
    }
    reader_t rd = {file, o};
    FILE *f = fopen(file, "rb");
    int rc;
    if (!f) {
        rc = bad(&rd, SQ_EIO, "cannot read results: %s", strerror(errno));
        free(file);
        return rc;
    }
    json_error_t err;
    json_t *root = json_loadf(f, JSON_REJECT_DUPLICATES, &err);
    fclose(f);
    if (!root) {
        out_raw(o, OUT_ERROR, "%s:%d:%d: error: malformed JSON: %s", file, err.line, err.column,
                err.text);
        rc = SQ_EPARSE;
    } else {
        rc = results_from_json(&rd, root, out);
    }
    json_decref(root);
    free(file);
    return rc;
}
