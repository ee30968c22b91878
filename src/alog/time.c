/* Log times to unix nanoseconds: the CLF stamp, RFC 3339 date-times and decimal unix times,
 * by integer arithmetic (no mktime: it is slow and depends on the process's time zone). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "alog_int.h"

#define NS_PER_S INT64_C(1000000000)

int64_t alog_days_from_civil(int64_t y, unsigned m, unsigned d)
{
    y -= m <= 2;
    const int64_t era = (y >= 0 ? y : y - 399) / 400;
    const unsigned yoe = (unsigned)(y - era * 400);
    const unsigned doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
    const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + (int64_t)doe - 719468;
}

static unsigned days_in_month(int64_t y, unsigned m)
{
    static const unsigned dm[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    bool leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
    return m == 2 && leap ? 29 : dm[m - 1];
}

/* n decimal digits at s, or -1. */
static int digits(const char *s, int n)
{
    int v = 0;
    for (int i = 0; i < n; i++) {
        if (s[i] < '0' || s[i] > '9')
            return -1;
        v = v * 10 + (s[i] - '0');
    }
    return v;
}

/* A civil date and time plus an offset east of UTC in seconds, checked, to unix ns. */
static int civil_ns(int y, int mo, int d, int h, int mi, int sec, int off_s, int64_t *ns)
{
    if (y < 1970 || y > 9999 || mo < 1 || mo > 12 || d < 1 ||
        (unsigned)d > days_in_month(y, (unsigned)mo) || h > 23 || mi > 59 || sec > 60)
        return -1;
    int64_t days = alog_days_from_civil(y, (unsigned)mo, (unsigned)d);
    int64_t s = days * 86400 + h * 3600 + mi * 60 + sec - off_s;
    if (s < 0 || s >= INT64_MAX / NS_PER_S) /* int64 ns end in April 2262 */
        return -1;
    *ns = s * NS_PER_S;
    return 0;
}

int alog_time_clf(const char *s, size_t n, int64_t *ns)
{
    static const char months[] = "JanFebMarAprMayJunJulAugSepOctNovDec";
    if (n != 26 || s[2] != '/' || s[6] != '/' || s[11] != ':' || s[14] != ':' || s[17] != ':' ||
        s[20] != ' ' || (s[21] != '+' && s[21] != '-'))
        return -1;
    int mo = 0;
    for (int i = 0; i < 12 && !mo; i++)
        if (memcmp(s + 3, months + 3 * i, 3) == 0)
            mo = i + 1;
    int d = digits(s, 2), y = digits(s + 7, 4), h = digits(s + 12, 2), mi = digits(s + 15, 2);
    int sec = digits(s + 18, 2), oh = digits(s + 22, 2), om = digits(s + 24, 2);
    if (!mo || d < 0 || y < 0 || h < 0 || mi < 0 || sec < 0 || oh < 0 || oh > 23 || om < 0 ||
        om > 59)
        return -1;
    int off = (oh * 3600 + om * 60) * (s[21] == '-' ? -1 : 1);
    return civil_ns(y, mo, d, h, mi, sec, off, ns);
}

/* The fraction after a '.' at s[0]: adds its nanoseconds to *ns, sets *res, returns its length
 * with the point (0 without a point, -1 when the point has no digits). */
static int fraction(const char *s, size_t n, int64_t *ns, int64_t *res)
{
    *res = NS_PER_S;
    if (n == 0 || s[0] != '.')
        return 0;
    size_t i = 1;
    int64_t scale = NS_PER_S;
    for (; i < n && s[i] >= '0' && s[i] <= '9'; i++) {
        scale /= 10;
        if (scale > 0) {
            *ns += (s[i] - '0') * scale;
            *res = scale;
        }
    }
    return i > 1 ? (int)i : -1;
}

int alog_time_rfc3339(const char *s, size_t n, int64_t *ns, int64_t *res)
{
    if (n < 20 || s[4] != '-' || s[7] != '-' || (s[10] != 'T' && s[10] != 't' && s[10] != ' ') ||
        s[13] != ':' || s[16] != ':')
        return -1;
    int y = digits(s, 4), mo = digits(s + 5, 2), d = digits(s + 8, 2), h = digits(s + 11, 2);
    int mi = digits(s + 14, 2), sec = digits(s + 17, 2);
    if (y < 0 || mo < 0 || d < 0 || h < 0 || mi < 0 || sec < 0)
        return -1;
    int64_t frac = 0;
    int fl = fraction(s + 19, n - 19, &frac, res);
    if (fl < 0)
        return -1;
    const char *z = s + 19 + fl;
    size_t zl = n - 19 - (size_t)fl;
    int off = 0;
    if (zl == 1 && (z[0] == 'Z' || z[0] == 'z')) {
        off = 0;
    } else if (zl == 6 && (z[0] == '+' || z[0] == '-') && z[3] == ':') {
        int oh = digits(z + 1, 2), om = digits(z + 4, 2);
        if (oh < 0 || oh > 23 || om < 0 || om > 59)
            return -1;
        off = (oh * 3600 + om * 60) * (z[0] == '-' ? -1 : 1);
    } else {
        return -1;
    }
    if (civil_ns(y, mo, d, h, mi, sec, off, ns))
        return -1;
    *ns += frac;
    return 0;
}

int alog_rfc3339_ns(const char *s, size_t n, int64_t *ns)
{
    int64_t res;
    return alog_time_rfc3339(s, n, ns, &res);
}

int64_t alog_auto_unit(const char *s, size_t n)
{
    size_t i = 0;
    while (i < n && s[i] == '0')
        i++;
    size_t d = 0;
    while (i + d < n && s[i + d] >= '0' && s[i + d] <= '9')
        d++;
    return d <= 11 ? NS_PER_S : d <= 14 ? INT64_C(1000000) : d <= 17 ? INT64_C(1000) : 1;
}

/* Exponent forms ("1.7e9"): through a double, to the nearest ns, at the unit's resolution. */
static int decimal_exp(const char *s, size_t n, int64_t unit_ns, int64_t *ns, int64_t *res)
{
    char tmp[64];
    if (n >= sizeof tmp)
        return -1;
    memcpy(tmp, s, n);
    tmp[n] = '\0';
    char *end;
    double v = strtod(tmp, &end);
    if (end != tmp + n || !isfinite(v) || v < 0 || v * (double)unit_ns > 9.2e18)
        return -1;
    *ns = llround(v * (double)unit_ns);
    *res = unit_ns;
    return 0;
}

int alog_decimal(const char *s, size_t n, int64_t unit_ns, int64_t *ns, int64_t *res)
{
    size_t i = 0;
    int64_t whole = 0;
    for (; i < n && s[i] >= '0' && s[i] <= '9'; i++) {
        if (whole > (INT64_MAX - 9) / 10)
            return -1;
        whole = whole * 10 + (s[i] - '0');
    }
    if (i == 0)
        return -1;
    if (whole > INT64_MAX / unit_ns)
        return -1;
    int64_t v = whole * unit_ns, r = unit_ns;
    if (i < n && s[i] == '.') {
        size_t j = i + 1;
        int64_t scale = unit_ns;
        for (; j < n && s[j] >= '0' && s[j] <= '9'; j++) {
            scale /= 10;
            if (scale > 0) {
                v += (s[j] - '0') * scale;
                r = scale;
            }
        }
        if (j == i + 1)
            return -1;
        if (r == unit_ns && j > i + 1) /* only digits below 1 ns: resolution is 1 ns */
            r = 1;
        i = j;
    }
    if (i < n && (s[i] == 'e' || s[i] == 'E'))
        return decimal_exp(s, n, unit_ns, ns, res);
    if (i != n || v < 0)
        return -1;
    *ns = v;
    *res = r;
    return 0;
}
