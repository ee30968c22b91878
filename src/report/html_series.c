/* series.csv read back for reports and comparisons: one row per class per second, columns
 * found by their header names. */
#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/hist.h"
#include "squall/report.h"
#include "squall/results.h"

struct report_series {
    report_row_t *rows;
    size_t n, cap;
    char **names; /* phase and class strings, each kept once per row */
    size_t n_names, cap_names;
    bool has_p999; /* the file has the p999_ms column (files before it do not) */
    bool upper;    /* the run's figures are a merge's upper bounds (their _upper names) */
    report_heat_row_t *heat;
    size_t n_heat, cap_heat;
};

enum col {
    C_SECOND,
    C_PHASE,
    C_CLASS,
    C_STARTED,
    C_COMPLETED,
    C_RATE,
    C_ERRORS,
    C_P50,
    C_P90,
    C_P99,
    C_MAX,
    C__REQUIRED,
    C_P999 = C__REQUIRED, /* optional: added after the others */
    C_PLANNED,
    C_UNIX_MS,
#define RUN_ENUM(e, name, merged) C_##e, /* the run's figures of the second */
    RESULTS_SERIES_RUN_MAP(RUN_ENUM)
#undef RUN_ENUM
        C__COUNT
};
#define RUN_NAME(e, name, merged)   name,
#define RUN_MERGED(e, name, merged) [C_##e] = merged,
static const char *const col_names[C__COUNT] = {
    "second",     "phase",   "class",   "started", "completed",
    "rate_per_s", "errors",  "p50_ms",  "p90_ms",  "p99_ms",
    "max_ms",     "p999_ms", "planned", "unix_ms", RESULTS_SERIES_RUN_MAP(RUN_NAME)};
/* The names a merge writes them under; a name of its own is an upper bound's. */
static const char *const merged_names[C__COUNT] = {RESULTS_SERIES_RUN_MAP(RUN_MERGED)};

int report_series_new(report_series_t **out)
{
    *out = calloc(1, sizeof(**out));
    return *out ? 0 : SQ_ENOMEM;
}

void report_series_free(report_series_t *s)
{
    if (!s)
        return;
    for (size_t i = 0; i < s->n_names; i++)
        free(s->names[i]);
    free(s->names);
    free(s->rows);
    free(s->heat);
    free(s);
}

size_t report_series_count(const report_series_t *s)
{
    return s->n;
}

const report_row_t *report_series_at(const report_series_t *s, size_t i)
{
    return i < s->n ? &s->rows[i] : NULL;
}

bool report_series_has_p999(const report_series_t *s)
{
    return s->has_p999;
}

bool report_series_upper(const report_series_t *s)
{
    return s->upper;
}

/* Splits line in place at commas into at most cap fields; returns the count. */
static size_t split(char *line, char **f, size_t cap)
{
    size_t n = 0;
    line[strcspn(line, "\r\n")] = '\0';
    for (char *p = line; n < cap;) {
        f[n++] = p;
        p = strchr(p, ',');
        if (!p)
            break;
        *p++ = '\0';
    }
    return n;
}

static const char *keep(report_series_t *s, const char *text)
{
    /* Rows of one run repeat few names: reuse the last matching one. */
    for (size_t i = s->n_names; i-- > 0 && i + 16 >= s->n_names;)
        if (strcmp(s->names[i], text) == 0)
            return s->names[i];
    if (s->n_names == s->cap_names) {
        size_t cap = s->cap_names ? 2 * s->cap_names : 64;
        char **nn = realloc(s->names, cap * sizeof(*nn));
        if (!nn)
            return NULL;
        s->names = nn;
        s->cap_names = cap;
    }
    char *c = strdup(text);
    if (c)
        s->names[s->n_names++] = c;
    return c;
}

static bool number(const char *t, double *v)
{
    char *end;
    errno = 0;
    *v = strtod(t, &end);
    return end != t && *end == '\0' && errno == 0;
}

/* One data line into a row; false when a field is malformed. */
static bool parse_row(report_series_t *s, char **f, size_t nf, const int *idx, report_row_t *row)
{
    double v[C__COUNT];
    for (int c = 0; c < C__COUNT; c++)
        v[c] = c == C_UNIX_MS ? 0 : NAN;
    for (int c = 0; c < C__COUNT; c++) {
        if (idx[c] < 0 && c >= C__REQUIRED)
            continue;
        if ((size_t)idx[c] >= nf)
            return false;
        if (c != C_PHASE && c != C_CLASS && !number(f[idx[c]], &v[c]))
            return false;
    }
    /* Counts and instants become integers: a value no int64_t holds makes the row malformed. */
    static const int ints[] = {C_SECOND, C_STARTED, C_COMPLETED, C_ERRORS, C_UNIX_MS};
    for (size_t k = 0; k < sizeof ints / sizeof ints[0]; k++)
        if (!(fabs(v[ints[k]]) < 9.2e18))
            return false;
    row->phase = keep(s, f[idx[C_PHASE]]);
    row->cls = keep(s, f[idx[C_CLASS]]);
    row->second = (int64_t)v[C_SECOND];
    row->started = (int64_t)v[C_STARTED];
    row->completed = (int64_t)v[C_COMPLETED];
    row->errors = (int64_t)v[C_ERRORS];
    row->rate_per_s = v[C_RATE];
    row->p50_ms = v[C_P50];
    row->p90_ms = v[C_P90];
    row->p99_ms = v[C_P99];
    row->max_ms = v[C_MAX];
    row->p999_ms = v[C_P999];
    row->planned = v[C_PLANNED];
    row->unix_ms = (int64_t)v[C_UNIX_MS];
    for (int k = 0; k < RESULTS_RUN__COUNT; k++) /* the run's figures, in the map's order */
        row->run[k] = v[C_WATCH_OPEN + k];
    return row->phase && row->cls;
}

static int header(report_series_t *s, char *line, int *idx, const char *path, out_t *o)
{
    char *f[64];
    size_t nf = split(line, f, 64);
    for (int c = 0; c < C__COUNT; c++) {
        idx[c] = -1;
        for (size_t k = 0; k < nf; k++)
            if (strcmp(f[k], col_names[c]) == 0)
                idx[c] = (int)k;
            else if (merged_names[c] && strcmp(f[k], merged_names[c]) == 0)
                idx[c] = (int)k, s->upper = true;
        if (c == C_P999)
            s->has_p999 = idx[c] >= 0;
        else if (c < C__REQUIRED && idx[c] < 0) {
            out_error(o, "%s:1: no column '%s' in the header", path, col_names[c]);
            return SQ_EPARSE;
        }
    }
    return 0;
}

static int read_lines(FILE *f, report_series_t *s, const char *path, out_t *o)
{
    char line[4096];
    int idx[C__COUNT];
    if (!fgets(line, sizeof line, f)) {
        out_error(o, "%s: empty file (expected a header line)", path);
        return SQ_EPARSE;
    }
    int rc = header(s, line, idx, path, o);
    for (size_t ln = 2; rc == 0 && fgets(line, sizeof line, f); ln++) {
        char *fields[64];
        size_t nf = split(line, fields, 64);
        if (nf == 1 && fields[0][0] == '\0')
            continue;
        if (s->n == s->cap) {
            size_t cap = s->cap ? 2 * s->cap : 256;
            report_row_t *nr = realloc(s->rows, cap * sizeof(*nr));
            if (!nr)
                return SQ_ENOMEM;
            s->rows = nr;
            s->cap = cap;
        }
        if (!parse_row(s, fields, nf, idx, &s->rows[s->n])) {
            out_error(o,
                      "%s:%zu: malformed row (expected the header's columns, each a number "
                      "but phase and class)",
                      path, ln);
            rc = SQ_EPARSE;
        }
        s->n++;
    }
    return rc;
}

int report_series_read(const char *path, report_series_t **out, out_t *o)
{
    *out = NULL;
    FILE *f = fopen(path, "r");
    if (!f) {
        out_error(o, "cannot read %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    report_series_t *s;
    int rc = report_series_new(&s);
    if (rc == 0)
        rc = read_lines(f, s, path, o);
    fclose(f);
    if (rc) {
        report_series_free(s);
        return rc;
    }
    *out = s;
    return 0;
}

double report_heat_edge(size_t k)
{
    return pow(10, -2 + (double)k / 4);
}

size_t report_series_heat_count(const report_series_t *s)
{
    return s->n_heat;
}

const report_heat_row_t *report_series_heat_at(const report_series_t *s, size_t i)
{
    return i < s->n_heat ? &s->heat[i] : NULL;
}

/* One series-hist.csv line (second,phase,class,unix_ms,histogram) into a heat row. */
static int heat_line(report_series_t *s, char *line)
{
    char *f[8];
    double sec;
    hist_t *h = NULL;
    if (split(line, f, 8) != 5 || !number(f[0], &sec) || hist_decode(f[4], &h) != 0)
        return SQ_EPARSE;
    if (s->n_heat == s->cap_heat) {
        size_t cap = s->cap_heat ? 2 * s->cap_heat : 64;
        report_heat_row_t *nh = realloc(s->heat, cap * sizeof(*nh));
        if (!nh) {
            hist_free(h);
            return SQ_ENOMEM;
        }
        s->heat = nh;
        s->cap_heat = cap;
    }
    report_heat_row_t *r = &s->heat[s->n_heat];
    *r = (report_heat_row_t){.second = (int64_t)sec, .phase = keep(s, f[1]), .cls = keep(s, f[2])};
    hist_iter_t it;
    hist_iter_init(&it, h);
    while (hist_iter_next(&it)) {
        double ms = ((double)it.lo + (double)it.hi) / 2e6;
        double k = floor((log10(fmax(ms, 1e-9)) + 2) * 4);
        r->bins[(size_t)fmin(REPORT_HEAT_BINS - 1, fmax(0, k))] += (double)it.count;
    }
    hist_free(h);
    if (!r->phase || !r->cls)
        return SQ_ENOMEM;
    s->n_heat++;
    return 0;
}

int report_series_read_hist(report_series_t *s, const char *path, out_t *o)
{
    FILE *f = fopen(path, "r");
    if (!f) {
        out_error(o, "cannot read %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    /* Lines hold an encoded histogram: read each whole, whatever its length. */
    char *line = NULL;
    size_t cap = 0;
    int rc = 0;
    for (size_t ln = 1; rc == 0 && getline(&line, &cap, f) > 0; ln++) {
        if (ln == 1 || line[0] == '\n')
            continue;
        rc = heat_line(s, line);
        if (rc == SQ_EPARSE)
            out_error(o, "%s:%zu: malformed row (expected second,phase,class,unix_ms,histogram)",
                      path, ln);
    }
    free(line);
    fclose(f);
    return rc;
}
