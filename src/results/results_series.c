/* A merge's per-second series: series.csv rows of the same wall-clock second and (phase, class)
 * added up, their percentiles from the rows' histograms (series-hist.csv), so that a merged
 * second has the percentiles of all its requests. */
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "results_int.h"
#include "squall/err.h"
#include "squall/file.h"

enum {
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
    C_PLANNED,
    C_UNIX,
    C_P999,
    C__OPTIONAL = C_P999, /* from here on: columns a file may lack (an older squall wrote it) */
#define RUN_ENUM(e, name, merged) C_##e,
    RESULTS_SERIES_RUN_MAP(RUN_ENUM)
#undef RUN_ENUM
        C__COUNT
};
#define RUN_NAME(e, name, merged)   name,
#define RUN_MERGED(e, name, merged) [C_##e] = merged,
static const char *const col_names[C__COUNT] = {
    "second",     "phase",   "class",   "started", "completed",
    "rate_per_s", "errors",  "p50_ms",  "p90_ms",  "p99_ms",
    "max_ms",     "planned", "unix_ms", "p999_ms", RESULTS_SERIES_RUN_MAP(RUN_NAME)};
/* The names a merge writes the run's figures under (a merged file read again finds them). */
static const char *const merged_names[C__COUNT] = {RESULTS_SERIES_RUN_MAP(RUN_MERGED)};

/* One row of one input, placed in the merge. */
typedef struct {
    int64_t second; /* of the merge */
    size_t key;     /* (phase, class) in first-seen order */
    int64_t input_second;
    size_t input;       /* which of the merged directories */
    double v[C__COUNT]; /* numbers by column (phase and class unused) */
    char *hist;         /* the row's response histogram (sqh1 text), or NULL */
    char *sync;         /* its RESULTS_SERIES_SYNC cells as written, or NULL (a merged row of
                           several inputs has none: R̄ does not add) */
} row_t;

typedef struct {
    row_t *rows;
    size_t n, cap;
    char **keys; /* "phase\0class" per key, in first-seen order */
    size_t n_keys;
    int64_t start_ms;
    size_t input; /* the directory being read */
    bool bounds;  /* the run's figures are bounds: several inputs, or an input that had them */
    out_t *o;
} series_t;

static size_t split(char *line, char **f, size_t cap)
{
    size_t n = 0;
    line[strcspn(line, "\r\n")] = '\0';
    for (char *p = line; n < cap;) {
        f[n++] = p;
        if (!(p = strchr(p, ',')))
            break;
        *p++ = '\0';
    }
    return n;
}

/* The key of (phase, class), added when new; SIZE_MAX when out of memory. */
static size_t key_of(series_t *s, const char *phase, const char *cls)
{
    for (size_t i = s->n_keys; i-- > 0;)
        if (!strcmp(s->keys[i], phase) && !strcmp(s->keys[i] + strlen(phase) + 1, cls))
            return i;
    size_t lp = strlen(phase), lc = strlen(cls);
    char **nk = realloc(s->keys, (s->n_keys + 1) * sizeof(*nk));
    char *k = malloc(lp + lc + 2);
    if (nk)
        s->keys = nk;
    if (!nk || !k) {
        free(k);
        return SIZE_MAX;
    }
    memcpy(k, phase, lp + 1);
    memcpy(k + lp + 1, cls, lc + 1);
    s->keys[s->n_keys] = k;
    return s->n_keys++;
}

static int header(series_t *s, char *line, int *idx, const char *path, out_t *o)
{
    char *f[64];
    size_t nf = split(line, f, 64);
    for (int c = 0; c < C__COUNT; c++) {
        idx[c] = -1;
        for (size_t k = 0; k < nf; k++)
            if (!strcmp(f[k], col_names[c]))
                idx[c] = (int)k;
            else if (merged_names[c] && !strcmp(f[k], merged_names[c]))
                idx[c] = (int)k, s->bounds = true;
        if (idx[c] < 0 && c < C__OPTIONAL) {
            out_error(o, "%s:1: no column '%s' in the header (needed to merge seconds)", path,
                      col_names[c]);
            return SQ_EPARSE;
        }
    }
    return 0;
}

static bool parse_row(char **f, size_t nf, const int *idx, row_t *r)
{
    for (int c = 0; c < C__COUNT; c++) {
        r->v[c] = NAN;
        /* Every column the header names must be in the row, phase and class too (a short row
         * read them past the fields: found by fuzz-results). */
        if (idx[c] >= 0 && (size_t)idx[c] >= nf)
            return false;
        if (c == C_PHASE || c == C_CLASS || idx[c] < 0)
            continue;
        char *end;
        r->v[c] = strtod(f[idx[c]], &end);
        if (end == f[idx[c]] || *end)
            return false;
    }
    return true;
}

/* The histogram line for (second, phase, class) when the next one of hf is it (the two files
 * are written in one order; a row without a histogram has none). */
static char *hist_for(FILE *hf, char **pending, size_t *cap, const char *second, const char *phase,
                      const char *cls)
{
    if (!hf)
        return NULL;
    if (!*pending || !**pending) {
        if (getline(pending, cap, hf) < 0)
            return NULL;
    }
    char *copy = strdup(*pending), *f[5];
    if (!copy)
        return NULL;
    size_t nf = split(copy, f, 5);
    char *text = NULL;
    if (nf == 5 && !strcmp(f[0], second) && !strcmp(f[1], phase) && !strcmp(f[2], cls)) {
        text = strdup(f[4]);
        (*pending)[0] = '\0';
    }
    free(copy);
    return text;
}

static int add_row(series_t *s, row_t *r)
{
    if (s->n == s->cap) {
        size_t cap = s->cap ? 2 * s->cap : 1024;
        row_t *nr = realloc(s->rows, cap * sizeof(*nr));
        if (!nr)
            return SQ_ENOMEM;
        s->rows = nr;
        s->cap = cap;
    }
    s->rows[s->n++] = *r;
    return 0;
}

/* The column of the first sync cell ("sync_window") in a header, or -1 (an older squall's). */
static int sync_column(const char *header_line)
{
    char *copy = strdup(header_line), *f[64];
    int at = -1;
    size_t nf = copy ? split(copy, f, 64) : 0;
    for (size_t k = 0; k < nf && at < 0; k++)
        if (!strcmp(f[k], "sync_window"))
            at = (int)k;
    free(copy);
    return at;
}

/* A row's five sync cells joined as written, or NULL when the row has none. */
static char *sync_text(char **f, size_t nf, int at)
{
    if (at < 0 || (size_t)at + 5 > nf)
        return NULL;
    size_t len = 5;
    for (int k = 0; k < 5; k++)
        len += strlen(f[at + k]);
    char *t = malloc(len);
    if (t)
        snprintf(t, len, "%s,%s,%s,%s,%s", f[at], f[at + 1], f[at + 2], f[at + 3], f[at + 4]);
    return t;
}

/* Every row of one input's series.csv (and its histograms) into s. */
static int read_input(series_t *s, FILE *f, FILE *hf, const char *path)
{
    char *line = NULL, *pending = NULL;
    size_t cap = 0, pcap = 0;
    int idx[C__COUNT], rc = 0, sync_at = -1;
    if (getline(&line, &cap, f) < 0) {
        out_error(s->o, "%s: empty file (expected a header line)", path);
        rc = SQ_EPARSE;
    } else {
        sync_at = sync_column(line);
        rc = header(s, line, idx, path, s->o);
    }
    if (hf && getline(&pending, &pcap, hf) >= 0)
        pending[0] = '\0'; /* its header */
    for (size_t ln = 2; rc == 0 && getline(&line, &cap, f) >= 0; ln++) {
        char *fields[64];
        size_t nf = split(line, fields, 64);
        row_t r = {0};
        if (nf == 1 && !fields[0][0])
            continue;
        if (!parse_row(fields, nf, idx, &r)) {
            out_error(s->o, "%s:%zu: malformed row (expected the header's columns)", path, ln);
            rc = SQ_EPARSE;
            break;
        }
        r.key = key_of(s, fields[idx[C_PHASE]], fields[idx[C_CLASS]]);
        r.input = s->input;
        r.input_second = (int64_t)r.v[C_SECOND];
        r.second = llround((r.v[C_UNIX] - (double)s->start_ms) / 1e3);
        r.hist = hist_for(hf, &pending, &pcap, fields[idx[C_SECOND]], fields[idx[C_PHASE]],
                          fields[idx[C_CLASS]]);
        r.sync = sync_text(fields, nf, sync_at);
        rc = r.key == SIZE_MAX ? SQ_ENOMEM : add_row(s, &r);
        if (rc) {
            free(r.hist);
            free(r.sync);
        }
    }
    free(line);
    free(pending);
    return rc;
}

static int cmp_row(const void *a, const void *b)
{
    const row_t *x = a, *y = b;
    if (x->second != y->second)
        return (x->second > y->second) - (x->second < y->second);
    return (x->key > y->key) - (x->key < y->key);
}

/* The rows g[0..n) of one second and (phase, class) into g[0]: counts, rates and planned starts
 * add; percentiles from the merged histograms (NAN when a row with answers has none). Returns 1
 * when percentiles are unknown, 0, or SQ_ENOMEM / SQ_ERANGE. */
static int combine(row_t *g, size_t n)
{
    static const int add[] = {C_STARTED, C_COMPLETED, C_RATE, C_ERRORS, C_PLANNED};
    hist_t *h = NULL, *one;
    bool unknown = false;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < n; i++) {
        if (!g[i].hist) {
            unknown |= g[i].v[C_COMPLETED] > 0;
            continue;
        }
        if (unknown || hist_decode(g[i].hist, &one) != 0) {
            unknown = true;
            continue;
        }
        if (!h) {
            h = one;
            continue;
        }
        rc = hist_merge(h, one);
        hist_free(one);
    }
    for (size_t i = 1; i < n; i++) {
        for (size_t k = 0; k < sizeof add / sizeof add[0]; k++)
            g[0].v[add[k]] += g[i].v[add[k]];
        if (g[i].v[C_UNIX] < g[0].v[C_UNIX])
            g[0].v[C_UNIX] = g[i].v[C_UNIX];
        free(g[i].hist);
        g[i].hist = NULL;
    }
    for (size_t i = 0; i < n; i++) {
        free(g[i].sync);
        g[i].sync = NULL;
    }
    static const struct {
        int col;
        double p; /* 100: the maximum */
    } pcts[] = {{C_P50, 50}, {C_P90, 90}, {C_P99, 99}, {C_MAX, 100}, {C_P999, 99.9}};
    for (size_t k = 0; k < sizeof pcts / sizeof pcts[0]; k++) {
        double v = !h                 ? 0.0
                   : pcts[k].p >= 100 ? (double)hist_max(h)
                                      : (double)hist_value_at(h, pcts[k].p);
        g[0].v[pcts[k].col] = unknown ? NAN : v / 1e6;
    }
    free(g[0].hist);
    g[0].hist = NULL;
    if (rc == 0 && h && !unknown && hist_encode(h, &g[0].hist) != 0)
        rc = SQ_ENOMEM;
    hist_free(h);
    return rc ? rc : unknown;
}

/* The run's figures of one merged second over the rows g[0..n) of every input, into each row:
 * counts and open streams add up over the inputs (each input's figure taken once, from its
 * first row of the second), so do the peaks in flight and queued (an upper bound: the shards'
 * peaks need not coincide); the longest queue wait is the largest; the propagation p99 is the
 * largest shard's (an upper bound of the pooled p99: no more than 1 % of any shard's events, so
 * of all of them, lie above it), "nan" when no shard stamped an event. An input without the
 * columns (an older squall) makes them all unknown. seen has a flag per input, all false. */
static void combine_run(row_t *g, size_t n, bool *seen)
{
    static const int sum[] = {C_WATCH_OPEN,   C_WATCH_DROPPED, C_WATCH_RECONNECTS,
                              C_WATCH_EVENTS, C_IN_FLIGHT,     C_QUEUED};
    static const int max[] = {C_WATCH_P99, C_QUEUE_WAIT};
    double v[C__COUNT];
    bool missing = false;
    for (size_t k = 0; k < sizeof sum / sizeof sum[0]; k++)
        v[sum[k]] = 0;
    for (size_t k = 0; k < sizeof max / sizeof max[0]; k++)
        v[max[k]] = NAN;
    for (size_t i = 0; i < n; i++) {
        if (seen[g[i].input])
            continue;
        seen[g[i].input] = true;
        missing |= isnan(g[i].v[C_WATCH_OPEN]);
        for (size_t k = 0; k < sizeof sum / sizeof sum[0]; k++)
            v[sum[k]] += g[i].v[sum[k]];
        for (size_t k = 0; k < sizeof max / sizeof max[0]; k++)
            v[max[k]] = fmax(v[max[k]], g[i].v[max[k]]); /* fmax passes over a NaN */
    }
    for (size_t i = 0; i < n; i++) {
        seen[g[i].input] = false;
        for (int c = C__OPTIONAL + 1; c < C__COUNT; c++)
            g[i].v[c] = missing ? NAN : v[c];
    }
}

/* combine_run over each merged second of the sorted rows. SQ_ENOMEM. */
static int combine_seconds(series_t *s, size_t n_inputs)
{
    bool *seen = calloc(n_inputs ? n_inputs : 1, sizeof(*seen));
    if (!seen)
        return SQ_ENOMEM;
    for (size_t i = 0; i < s->n;) {
        size_t j = i + 1;
        while (j < s->n && s->rows[j].second == s->rows[i].second)
            j++;
        combine_run(&s->rows[i], j - i, seen);
        i = j;
    }
    free(seen);
    return 0;
}

/* Groups the sorted rows in place: s->rows[0..*n) are the merged rows. */
static int group(series_t *s, size_t *out, size_t *unknown)
{
    size_t w = 0;
    *unknown = 0;
    for (size_t i = 0; i < s->n;) {
        size_t j = i + 1;
        while (j < s->n && cmp_row(&s->rows[i], &s->rows[j]) == 0)
            j++;
        int rc = j - i > 1 ? combine(&s->rows[i], j - i) : 0;
        if (rc < 0)
            return rc;
        *unknown += (size_t)rc;
        row_t r = s->rows[i];
        for (size_t k = i + 1; k < j; k++)
            s->rows[k].hist = s->rows[k].sync = NULL;
        s->rows[i].hist = s->rows[i].sync = NULL;
        s->rows[w++] = r;
        i = j;
    }
    *out = w;
    return 0;
}

static int fill_series(FILE *f, void *ctx)
{
    const series_t *s = ctx;
    /* One input's figures stay exact (a merge of one input is that input): no bound's names. */
    fprintf(f, "%s\n", s->bounds ? RESULTS_SERIES_MERGED_HEADER : RESULTS_SERIES_HEADER);
    for (size_t i = 0; i < s->n; i++) {
        const row_t *r = &s->rows[i];
        const char *phase = s->keys[r->key], *cls = phase + strlen(phase) + 1;
        const double *v = r->v;
        /* marks: a merge does not carry them (each input's results.json has its instants); the
         * sync cells only from a row of one input (results.json's "sync" section has the merged
         * gauge). */
        fprintf(f, "%lld,%s,%s,%lld,%lld,%.1f,%lld,%.3f,%.3f,%.3f,%.3f,%.3f,%lld,%.3f,,",
                (long long)r->second, phase, cls, (long long)v[C_STARTED],
                (long long)v[C_COMPLETED], v[C_RATE], (long long)v[C_ERRORS], v[C_P50], v[C_P90],
                v[C_P99], v[C_MAX], v[C_PLANNED], (long long)v[C_UNIX], v[C_P999]);
        /* The run's figures ("nan" when unknown: %.0f writes it for a NaN count). */
        fprintf(f, "%.0f,%.0f,%.0f,%.0f,%.3f,%.3f,%.0f,%.0f,%s\n", v[C_WATCH_OPEN],
                v[C_WATCH_DROPPED], v[C_WATCH_RECONNECTS], v[C_WATCH_EVENTS], v[C_WATCH_P99],
                v[C_QUEUE_WAIT], v[C_IN_FLIGHT], v[C_QUEUED], r->sync ? r->sync : ",,,,");
    }
    return ferror(f) ? SQ_EIO : 0;
}

static int fill_hist(FILE *f, void *ctx)
{
    const series_t *s = ctx;
    fprintf(f, "%s\n", RESULTS_SERIES_HIST_HEADER);
    for (size_t i = 0; i < s->n; i++) {
        const row_t *r = &s->rows[i];
        const char *phase = s->keys[r->key], *cls = phase + strlen(phase) + 1;
        if (r->hist)
            fprintf(f, "%lld,%s,%s,%lld,%s\n", (long long)r->second, phase, cls,
                    (long long)r->v[C_UNIX], r->hist);
    }
    return ferror(f) ? SQ_EIO : 0;
}

/* Opens dir/name; NULL (errno set) when it cannot. */
static FILE *open_in(const char *dir, const char *name, char *path, size_t cap)
{
    snprintf(path, cap, "%s/%s", dir, name);
    return fopen(path, "r");
}

static int read_all(series_t *s, const char *const *dirs, size_t n, bool *complete)
{
    int rc = 0;
    *complete = true;
    for (size_t i = 0; rc == 0 && *complete && i < n; i++) {
        char path[4096], hpath[4096];
        FILE *f = open_in(dirs[i], RESULTS_SERIES_FILE, path, sizeof path);
        if (!f) {
            out_warn(s->o, "%s: %s; the merge has no %s", path, strerror(errno),
                     RESULTS_SERIES_FILE);
            *complete = false;
            break;
        }
        FILE *hf = open_in(dirs[i], RESULTS_SERIES_HIST_FILE, hpath, sizeof hpath);
        s->input = i;
        rc = read_input(s, f, hf, path);
        fclose(f);
        if (hf)
            fclose(hf);
    }
    return rc;
}

static void series_close(series_t *s)
{
    for (size_t i = 0; i < s->n; i++) {
        free(s->rows[i].hist);
        free(s->rows[i].sync);
    }
    for (size_t i = 0; i < s->n_keys; i++)
        free(s->keys[i]);
    free(s->rows);
    free(s->keys);
}

int results_series_merge(const char *const *dirs, size_t n, const results_t *merged,
                         const char *dir, bool *written, out_t *o)
{
    series_t s = {.start_ms = merged->meta.start_unix_ms, .o = o};
    bool complete;
    size_t unknown = 0;
    s.bounds = n > 1;
    *written = false;
    int rc = read_all(&s, dirs, n, &complete);
    if (rc == 0 && complete) {
        if (s.n)
            qsort(s.rows, s.n, sizeof(*s.rows), cmp_row);
        rc = combine_seconds(&s, n);
        if (rc == 0)
            rc = group(&s, &s.n, &unknown);
    }
    char path[4096];
    if (rc == 0 && complete) {
        snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_FILE);
        rc = file_write_atomic(path, fill_series, &s, o);
    }
    if (rc == 0 && complete) {
        snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_HIST_FILE);
        rc = file_write_atomic(path, fill_hist, &s, o);
        *written = rc == 0;
    }
    if (rc == 0 && unknown)
        out_warn(o,
                 "%zu merged seconds have rows without a per-second histogram (written by an "
                 "older squall): their percentiles in %s are nan",
                 unknown, RESULTS_SERIES_FILE);
    series_close(&s);
    return rc;
}
