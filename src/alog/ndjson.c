/* NDJSON log lines: one JSON object (RFC 8259) per line, scanned once without building a tree;
 * only the caller's fields (dotted names reach into nested objects) are kept and converted. */
#include <string.h>

#include "alog_int.h"

enum { F_TIME, F_METHOD, F_PATH, F_STATUS, F_DURATION, F_CLIENT, F_BYTES, F_BODY, F_N };
enum { V_NONE, V_STRING, V_NUMBER, V_OTHER };
#define MAX_DEPTH 32

typedef struct {
    const char *s, *e;
    const char *names[F_N];
    size_t name_len[F_N];
    char path[256]; /* dotted key of the value being read; plen > sizeof path: cannot match */
    size_t plen;
    struct {
        const char *a, *b; /* the value's text (a string without its quotes) */
        int type;
        bool esc; /* a string with escapes */
    } v[F_N];
} js_t;

static void ws(js_t *j)
{
    while (j->s < j->e && (*j->s == ' ' || *j->s == '\t' || *j->s == '\r' || *j->s == '\n'))
        j->s++;
}

static bool hex4(const char *s)
{
    for (int i = 0; i < 4; i++)
        if (!strchr("0123456789abcdefABCDEF", s[i]) || !s[i])
            return false;
    return true;
}

/* A string at j->s ('"'): its content [*a, *b), whether it has escapes. RFC 8259 §7: no raw
 * control bytes, only the listed escapes. */
static int string(js_t *j, const char **a, const char **b, bool *esc)
{
    const char *s = j->s + 1, *e = j->e;
    *esc = false;
    *a = s;
    for (; s < e; s++) {
        unsigned char c = (unsigned char)*s;
        if (c == '"') {
            *b = s;
            j->s = s + 1;
            return 0;
        }
        if (c < 0x20)
            return -1;
        if (c == '\\') {
            *esc = true;
            if (++s >= e)
                return -1;
            if (*s == 'u') {
                if (e - s < 5 || !hex4(s + 1))
                    return -1;
                s += 4;
            } else if (!strchr("\"\\/bfnrt", *s) || !*s) {
                return -1;
            }
        }
    }
    return -1;
}

static bool digit(const char *s, const char *e)
{
    return s < e && *s >= '0' && *s <= '9';
}

/* RFC 8259 §6: -? (0 | [1-9][0-9]*) (. [0-9]+)? ([eE] [+-]? [0-9]+)? */
static int number(js_t *j)
{
    const char *s = j->s, *e = j->e;
    if (s < e && *s == '-')
        s++;
    if (!digit(s, e))
        return -1;
    if (*s == '0')
        s++;
    else
        while (digit(s, e))
            s++;
    if (s < e && *s == '.') {
        if (!digit(++s, e))
            return -1;
        while (digit(s, e))
            s++;
    }
    if (s < e && (*s == 'e' || *s == 'E')) {
        s++;
        if (s < e && (*s == '+' || *s == '-'))
            s++;
        if (!digit(s, e))
            return -1;
        while (digit(s, e))
            s++;
    }
    j->s = s;
    return 0;
}

static int value(js_t *j, int depth, int field);

/* The field whose name is the current dotted key, or -1. */
static int field_of(const js_t *j)
{
    if (j->plen > sizeof j->path)
        return -1;
    for (int f = 0; f < F_N; f++)
        if (j->names[f] && j->name_len[f] == j->plen && memcmp(j->names[f], j->path, j->plen) == 0)
            return f;
    return -1;
}

/* Appends ".key" (or "key" at the top) to the dotted key; keys with escapes never match. */
static void push_key(js_t *j, const char *a, const char *b, bool esc)
{
    size_t n = (size_t)(b - a), dot = j->plen > 0;
    if (esc || j->plen + dot + n > sizeof j->path) {
        j->plen = sizeof j->path + 1 + j->plen; /* too long: no field matches below here */
        return;
    }
    if (dot)
        j->path[j->plen] = '.';
    memcpy(j->path + j->plen + dot, a, n);
    j->plen += dot + n;
}

static int object(js_t *j, int depth)
{
    size_t saved = j->plen;
    j->s++;
    ws(j);
    if (j->s < j->e && *j->s == '}') {
        j->s++;
        return 0;
    }
    for (;;) {
        const char *a, *b;
        bool esc;
        ws(j);
        if (j->s >= j->e || *j->s != '"' || string(j, &a, &b, &esc))
            return -1;
        ws(j);
        if (j->s >= j->e || *j->s != ':')
            return -1;
        j->s++;
        ws(j);
        push_key(j, a, b, esc);
        int rc = value(j, depth + 1, field_of(j));
        j->plen = saved;
        if (rc)
            return -1;
        ws(j);
        if (j->s < j->e && *j->s == ',') {
            j->s++;
            continue;
        }
        if (j->s < j->e && *j->s == '}') {
            j->s++;
            return 0;
        }
        return -1;
    }
}

static int array(js_t *j, int depth)
{
    size_t saved = j->plen;
    j->plen = sizeof j->path + 1; /* nothing inside an array is a field */
    j->s++;
    ws(j);
    int rc = 0;
    if (j->s < j->e && *j->s == ']') {
        j->s++;
    } else {
        for (;;) {
            ws(j);
            if ((rc = value(j, depth + 1, -1)))
                break;
            ws(j);
            if (j->s < j->e && *j->s == ',') {
                j->s++;
                continue;
            }
            rc = j->s < j->e && *j->s == ']' ? (j->s++, 0) : -1;
            break;
        }
    }
    j->plen = saved;
    return rc;
}

static int literal(js_t *j)
{
    static const char *const words[] = {"true", "false", "null"};
    for (int i = 0; i < 3; i++) {
        size_t n = strlen(words[i]);
        if ((size_t)(j->e - j->s) >= n && memcmp(j->s, words[i], n) == 0) {
            j->s += n;
            return i == 2 ? 1 : 0;
        }
    }
    return -1;
}

static int value(js_t *j, int depth, int field)
{
    if (depth > MAX_DEPTH || j->s >= j->e)
        return -1;
    const char *start = j->s, *a = NULL, *b = NULL;
    bool esc = false;
    int type = V_OTHER, rc;
    char c = *j->s;
    if (c == '{')
        rc = object(j, depth);
    else if (c == '[')
        rc = array(j, depth);
    else if (c == '"')
        rc = string(j, &a, &b, &esc), type = V_STRING;
    else if (c == '-' || (c >= '0' && c <= '9'))
        rc = number(j), type = V_NUMBER;
    else if ((rc = literal(j)) == 1) /* null: as if the field were absent */
        return 0;
    if (rc)
        return -1;
    if (field >= 0) {
        j->v[field].type = type;
        j->v[field].a = type == V_STRING ? a : start;
        j->v[field].b = type == V_STRING ? b : j->s;
        j->v[field].esc = esc;
    }
    return 0;
}

/* ---- field conversion ------------------------------------------------------------------ */

static unsigned hexnum(const char *s)
{
    unsigned v = 0;
    for (int i = 0; i < 4; i++)
        v = v * 16 + (unsigned)(s[i] <= '9' ? s[i] - '0' : (s[i] | 0x20) - 'a' + 10);
    return v;
}

static size_t utf8(char *d, unsigned cp)
{
    if (cp < 0x80)
        return d[0] = (char)cp, 1;
    if (cp < 0x800)
        return d[0] = (char)(0xc0 | cp >> 6), d[1] = (char)(0x80 | (cp & 0x3f)), 2;
    if (cp < 0x10000)
        return d[0] = (char)(0xe0 | cp >> 12), d[1] = (char)(0x80 | ((cp >> 6) & 0x3f)),
               d[2] = (char)(0x80 | (cp & 0x3f)), 3;
    d[0] = (char)(0xf0 | cp >> 18);
    d[1] = (char)(0x80 | ((cp >> 12) & 0x3f));
    d[2] = (char)(0x80 | ((cp >> 6) & 0x3f));
    d[3] = (char)(0x80 | (cp & 0x3f));
    return 4;
}

/* A string value unescaped into scratch (already validated by string()); a lone surrogate
 * becomes U+FFFD. Returns its length or -1 when it does not fit. */
static long unescaped(alog_parse_t *p, const char *a, const char *b, const char **out)
{
    size_t room = (size_t)(b - a);
    char *d = alog_reserve(p, room); /* an escape never grows: \uXXXX (6) -> at most 3 bytes,
                                      * a pair (12) -> 4 */
    if (!d)
        return -1;
    size_t o = 0;
    for (const char *s = a; s < b; s++) {
        if (*s != '\\') {
            d[o++] = *s;
            continue;
        }
        char c = *++s;
        if (c != 'u') {
            d[o++] = c == 'b'   ? '\b'
                     : c == 'f' ? '\f'
                     : c == 'n' ? '\n'
                     : c == 'r' ? '\r'
                     : c == 't' ? '\t'
                                : c;
            continue;
        }
        unsigned cp = hexnum(s + 1);
        s += 4;
        if (cp >= 0xd800 && cp < 0xdc00 && b - s > 6 && s[1] == '\\' && s[2] == 'u') {
            unsigned lo = hexnum(s + 3);
            if (lo >= 0xdc00 && lo < 0xe000) {
                cp = 0x10000 + ((cp - 0xd800) << 10) + (lo - 0xdc00);
                s += 6;
            }
        }
        if (cp >= 0xd800 && cp < 0xe000)
            cp = 0xfffd;
        o += utf8(d + o, cp);
    }
    d[o] = '\0';
    p->len -= room - o;
    *out = d;
    return (long)o;
}

/* A field's text: strings unescaped, numbers and other values as written. */
static long text(alog_parse_t *p, const js_t *j, int f, const char **out)
{
    if (j->v[f].type == V_STRING && j->v[f].esc)
        return unescaped(p, j->v[f].a, j->v[f].b, out);
    *out = j->v[f].a;
    return j->v[f].b - j->v[f].a;
}

static const int64_t unit_ns[] = {INT64_C(1000000000), 1000000, 1000, 1};

static int conv_time(alog_parse_t *p, const alog_config_t *cfg, const js_t *j, alog_record_t *rec)
{
    const char *s;
    long n = text(p, j, F_TIME, &s);
    enum alog_time_kind k = cfg->ndjson.time_kind;
    bool numeric = n > 0 && s[0] >= '0' && s[0] <= '9' && (n < 5 || s[4] != '-');
    if (n < 0 || j->v[F_TIME].type == V_OTHER)
        return alog_why(p, "bad time", "a string or a number", NULL, 0);
    if (k == ALOG_TIME_RFC3339 || (k == ALOG_TIME_AUTO && !numeric)) {
        if (alog_time_rfc3339(s, (size_t)n, &rec->t_ns, &rec->resolution_ns))
            return alog_why(p, "bad time", "an RFC 3339 date-time like 2000-10-10T20:55:36.125Z", s,
                            (size_t)n);
        return 0;
    }
    int64_t u = k == ALOG_TIME_AUTO ? alog_auto_unit(s, (size_t)n) : unit_ns[k - ALOG_TIME_S];
    if (alog_decimal(s, (size_t)n, u, &rec->t_ns, &rec->resolution_ns))
        return alog_why(p, "bad time", "a unix time like 1700000000.125", s, (size_t)n);
    return 0;
}

/* A non-negative decimal field (number or numeric string) in units of u ns; absent or '-' gives
 * -1. */
static int conv_decimal(alog_parse_t *p, const js_t *j, int f, int64_t u, int64_t *out,
                        const char *what)
{
    *out = -1;
    const char *s;
    long n;
    if (j->v[f].type == V_NONE)
        return 0;
    if (j->v[f].type == V_OTHER || (n = text(p, j, f, &s)) < 0)
        return alog_why(p, what, "a number", NULL, 0);
    if (n == 1 && s[0] == '-')
        return 0;
    int64_t res;
    if (alog_decimal(s, (size_t)n, u, out, &res))
        return alog_why(p, what, "a non-negative number", s, (size_t)n);
    return 0;
}

static int conv_strings(alog_parse_t *p, const js_t *j, alog_record_t *rec)
{
    const char *s;
    long n;
    if (j->v[F_METHOD].type != V_STRING || (n = text(p, j, F_METHOD, &s)) < 0 ||
        !(rec->method = alog_put_method(p, s, (size_t)n)))
        return j->v[F_METHOD].type == V_STRING ? -1 : alog_why(p, "bad method", "a string", 0, 0);
    if (j->v[F_PATH].type != V_STRING || (n = text(p, j, F_PATH, &s)) < 0 ||
        !(rec->path = alog_put_path(p, s, (size_t)n)))
        return j->v[F_PATH].type == V_STRING ? -1 : alog_why(p, "bad path", "a string", 0, 0);
    rec->client = "";
    if (j->v[F_CLIENT].type == V_STRING || j->v[F_CLIENT].type == V_NUMBER) {
        if ((n = text(p, j, F_CLIENT, &s)) < 0 || !(rec->client = alog_put_client(p, s, (size_t)n)))
            return alog_why(p, "line too long", "a shorter line", NULL, 0);
    }
    rec->body = NULL;
    rec->body_len = 0;
    if (j->v[F_BODY].type != V_NONE) {
        if ((n = text(p, j, F_BODY, &s)) < 0 || !(rec->body = alog_put_raw(p, s, (size_t)n)))
            return alog_why(p, "line too long", "a shorter line", NULL, 0);
        rec->body_len = (size_t)n;
    }
    return 0;
}

static int convert(alog_parse_t *p, const alog_config_t *cfg, const js_t *j, alog_record_t *rec)
{
    static const char *const need[] = {"time", "method", "path"};
    for (int f = F_TIME; f <= F_PATH; f++)
        if (j->v[f].type == V_NONE)
            return alog_why(p, "missing field", need[f], j->names[f],
                            j->names[f] ? strlen(j->names[f]) : 0);
    if (conv_time(p, cfg, j, rec) || conv_strings(p, j, rec))
        return -1;
    int64_t st;
    if (conv_decimal(p, j, F_STATUS, 1, &st, "bad status"))
        return -1;
    if (st != -1 && (st < 100 || st > 999))
        return alog_why(p, "bad status", "100 to 999", j->v[F_STATUS].a,
                        (size_t)(j->v[F_STATUS].b - j->v[F_STATUS].a));
    rec->status = st < 0 ? 0 : (int)st;
    if (conv_decimal(p, j, F_DURATION, unit_ns[cfg->ndjson.duration_unit], &rec->duration_ns,
                     "bad duration") ||
        conv_decimal(p, j, F_BYTES, 1, &rec->bytes, "bad bytes"))
        return -1;
    if (cfg->time_at_end && rec->duration_ns > 0) {
        if (rec->duration_ns > rec->t_ns)
            return alog_why(p, "bad duration", "a duration shorter than the time since 1970", NULL,
                            0);
        rec->t_ns -= rec->duration_ns;
    }
    return 0;
}

int alog_parse_ndjson(alog_parse_t *p, const alog_config_t *cfg, const char *line, size_t n,
                      alog_record_t *rec)
{
    js_t j;
    j.s = line;
    j.e = line + n;
    j.plen = 0;
    const alog_ndjson_t *f = &cfg->ndjson;
    const char *names[F_N] = {f->time,     f->method, f->path,  f->status,
                              f->duration, f->client, f->bytes, f->body};
    for (int i = 0; i < F_N; i++) {
        j.names[i] = names[i] && names[i][0] ? names[i] : NULL;
        j.name_len[i] = j.names[i] ? strlen(j.names[i]) : 0;
        j.v[i].type = V_NONE;
    }
    p->len = 0;
    ws(&j);
    if (j.s >= j.e || *j.s != '{')
        return alog_why(p, "not a JSON object", "one JSON object per line", line, n);
    if (object(&j, 0))
        return alog_why(p, "malformed JSON", "one JSON object per line (RFC 8259)", line, n);
    ws(&j);
    if (j.s != j.e)
        return alog_why(p, "text after the JSON object", "one JSON object per line", j.s,
                        (size_t)(j.e - j.s));
    return convert(p, cfg, &j, rec);
}
