/* Common and Combined Log Format lines (Apache httpd documentation, "Log Files"):
 * `%h %l %u %t "%r" %>s %b` and the same plus `"%{Referer}i" "%{User-agent}i"`. */
#include <string.h>

#include "alog_int.h"

#define CLF_EXPECTS "%h %l %u %t \"%r\" %>s %b"

/* A field up to the next space: [*at, end of field); advances past the space. */
static bool word(const char **at, const char *e, const char **w, size_t *wn)
{
    const char *s = *at, *sp = memchr(s, ' ', (size_t)(e - s));
    if (!sp || sp == s)
        return false;
    *w = s;
    *wn = (size_t)(sp - s);
    *at = sp + 1;
    return true;
}

static int hexval(char c)
{
    return c >= '0' && c <= '9'   ? c - '0'
           : c >= 'a' && c <= 'f' ? c - 'a' + 10
           : c >= 'A' && c <= 'F' ? c - 'A' + 10
                                  : -1;
}

/* The byte an escape stands for: \" \\ and the C-style whitespace escapes Apache writes; -1
 * for anything else (\xhh is handled by the caller). */
static int unescape(char c)
{
    switch (c) {
    case '"':
    case '\\':
        return c;
    case 'n':
        return '\n';
    case 'r':
        return '\r';
    case 't':
        return '\t';
    case 'v':
        return '\v';
    case 'f':
        return '\f';
    case 'b':
        return '\b';
    default:
        return -1;
    }
}

/* A quoted field starting at *at ('"'), unescaped into dst when dst is not NULL (room for e - *at
 * bytes); advances past the closing quote. Returns the unescaped length or -1. */
static long quoted(const char **at, const char *e, char *dst)
{
    const char *s = *at;
    if (s >= e || *s != '"')
        return -1;
    long o = 0;
    for (s++; s < e; s++) {
        int c = (unsigned char)*s;
        if (c == '"') {
            *at = s + 1;
            return o;
        }
        if (c == '\\') {
            if (++s >= e)
                return -1;
            if (*s == 'x') {
                int h = e - s > 2 ? hexval(s[1]) : -1, l = h >= 0 ? hexval(s[2]) : -1;
                if (l < 0)
                    return -1;
                c = h * 16 + l;
                s += 2;
            } else if ((c = unescape(*s)) < 0) {
                return -1;
            }
        }
        if (dst)
            dst[o] = (char)c;
        o++;
    }
    return -1;
}

/* "%r": METHOD SP TARGET [SP HTTP/x.y] into the record. */
static int request_line(alog_parse_t *p, const char *r, size_t n, alog_record_t *rec)
{
    const char *sp1 = memchr(r, ' ', n);
    if (!sp1)
        return alog_why(p, "no request", "\"METHOD /path HTTP/1.1\"", r, n);
    const char *t = sp1 + 1, *e = r + n;
    const char *sp2 = memchr(t, ' ', (size_t)(e - t));
    if (sp2) {
        const char *v = sp2 + 1;
        if (e - v < 5 || memcmp(v, "HTTP/", 5) != 0 || memchr(v, ' ', (size_t)(e - v)))
            return alog_why(p, "bad request line", "\"METHOD /path HTTP/1.1\"", r, n);
    } else {
        sp2 = e; /* HTTP/0.9: no version */
    }
    rec->method = alog_put_method(p, r, (size_t)(sp1 - r));
    if (!rec->method)
        return -1;
    rec->path = alog_put_path(p, t, (size_t)(sp2 - t));
    return rec->path ? 0 : -1;
}

static int status_bytes(alog_parse_t *p, const char **at, const char *e, alog_record_t *rec)
{
    const char *w;
    size_t wn;
    const char *s = *at;
    if (e - s == 3)
        return alog_why(p, "no size after the status", "%>s %b", s, 3);
    if (e - s < 4 || s[3] != ' ' || s[0] < '1' || s[0] > '9' || s[1] < '0' || s[1] > '9' ||
        s[2] < '0' || s[2] > '9')
        return alog_why(p, "bad status", "three digits", s, (size_t)(e - s));
    rec->status = (s[0] - '0') * 100 + (s[1] - '0') * 10 + (s[2] - '0');
    s += 4;
    const char *sp = memchr(s, ' ', (size_t)(e - s));
    w = s;
    wn = (size_t)((sp ? sp : e) - s);
    *at = sp ? sp + 1 : e;
    rec->bytes = -1;
    if (wn == 1 && w[0] == '-')
        return 0;
    int64_t b = 0;
    for (size_t i = 0; i < wn; i++) {
        if (w[i] < '0' || w[i] > '9' || b > INT64_MAX / 10 - 9)
            return alog_why(p, "bad size", "digits or '-'", w, wn);
        b = b * 10 + (w[i] - '0');
    }
    if (wn == 0)
        return alog_why(p, "bad size", "digits or '-'", w, wn);
    rec->bytes = b;
    return 0;
}

/* host, ident, user and [time]. */
static int head(alog_parse_t *p, const char **at, const char *e, alog_record_t *rec)
{
    const char *h, *l;
    size_t hn, ln;
    if (!word(at, e, &h, &hn) || !word(at, e, &l, &ln))
        return alog_why(p, "too few fields", CLF_EXPECTS, *at, (size_t)(e - *at));
    const char *u = *at, *br = u;
    while (br + 1 < e && !(br[0] == ' ' && br[1] == '['))
        br++;
    if (br + 1 >= e || br == u)
        return alog_why(p, "no time", "[10/Oct/2000:13:55:36 -0700]", u, (size_t)(e - u));
    const char *t = br + 2;
    if (e - t < 28 || t[26] != ']' || t[27] != ' ')
        return alog_why(p, "bad time", "[10/Oct/2000:13:55:36 -0700]", t - 1,
                        (size_t)(e - t + 1) < 30 ? (size_t)(e - t + 1) : 30);
    if (memcmp(t, p->clf_text, 26) != 0) {
        if (alog_time_clf(t, 26, &p->clf_ns))
            return alog_why(p, "bad time", "[10/Oct/2000:13:55:36 -0700]", t - 1, 28);
        memcpy(p->clf_text, t, 26);
    }
    rec->t_ns = p->clf_ns;
    rec->resolution_ns = INT64_C(1000000000);
    size_t un = (size_t)(br - u);
    bool anon = un == 1 && u[0] == '-';
    rec->client = alog_put_client(p, anon ? h : u, anon ? hn : un);
    *at = t + 28;
    return rec->client ? 0 : alog_why(p, "line too long", "a shorter line", NULL, 0);
}

/* Trailing spaces only. */
static bool at_end(const char *s, const char *e)
{
    while (s < e && *s == ' ')
        s++;
    return s == e;
}

int alog_parse_clf(alog_parse_t *p, const char *line, size_t n, bool combined, alog_record_t *rec)
{
    const char *at = line, *e = line + n;
    p->len = 0;
    if (head(p, &at, e, rec))
        return -1;
    size_t room = (size_t)(e - at);
    char *req = alog_reserve(p, room);
    if (!req)
        return alog_why(p, "line too long", "a shorter line", NULL, 0);
    const char *q = at;
    long rn = quoted(&at, e, req);
    if (rn < 0)
        return alog_why(p, "bad request field", "\"METHOD /path HTTP/1.1\"", q, (size_t)(e - q));
    req[rn] = '\0';
    p->len -= room - (size_t)rn; /* keep only what the unescaped request used */
    if (at >= e || *at != ' ')
        return alog_why(p, "too few fields", CLF_EXPECTS, at, (size_t)(e - at));
    at++;
    if (request_line(p, req, (size_t)rn, rec) || status_bytes(p, &at, e, rec))
        return -1;
    if (combined) {
        if (quoted(&at, e, NULL) < 0 || at >= e || *at != ' ' || (at++, quoted(&at, e, NULL) < 0))
            return alog_why(p, "no referer and user-agent",
                            CLF_EXPECTS " \"%{Referer}i\" \"%{User-agent}i\"", at,
                            (size_t)(e - at));
    }
    if (!at_end(at, e))
        return alog_why(p, "unexpected text after the last field",
                        combined ? "the line to end after the user-agent"
                                 : "the line to end after %b",
                        at, (size_t)(e - at));
    rec->duration_ns = -1;
    rec->body = NULL;
    rec->body_len = 0;
    return 0;
}
