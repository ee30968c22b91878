/* Untrusted text from a log made safe before it reaches a URL, a header or a message: methods
 * checked as RFC 9110 tokens, paths reduced to their origin form and checked, client identities
 * percent-encoded, and anything quoted in a message escaped. */
#include <stdio.h>
#include <string.h>

#include "alog_int.h"

char *alog_escape(char *dst, size_t len, const char *s, size_t n, size_t max)
{
    size_t o = 0;
    for (size_t i = 0; i < n && i < max && o + 5 < len; i++) {
        unsigned char c = (unsigned char)s[i];
        if (c >= 0x20 && c < 0x7f && c != '\\' && c != '\'')
            dst[o++] = (char)c;
        else
            o += (size_t)snprintf(dst + o, len - o, "\\x%02x", c);
    }
    if (n > max && o + 4 < len) {
        memcpy(dst + o, "...", 3);
        o += 3;
    }
    dst[o < len ? o : len - 1] = '\0';
    return dst;
}

int alog_why(alog_parse_t *p, const char *what, const char *expected, const char *text, size_t n)
{
    char got[100];
    if (text)
        snprintf(p->why, sizeof p->why, "%s (expected %s, got '%s')", what, expected,
                 alog_escape(got, sizeof got, text, n, 60));
    else
        snprintf(p->why, sizeof p->why, "%s (expected %s)", what, expected);
    return -1;
}

/* RFC 9110 §5.6.2: tchar = "!" / "#" / "$" / "%" / "&" / "'" / "*" / "+" / "-" / "." / "^" /
 * "_" / "`" / "|" / "~" / DIGIT / ALPHA. */
static bool tchar(unsigned char c)
{
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') ||
           (c && strchr("!#$%&'*+-.^_`|~", c) != NULL);
}

bool alog_method_ok(const char *s, size_t n)
{
    if (n == 0 || n > 32)
        return false;
    for (size_t i = 0; i < n; i++)
        if (!tchar((unsigned char)s[i]))
            return false;
    return true;
}

char *alog_reserve(alog_parse_t *p, size_t n)
{
    if (p->len + n + 1 > p->cap)
        return NULL;
    char *at = p->s + p->len;
    p->len += n + 1;
    return at;
}

char *alog_put_raw(alog_parse_t *p, const char *s, size_t n)
{
    char *d = alog_reserve(p, n);
    if (!d)
        return NULL;
    memcpy(d, s, n);
    d[n] = '\0';
    return d;
}

const char *alog_put_method(alog_parse_t *p, const char *s, size_t n)
{
    if (!alog_method_ok(s, n)) {
        alog_why(p, "bad method", "an RFC 9110 token such as GET", s, n);
        return NULL;
    }
    return alog_put_raw(p, s, n);
}

/* Writes `lead` (when not 0) then s with bytes for which enc() is true as %HH; returns the
 * NUL-terminated copy. */
static char *put_encoded(alog_parse_t *p, char lead, const char *s, size_t n,
                         bool (*enc)(unsigned char))
{
    static const char hex[] = "0123456789ABCDEF";
    char *d = alog_reserve(p, 3 * n + 1);
    if (!d)
        return NULL;
    size_t o = 0;
    if (lead)
        d[o++] = lead;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = (unsigned char)s[i];
        if (enc(c)) {
            d[o++] = '%';
            d[o++] = hex[c >> 4];
            d[o++] = hex[c & 15];
        } else {
            d[o++] = (char)c;
        }
    }
    d[o] = '\0';
    p->len -= 3 * n + 1 - o; /* give back what the encoding did not use */
    return d;
}

static bool high(unsigned char c)
{
    return c >= 0x80;
}

static bool unsafe(unsigned char c)
{
    return c <= 0x20 || c >= 0x7f;
}

/* Skips "scheme://authority" of an absolute URI (RFC 3986 §3: scheme = ALPHA *( ALPHA / DIGIT /
 * "+" / "-" / "." )); returns the offset of its path (n when it has none), or 0. */
static size_t authority_end(const char *s, size_t n)
{
    size_t i = 0;
    while (i < n && ((s[i] >= 'a' && s[i] <= 'z') || (s[i] >= 'A' && s[i] <= 'Z') ||
                     (i > 0 && ((s[i] >= '0' && s[i] <= '9') || strchr("+-.", s[i])))))
        i++;
    if (i == 0 || i + 3 > n || memcmp(s + i, "://", 3) != 0)
        return 0;
    i += 3;
    while (i < n && s[i] != '/' && s[i] != '?' && s[i] != '#')
        i++;
    return i;
}

const char *alog_put_path(alog_parse_t *p, const char *s, size_t n)
{
    size_t a = authority_end(s, n);
    const char *t = s + a;
    size_t m = n - a;
    const char *hash = memchr(t, '#', m);
    if (hash)
        m = (size_t)(hash - t);
    bool root = a > 0 && (m == 0 || t[0] == '?'); /* "http://h", "http://h?q": the path is "/" */
    if (!root && (m == 0 || t[0] != '/')) {
        alog_why(p, "bad path", "a path starting with '/'", s, n);
        return NULL;
    }
    for (size_t i = 0; i < m; i++) {
        unsigned char c = (unsigned char)t[i];
        if (c <= 0x20 || c == 0x7f) {
            alog_why(p, "bad path", "no control bytes or spaces", s, n);
            return NULL;
        }
    }
    char *d = put_encoded(p, root ? '/' : 0, t, m, high);
    if (!d)
        alog_why(p, "path too long", "a shorter path", NULL, 0);
    return d;
}

const char *alog_put_client(alog_parse_t *p, const char *s, size_t n)
{
    return put_encoded(p, 0, s, n > ALOG_CLIENT_MAX ? ALOG_CLIENT_MAX : n, unsafe);
}

int alog_query_param(const char *q, const char *name, const char **v, size_t *vn)
{
    size_t n = strlen(name);
    for (const char *s = q; s && *s;) {
        const char *amp = strchr(s, '&'), *e = amp ? amp : s + strlen(s);
        const char *eq = memchr(s, '=', (size_t)(e - s));
        const char *ke = eq ? eq : e;
        if ((size_t)(ke - s) == n && memcmp(s, name, n) == 0) {
            *v = eq ? eq + 1 : e;
            *vn = (size_t)(e - *v);
            return 1;
        }
        s = amp ? amp + 1 : NULL;
    }
    return 0;
}

bool alog_query_marks(const char *q, const char *name)
{
    const char *v;
    size_t n;
    if (!q || !alog_query_param(q, name, &v, &n))
        return false;
    return !((n == 1 && v[0] == '0') || (n == 5 && memcmp(v, "false", 5) == 0));
}
