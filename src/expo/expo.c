/* The Prometheus 0.0.4 and OpenMetrics 1.0 text formats, parsed line by line by their published
 * grammars (see squall/expo.h for what each allows and refuses). */
#include "squall/expo.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "squall/err.h"

/* A family, keyed by its name inside the caller's buffer (never copied: the buffer outlives the
 * parse). */
typedef struct {
    const char *name;
    size_t len;
    enum expo_type type;
    bool help, typed, unit, sampled;
} fam_t;

typedef struct {
    enum expo_format fmt;
    const char *p, *eol; /* the current line: [p, eol), eol at '\n' or the buffer's end */
    uint64_t line;
    char *scratch; /* unescaped names and values of the current line */
    size_t cap, used;
    expo_label_t labels[EXPO_MAX_LABELS];
    size_t n_labels;
    fam_t *fams; /* open addressing, a power of two */
    size_t n_fams, fam_cap;
    fam_t *current; /* OpenMetrics: the family the last line belonged to */
    bool exemplar;  /* the current sample carries one */
    char *err;
    size_t errcap;
} ps_t;

static int fail(ps_t *ps, const char *fmt, ...)
{
    if (ps->err != NULL && ps->errcap > 0) {
        int n = snprintf(ps->err, ps->errcap, "line %llu: ", (unsigned long long)ps->line);
        va_list ap;
        va_start(ap, fmt);
        if (n >= 0 && (size_t)n < ps->errcap)
            vsnprintf(ps->err + n, ps->errcap - (size_t)n, fmt, ap);
        va_end(ap);
    }
    return SQ_EPARSE;
}

/* --- families ------------------------------------------------------------------------------ */

static size_t fam_hash(const char *s, size_t n)
{
    size_t h = 1469598103934665603u; /* FNV-1a, 64-bit offset basis */
    for (size_t i = 0; i < n; i++)
        h = (h ^ (unsigned char)s[i]) * 1099511628211u;
    return h;
}

static fam_t *fam_find(ps_t *ps, const char *name, size_t len)
{
    if (ps->fam_cap == 0)
        return NULL;
    for (size_t i = fam_hash(name, len) & (ps->fam_cap - 1);; i = (i + 1) & (ps->fam_cap - 1)) {
        fam_t *f = &ps->fams[i];
        if (f->name == NULL)
            return NULL;
        if (f->len == len && memcmp(f->name, name, len) == 0)
            return f;
    }
}

static fam_t *fam_add(ps_t *ps, const char *name, size_t len)
{
    if ((ps->n_fams + 1) * 2 > ps->fam_cap) {
        size_t cap = ps->fam_cap ? ps->fam_cap * 2 : 64;
        fam_t *old = ps->fams, *fresh = calloc(cap, sizeof *fresh);
        if (fresh == NULL)
            return NULL;
        size_t old_cap = ps->fam_cap;
        ps->fams = fresh;
        ps->fam_cap = cap;
        for (size_t i = 0; i < old_cap; i++) {
            if (old[i].name == NULL)
                continue;
            size_t j = fam_hash(old[i].name, old[i].len) & (cap - 1);
            while (fresh[j].name != NULL)
                j = (j + 1) & (cap - 1);
            fresh[j] = old[i];
        }
        if (ps->current != NULL) /* before old goes: current points into it */
            ps->current = fam_find(ps, ps->current->name, ps->current->len);
        free(old);
    }
    size_t j = fam_hash(name, len) & (ps->fam_cap - 1);
    while (ps->fams[j].name != NULL)
        j = (j + 1) & (ps->fam_cap - 1);
    ps->fams[j] = (fam_t){.name = name, .len = len, .type = EXPO_UNTYPED};
    ps->n_fams++;
    return &ps->fams[j];
}

/* The suffixes a type's samples may add to the family's name; "" is the bare name. */
static const char *const *type_suffixes(enum expo_type t, enum expo_format fmt)
{
    static const char *const bare[] = {"", NULL};
    static const char *const counter_om[] = {"_total", "_created", NULL};
    static const char *const hist_prom[] = {"_bucket", "_count", "_sum", NULL};
    static const char *const hist_om[] = {"_bucket", "_count", "_sum", "_created", NULL};
    static const char *const ghist[] = {"_bucket", "_gcount", "_gsum", NULL};
    static const char *const summ_prom[] = {"", "_count", "_sum", NULL};
    static const char *const summ_om[] = {"", "_count", "_sum", "_created", NULL};
    static const char *const info[] = {"_info", NULL};
    bool om = fmt == EXPO_OPENMETRICS;
    switch (t) {
    case EXPO_COUNTER:
        return om ? counter_om : bare;
    case EXPO_HISTOGRAM:
        return om ? hist_om : hist_prom;
    case EXPO_GAUGEHISTOGRAM:
        return ghist;
    case EXPO_SUMMARY:
        return om ? summ_om : summ_prom;
    case EXPO_INFO:
        return info;
    default:
        return bare;
    }
}

/* The family of a sample called name: a typed family whose suffixes make name, else its own. */
static fam_t *fam_of_sample(ps_t *ps, const char *name, size_t len, const char **suffix)
{
    if (ps->fmt == EXPO_OPENMETRICS && ps->current != NULL) {
        fam_t *f = ps->current;
        for (const char *const *s = type_suffixes(f->type, ps->fmt); *s; s++) {
            size_t sl = strlen(*s);
            if (f->len + sl == len && memcmp(name, f->name, f->len) == 0 &&
                memcmp(name + f->len, *s, sl) == 0) {
                *suffix = *s;
                return f;
            }
        }
    }
    if (ps->fmt == EXPO_PROMETHEUS) {
        static const char *const sfx[] = {"_bucket", "_count", "_sum"};
        for (size_t i = 0; i < 3; i++) {
            size_t sl = strlen(sfx[i]);
            if (len <= sl || memcmp(name + len - sl, sfx[i], sl) != 0)
                continue;
            fam_t *f = fam_find(ps, name, len - sl);
            if (f != NULL && (f->type == EXPO_HISTOGRAM || (f->type == EXPO_SUMMARY && i > 0))) {
                *suffix = sfx[i];
                return f;
            }
        }
    }
    *suffix = "";
    fam_t *f = fam_find(ps, name, len);
    return f != NULL ? f : fam_add(ps, name, len);
}

/* --- tokens -------------------------------------------------------------------------------- */

static bool is_name_start(char c, bool colon)
{
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '_' || (colon && c == ':');
}

static bool is_name_char(char c, bool colon)
{
    return is_name_start(c, colon) || (c >= '0' && c <= '9');
}

/* A metric name (colon allowed) or a label name (not) at ps->p; its length, 0 when none. */
static size_t name_len(const ps_t *ps, bool colon)
{
    const char *s = ps->p;
    if (s >= ps->eol || !is_name_start(*s, colon))
        return 0;
    while (s < ps->eol && is_name_char(*s, colon))
        s++;
    return (size_t)(s - ps->p);
}

static void skip_blanks(ps_t *ps)
{
    if (ps->fmt == EXPO_PROMETHEUS)
        while (ps->p < ps->eol && (*ps->p == ' ' || *ps->p == '\t'))
            ps->p++;
}

/* One separator: a single space (OpenMetrics) or a run of spaces and tabs (Prometheus). */
static bool separator(ps_t *ps)
{
    if (ps->p >= ps->eol || (*ps->p != ' ' && (ps->fmt == EXPO_OPENMETRICS || *ps->p != '\t')))
        return false;
    ps->p++;
    skip_blanks(ps);
    return true;
}

static char *scratch_copy(ps_t *ps, const char *s, size_t n)
{
    char *d = ps->scratch + ps->used;
    memcpy(d, s, n);
    d[n] = '\0';
    ps->used += n + 1;
    return d;
}

/* RFC 3629 §4's well-formed UTF-8: label values in both formats, help text in OpenMetrics
 * (promtool 2.42 takes any bytes in a Prometheus HELP line). */
static bool utf8_ok(const unsigned char *s, size_t n)
{
    size_t i = 0;
    while (i < n) {
        unsigned c = s[i], lo = 0x80, hi = 0xbf;
        size_t k;
        if (c < 0x80) {
            i++;
            continue;
        }
        if (c >= 0xc2 && c <= 0xdf) {
            k = 1;
        } else if (c >= 0xe0 && c <= 0xef) {
            k = 2;
            lo = c == 0xe0 ? 0xa0 : lo;
            hi = c == 0xed ? 0x9f : hi;
        } else if (c >= 0xf0 && c <= 0xf4) {
            k = 3;
            lo = c == 0xf0 ? 0x90 : lo;
            hi = c == 0xf4 ? 0x8f : hi;
        } else {
            return false;
        }
        if (n - i <= k || s[i + 1] < lo || s[i + 1] > hi)
            return false;
        for (size_t j = 2; j <= k; j++)
            if ((s[i + j] & 0xc0) != 0x80)
                return false;
        i += k + 1;
    }
    return true;
}

/* An escaped string up to `stop` (a '"' for label values, the line's end for help text) into the
 * scratch area. `quote` allows the \" escape. Returns the copy, NULL after fail(). */
static const char *unescape(ps_t *ps, char stop, bool quote, int *rc)
{
    char *d = ps->scratch + ps->used, *start = d;
    for (;;) {
        if (ps->p >= ps->eol) {
            if (stop == '\n')
                break;
            *rc = fail(ps, quote ? "label value not closed before the end of the line"
                                 : "text not closed");
            return NULL;
        }
        char c = *ps->p++;
        if (c == stop && stop != '\n')
            break;
        if (c != '\\') {
            *d++ = c;
            continue;
        }
        char e = ps->p < ps->eol ? *ps->p++ : '\0';
        if (e == '\\' || (e == '"' && quote))
            *d++ = e;
        else if (e == 'n')
            *d++ = '\n';
        else if (ps->fmt == EXPO_OPENMETRICS && e != '\0') {
            *d++ = '\\'; /* kept as written, as Prometheus's OpenMetrics reader keeps it */
            *d++ = e;
        } else {
            *rc = fail(ps, "invalid escape sequence '\\%c'", e ? e : ' ');
            return NULL;
        }
    }
    *d = '\0';
    if ((quote || ps->fmt == EXPO_OPENMETRICS) &&
        !utf8_ok((unsigned char *)start, (size_t)(d - start))) {
        *rc = fail(ps, "string is not valid UTF-8");
        return NULL;
    }
    ps->used += (size_t)(d - start) + 1;
    return start;
}

/* The next token up to a blank or the line's end. */
static size_t token(const ps_t *ps)
{
    const char *s = ps->p;
    while (s < ps->eol && *s != ' ' && *s != '\t')
        s++;
    return (size_t)(s - ps->p);
}

static bool digits(const char **s, const char *e)
{
    const char *b = *s;
    while (*s < e && **s >= '0' && **s <= '9')
        (*s)++;
    return *s > b;
}

/* A real number of the OpenMetrics ABNF: [sign] digits ["." digits] [e [sign] digits], at least
 * one digit in the mantissa. */
static bool real_ok(const char *s, const char *e)
{
    if (s < e && (*s == '+' || *s == '-'))
        s++;
    bool mant = digits(&s, e);
    if (s < e && *s == '.') {
        s++;
        mant = digits(&s, e) || mant;
    }
    if (!mant)
        return false;
    if (s < e && (*s == 'e' || *s == 'E')) {
        s++;
        if (s < e && (*s == '+' || *s == '-'))
            s++;
        if (!digits(&s, e))
            return false;
    }
    return s == e;
}

/* Prometheus: the syntax Go's strconv.ParseFloat accepts as the format's parser calls it (no
 * hexadecimal, no underscores): a real number, Inf or Infinity with an optional sign, NaN without
 * one, case-insensitive. Checked against promtool 2.42 (tests/unit/test_expo.c). */
static bool go_float_ok(const char *s, const char *e)
{
    const char *b = s;
    if (s < e && (*s == '+' || *s == '-'))
        s++;
    size_t n = (size_t)(e - s);
    if ((n == 3 && strncasecmp(s, "inf", 3) == 0) || (n == 8 && strncasecmp(s, "infinity", 8) == 0))
        return true;
    if (n == 3 && strncasecmp(s, "nan", 3) == 0)
        return s == b;
    return real_ok(b, e);
}

static bool number(const ps_t *ps, const char *s, size_t n, double *out)
{
    const char *e = s + n;
    bool ok;
    if (ps->fmt == EXPO_OPENMETRICS) {
        const char *t = s + (n > 0 && (*s == '+' || *s == '-'));
        size_t tn = (size_t)(e - t);
        ok = real_ok(s, e) || (tn == 3 && strncasecmp(t, "inf", 3) == 0) ||
             (tn == 8 && strncasecmp(t, "infinity", 8) == 0) ||
             (n == 3 && strncasecmp(s, "nan", 3) == 0);
    } else {
        ok = go_float_ok(s, e);
    }
    if (!ok || n > 400)
        return false;
    char tmp[401];
    memcpy(tmp, s, n);
    tmp[n] = '\0';
    *out = strtod(tmp, NULL);
    /* A finite number too large for a double is refused, as Go's ParseFloat refuses it. */
    return !isinf(*out) || strpbrk(tmp, "iI") != NULL;
}

/* --- lines --------------------------------------------------------------------------------- */

/* `{name="value",...}` at ps->p (on the '{') into labels[]. */
static int read_labels(ps_t *ps, expo_label_t *labels, size_t *n_labels)
{
    int rc = 0;
    *n_labels = 0;
    ps->p++;
    skip_blanks(ps);
    if (ps->p < ps->eol && *ps->p == '}') {
        ps->p++;
        return 0;
    }
    for (;;) {
        size_t n = name_len(ps, false);
        if (n == 0)
            return fail(ps, "label name expected");
        if (*n_labels == EXPO_MAX_LABELS)
            return fail(ps, "more than %d labels", EXPO_MAX_LABELS);
        const char *name = scratch_copy(ps, ps->p, n);
        ps->p += n;
        skip_blanks(ps);
        if (ps->p >= ps->eol || *ps->p != '=')
            return fail(ps, "expected '=' after label name %s", name);
        ps->p++;
        skip_blanks(ps);
        if (ps->p >= ps->eol || *ps->p != '"')
            return fail(ps, "expected '\"' to open the value of label %s", name);
        ps->p++;
        const char *value = unescape(ps, '"', true, &rc);
        if (value == NULL)
            return rc;
        if (strcmp(name, "__name__") == 0)
            return fail(ps, "label name __name__ is reserved");
        for (size_t i = 0; i < *n_labels; i++)
            if (strcmp(labels[i].name, name) == 0)
                return fail(ps, "label %s given twice", name);
        labels[(*n_labels)++] = (expo_label_t){name, value};
        skip_blanks(ps);
        char c = ps->p < ps->eol ? *ps->p : '\n';
        ps->p++;
        if (c == '}')
            return 0;
        if (c != ',')
            return fail(ps, "expected ',' or '}' after the value of label %s", name);
        skip_blanks(ps);
        if (ps->fmt == EXPO_PROMETHEUS && ps->p < ps->eol && *ps->p == '}') {
            ps->p++; /* a trailing comma */
            return 0;
        }
    }
}

/* OpenMetrics: ` # {labels} value [timestamp]` after a sample, checked and dropped. */
static int exemplar(ps_t *ps)
{
    expo_label_t labels[EXPO_MAX_LABELS];
    size_t n;
    double v;
    ps->exemplar = true;
    if (ps->eol - ps->p < 3 || memcmp(ps->p, "# {", 3) != 0)
        return fail(ps, "expected an exemplar ' # {...} value' or the end of the line");
    ps->p += 2;
    int rc = read_labels(ps, labels, &n);
    if (rc != 0)
        return rc;
    for (int i = 0; i < 2 && ps->p < ps->eol; i++) {
        size_t tn;
        if (!separator(ps) || (tn = token(ps)) == 0 || !number(ps, ps->p, tn, &v))
            return fail(ps, "malformed exemplar value or timestamp");
        ps->p += tn;
    }
    return ps->p == ps->eol ? 0 : fail(ps, "unexpected text after the exemplar");
}

/* After the value: [timestamp] (and an OpenMetrics exemplar) to the line's end. */
static int sample_tail(ps_t *ps, expo_sample_t *s)
{
    if (ps->p == ps->eol)
        return 0;
    if (!separator(ps))
        return fail(ps, "expected a space after the value");
    if (ps->fmt == EXPO_OPENMETRICS && ps->p < ps->eol && *ps->p == '#')
        return exemplar(ps);
    size_t n = token(ps);
    char tmp[32];
    if (n == 0 || n >= sizeof tmp)
        return fail(ps, "timestamp expected after the value");
    memcpy(tmp, ps->p, n);
    tmp[n] = '\0';
    if (ps->fmt == EXPO_PROMETHEUS) {
        char *end;
        errno = 0;
        long long t = strtoll(tmp, &end, 10);
        if (*end != '\0' || errno != 0 || tmp[0] == ' ')
            return fail(ps, "expected an integer timestamp in ms, got \"%s\"", tmp);
        s->time_ms = t;
    } else {
        double t;
        if (!real_ok(tmp, tmp + n) || !number(ps, tmp, n, &t) || fabs(t) > 9.2e15)
            return fail(ps, "expected a timestamp in seconds, got \"%s\"", tmp);
        s->time_ms = (int64_t)llround(t * 1000.0);
    }
    s->has_time = true;
    ps->p += n;
    if (ps->fmt == EXPO_OPENMETRICS && ps->p < ps->eol) {
        if (*ps->p != ' ')
            return fail(ps, "unexpected text after the timestamp");
        ps->p++;
        return exemplar(ps);
    }
    return ps->p == ps->eol ? 0 : fail(ps, "unexpected text after the timestamp");
}

/* The label a suffix of a type must carry, with a number for its value. */
static int check_bound_label(ps_t *ps, const expo_sample_t *s)
{
    const char *want = NULL;
    if ((s->type == EXPO_HISTOGRAM || s->type == EXPO_GAUGEHISTOGRAM) &&
        strcmp(s->suffix, "_bucket") == 0)
        want = "le";
    else if (s->type == EXPO_SUMMARY && s->suffix[0] == '\0')
        want = "quantile";
    if (want == NULL)
        return 0;
    const char *v = expo_label(s, want);
    double d;
    /* Both of Prometheus's readers take a bucket without `le`; only its 0.0.4 reader checks the
     * value (its OpenMetrics reader stores any). */
    if (v == NULL || ps->fmt == EXPO_OPENMETRICS)
        return 0;
    if (!number(ps, v, strlen(v), &d))
        return fail(ps, "expected a number as the value of '%s', got \"%s\"", want, v);
    return 0;
}

/* OpenMetrics: the family the following lines belong to. The specification keeps a family's
 * lines together; Prometheus 2.42 reads a family that resumes, and so does squall. */
static int om_enter(ps_t *ps, fam_t *f)
{
    (void)ps;
    ps->current = f;
    return 0;
}

static int sample_line(ps_t *ps, expo_sample_fn fn, void *ud)
{
    size_t n = name_len(ps, true);
    if (n == 0)
        return fail(ps, "metric name expected");
    const char *at = ps->p;
    expo_sample_t s = {.name = scratch_copy(ps, ps->p, n), .line = ps->line};
    ps->p += n;
    skip_blanks(ps);
    int rc = 0;
    if (ps->p < ps->eol && *ps->p == '{') {
        if ((rc = read_labels(ps, ps->labels, &ps->n_labels)) != 0)
            return rc;
        skip_blanks(ps);
        if (ps->fmt == EXPO_OPENMETRICS && !separator(ps))
            return fail(ps, "expected a space before the value");
    } else {
        ps->n_labels = 0;
        if (ps->fmt == EXPO_OPENMETRICS ? !separator(ps) : ps->p == at + n)
            return fail(ps, "expected a space and the value after %s", s.name);
    }
    size_t vn = token(ps);
    ps->exemplar = false;
    if (!number(ps, ps->p, vn, &s.value))
        return fail(ps, "expected a number as the value, got \"%.*s\"", (int)vn, ps->p);
    ps->p += vn;
    if ((rc = sample_tail(ps, &s)) != 0)
        return rc;
    fam_t *f = fam_of_sample(ps, at, n, &s.suffix);
    if (f == NULL)
        return SQ_ENOMEM;
    if (ps->fmt == EXPO_OPENMETRICS) {
        if ((rc = om_enter(ps, f)) != 0)
            return rc;
        if (ps->exemplar && f->type != EXPO_COUNTER && f->type != EXPO_HISTOGRAM &&
            f->type != EXPO_GAUGEHISTOGRAM)
            return fail(ps, "%s: a %s has no exemplars", s.name, expo_type_name(f->type));
    }
    f->sampled = true;
    s.family = scratch_copy(ps, f->name, f->len);
    s.type = f->type;
    s.labels = ps->labels;
    s.n_labels = ps->n_labels;
    if ((rc = check_bound_label(ps, &s)) != 0)
        return rc;
    return fn != NULL ? fn(&s, ud) : 0;
}

static enum expo_type type_named(const char *s, size_t n, enum expo_format fmt, bool *ok)
{
    static const struct {
        const char *name;
        enum expo_type type;
        bool om, prom;
    } types[] = {
        {"counter", EXPO_COUNTER, true, true},
        {"gauge", EXPO_GAUGE, true, true},
        {"histogram", EXPO_HISTOGRAM, true, true},
        {"summary", EXPO_SUMMARY, true, true},
        {"untyped", EXPO_UNTYPED, false, true},
        {"unknown", EXPO_UNTYPED, true, false},
        {"gaugehistogram", EXPO_GAUGEHISTOGRAM, true, false},
        {"gauge_histogram", EXPO_GAUGEHISTOGRAM, false, true}, /* promtool 2.42 takes it */
        {"stateset", EXPO_STATESET, true, false},
        {"info", EXPO_INFO, true, false},
    };
    for (size_t i = 0; i < sizeof types / sizeof types[0]; i++) {
        bool mine = fmt == EXPO_OPENMETRICS ? types[i].om : types[i].prom;
        /* Prometheus reads the type case-insensitively, OpenMetrics exactly. */
        if (mine && strlen(types[i].name) == n &&
            (fmt == EXPO_OPENMETRICS ? strncmp(s, types[i].name, n)
                                     : strncasecmp(s, types[i].name, n)) == 0) {
            *ok = true;
            return types[i].type;
        }
    }
    *ok = false;
    return EXPO_UNTYPED;
}

/* `# HELP`, `# TYPE` (both), `# UNIT` (OpenMetrics), other comments (Prometheus) after the '#';
 * sets *eof on OpenMetrics' `# EOF`. */
static int comment_line(ps_t *ps, bool *eof)
{
    bool om = ps->fmt == EXPO_OPENMETRICS;
    ps->p++;
    if (om ? !separator(ps) : (skip_blanks(ps), false))
        return fail(ps, "expected '# ' and HELP, TYPE, UNIT or EOF");
    size_t kn = token(ps);
    const char *kw = ps->p;
    if (om && kn == 3 && memcmp(kw, "EOF", 3) == 0 && kw + 3 == ps->eol) {
        *eof = true;
        return 0;
    }
    bool help = kn == 4 && memcmp(kw, "HELP", 4) == 0, type = kn == 4 && !memcmp(kw, "TYPE", 4),
         unit = om && kn == 4 && memcmp(kw, "UNIT", 4) == 0;
    if (!help && !type && !unit)
        return om ? fail(ps, "expected HELP, TYPE, UNIT or EOF after '# '") : 0;
    ps->p += kn;
    if (!separator(ps) && !om)
        return 0; /* "# HELP" alone: a comment to Prometheus's own parser */
    size_t n = name_len(ps, true);
    const char *name = ps->p;
    ps->p += n;
    if (!om && (ps->p == ps->eol || n == 0)) {
        if (n == 0 && ps->p < ps->eol)
            return fail(ps, "invalid metric name in a %.4s line", kw);
        return 0; /* no text after the name: a comment, as Prometheus reads it */
    }
    if (n == 0 || !separator(ps))
        return om && n > 0 && ps->p == ps->eol && unit
                   ? fail(ps, "expected a space and the unit after %.*s", (int)n, name)
                   : fail(ps, "expected a metric name and a space after %.4s", kw);
    const char *sfx;
    fam_t *f = om ? fam_find(ps, name, n) : fam_of_sample(ps, name, n, &sfx);
    if (f == NULL && (f = fam_add(ps, name, n)) == NULL)
        return SQ_ENOMEM;
    int rc = om ? om_enter(ps, f) : 0;
    if (rc != 0)
        return rc;
    if (help) {
        if (f->help && !om)
            return fail(ps, "second HELP line for %.*s", (int)n, name);
        f->help = true;
        return unescape(ps, '\n', om, &rc) != NULL ? 0 : rc;
    }
    if (unit) {
        size_t un = (size_t)(ps->eol - ps->p);
        for (const char *c = ps->p; c < ps->eol; c++)
            if (!is_name_char(*c, true))
                return fail(ps, "a unit is letters, digits, '_' and ':'");
        if (f->unit)
            return fail(ps, "second UNIT line for %.*s", (int)n, name);
        f->unit = true;
        if (un > 0 && (n < un + 1 || name[n - un - 1] != '_' || memcmp(name + n - un, ps->p, un)))
            return fail(ps, "unit %.*s is not the suffix of %.*s", (int)un, ps->p, (int)n, name);
        return 0;
    }
    if ((f->typed || f->sampled) && !om)
        return fail(ps, "second TYPE line for %.*s, or TYPE after its samples", (int)n, name);
    bool ok;
    f->type = type_named(ps->p, (size_t)(ps->eol - ps->p), ps->fmt, &ok);
    f->typed = true;
    return ok ? 0 : fail(ps, "unknown metric type \"%.*s\"", (int)(ps->eol - ps->p), ps->p);
}

static int line(ps_t *ps, expo_sample_fn fn, void *ud, bool *eof)
{
    if (ps->fmt == EXPO_PROMETHEUS) {
        skip_blanks(ps);
        if (ps->p == ps->eol)
            return 0;
    } else if (ps->p == ps->eol) {
        return fail(ps, "blank line (OpenMetrics has none)");
    }
    return *ps->p == '#' ? comment_line(ps, eof) : sample_line(ps, fn, ud);
}

int expo_parse(const char *buf, size_t len, enum expo_format fmt, expo_sample_fn fn, void *ud,
               char *err, size_t errcap)
{
    ps_t ps = {.fmt = fmt, .err = err, .errcap = errcap};
    if (err != NULL && errcap > 0)
        err[0] = '\0';
    const char *p = buf, *end = buf + len;
    bool eof = false;
    int rc = 0;
    while (rc == 0 && p < end) {
        const char *nl = memchr(p, '\n', (size_t)(end - p));
        ps.line++;
        ps.p = p;
        ps.eol = nl != NULL ? nl : end;
        size_t need = 2 * (size_t)(ps.eol - p) + 16; /* every copy is at most its source + NUL */
        if (need > ps.cap) {
            free(ps.scratch);
            ps.cap = need;
            if ((ps.scratch = malloc(need)) == NULL) {
                rc = SQ_ENOMEM;
                break;
            }
        }
        ps.used = 0;
        if (eof)
            rc = fail(&ps, "text after '# EOF'");
        else if ((rc = line(&ps, fn, ud, &eof)) == 0 && nl == NULL && !eof)
            rc = fail(&ps, "the last line has no line feed");
        p = nl != NULL ? nl + 1 : end;
    }
    if (rc == 0 && fmt == EXPO_OPENMETRICS && !eof) {
        ps.line++;
        rc = fail(&ps, "no '# EOF' at the end (OpenMetrics ends with it)");
    }
    free(ps.scratch);
    free(ps.fams);
    return rc;
}

enum expo_format expo_format_of(const char *content_type)
{
    const char *om = "application/openmetrics-text";
    return content_type != NULL && strncasecmp(content_type, om, strlen(om)) == 0 ? EXPO_OPENMETRICS
                                                                                  : EXPO_PROMETHEUS;
}

const char *expo_label(const expo_sample_t *s, const char *name)
{
    for (size_t i = 0; i < s->n_labels; i++)
        if (strcmp(s->labels[i].name, name) == 0)
            return s->labels[i].value;
    return NULL;
}

const char *expo_type_name(enum expo_type t)
{
    static const char *const names[] = {"unknown", "counter",        "gauge",    "histogram",
                                        "summary", "gaugehistogram", "stateset", "info"};
    return (size_t)t < sizeof names / sizeof names[0] ? names[t] : "unknown";
}
