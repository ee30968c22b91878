/* The value syntax shared by plans, options and the embedded server: durations, rates,
 * percentages and numbers, parsed strictly. Durations are computed in exact integer nanoseconds
 * so `1.1s` is 1100000000, not a float. */
#include "squall/value.h"

#include <arpa/inet.h>
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"

/* One <digits>[.<digits>] number at *s, as integer part and fraction digits; advances *s. */
static int read_decimal(const char **s, uint64_t *whole, uint64_t *frac, int *frac_digits)
{
    const char *p = *s;
    *whole = 0;
    *frac = 0;
    *frac_digits = 0;
    if (!isdigit((unsigned char)*p))
        return SQ_EPARSE;
    for (; isdigit((unsigned char)*p); p++) {
        if (*whole > (UINT64_MAX - 9) / 10)
            return SQ_ERANGE;
        *whole = *whole * 10 + (uint64_t)(*p - '0');
    }
    if (*p == '.') {
        p++;
        if (!isdigit((unsigned char)*p))
            return SQ_EPARSE;
        for (; isdigit((unsigned char)*p); p++) {
            if (*frac_digits >= 18)
                return SQ_ERANGE; /* finer than any unit can carry in nanoseconds */
            *frac = *frac * 10 + (uint64_t)(*p - '0');
            (*frac_digits)++;
        }
    }
    *s = p;
    return 0;
}

static const struct {
    const char *name;
    int64_t ns;
} duration_units[] = {
    /* Longest names first so "ms" is not read as "m" followed by junk. */
    {"ns", 1},
    {"us", 1000},
    {"\xc2\xb5s", 1000},
    {"ms", 1000000},
    {"s", INT64_C(1000000000)},
    {"m", INT64_C(60000000000)},
    {"h", INT64_C(3600000000000)},
};

static int64_t read_duration_unit(const char **s)
{
    for (size_t i = 0; i < sizeof duration_units / sizeof duration_units[0]; i++) {
        size_t n = strlen(duration_units[i].name);
        if (strncmp(*s, duration_units[i].name, n) == 0) {
            *s += n;
            return duration_units[i].ns;
        }
    }
    return 0;
}

/* whole.frac * unit in nanoseconds, exactly, or SQ_ERANGE. */
static int scale_part(uint64_t whole, uint64_t frac, int digits, int64_t unit, int64_t *out)
{
    if (whole > (uint64_t)(INT64_MAX / unit))
        return SQ_ERANGE;
    int64_t v = (int64_t)whole * unit;
    uint64_t den = 1;
    for (int i = 0; i < digits; i++)
        den *= 10;
    /* frac/den * unit must be a whole number of ns. frac < 1e18 times a unit up to 3.6e12
     * overflows 64 bits, so the product is formed in 128. */
    unsigned __int128 num = (unsigned __int128)frac * (uint64_t)unit;
    if (num % den != 0)
        return SQ_ERANGE;
    uint64_t add = (uint64_t)(num / den);
    if (add > (uint64_t)(INT64_MAX - v))
        return SQ_ERANGE;
    *out = v + (int64_t)add;
    return 0;
}

int value_parse_duration(const char *s, int64_t *ns)
{
    if (!s || !*s)
        return SQ_EPARSE;
    if (s[0] == '-')
        return isdigit((unsigned char)s[1]) ? SQ_ERANGE : SQ_EPARSE;
    if (strcmp(s, "0") == 0) {
        *ns = 0;
        return 0;
    }
    int64_t total = 0;
    while (*s) {
        uint64_t whole, frac;
        int digits, rc = read_decimal(&s, &whole, &frac, &digits);
        if (rc)
            return rc;
        int64_t unit = read_duration_unit(&s);
        if (!unit)
            return SQ_EPARSE;
        int64_t part;
        if ((rc = scale_part(whole, frac, digits, unit, &part)))
            return rc;
        if (part > INT64_MAX - total)
            return SQ_ERANGE;
        total += part;
    }
    *ns = total;
    return 0;
}

/* strtod restricted to plain decimal numbers: no sign, no hex, no inf/nan, no spaces. */
static int read_number(const char *s, const char **end, double *v)
{
    if (!isdigit((unsigned char)s[0]) && !(s[0] == '.' && isdigit((unsigned char)s[1])))
        return SQ_EPARSE;
    for (const char *p = s; *p && p != *end; p++)
        if (p[0] == '0' && (p[1] == 'x' || p[1] == 'X'))
            return SQ_EPARSE;
    char *e;
    errno = 0;
    double d = strtod(s, &e);
    if (e == s)
        return SQ_EPARSE;
    if (errno == ERANGE || !isfinite(d))
        return SQ_ERANGE;
    *end = e;
    *v = d;
    return 0;
}

int value_parse_number(const char *s, double min, double max, double *v)
{
    if (!s)
        return SQ_EPARSE;
    bool neg = s[0] == '-';
    const char *end = NULL;
    double d;
    int rc = read_number(s + neg, &end, &d);
    if (rc)
        return rc;
    if (*end)
        return SQ_EPARSE;
    d = neg ? -d : d;
    if (d < min || d > max)
        return SQ_ERANGE;
    *v = d;
    return 0;
}

int value_parse_rate(const char *s, double *per_s)
{
    if (!s)
        return SQ_EPARSE;
    if (s[0] == '-')
        return isdigit((unsigned char)s[1]) ? SQ_ERANGE : SQ_EPARSE;
    if (strcmp(s, "0") == 0) {
        *per_s = 0;
        return 0;
    }
    const char *end = NULL;
    double d;
    int rc = read_number(s, &end, &d);
    if (rc)
        return rc;
    double div;
    if (strcmp(end, "/s") == 0)
        div = 1;
    else if (strcmp(end, "/m") == 0 || strcmp(end, "/min") == 0)
        div = 60;
    else if (strcmp(end, "/h") == 0)
        div = 3600;
    else
        return SQ_EPARSE;
    d /= div;
    if (d > VALUE_RATE_MAX)
        return SQ_ERANGE;
    *per_s = d;
    return 0;
}

int value_parse_percent(const char *s, double *fraction)
{
    if (!s)
        return SQ_EPARSE;
    if (s[0] == '-')
        return isdigit((unsigned char)s[1]) ? SQ_ERANGE : SQ_EPARSE;
    const char *end = NULL;
    double d;
    int rc = read_number(s, &end, &d);
    if (rc)
        return rc;
    if (strcmp(end, "%") != 0)
        return SQ_EPARSE;
    if (d > 100)
        return SQ_ERANGE;
    *fraction = d / 100;
    return 0;
}

int value_parse_int(const char *s, int64_t min, int64_t max, int64_t *v)
{
    if (!s)
        return SQ_EPARSE;
    const char *p = s + (s[0] == '-');
    if (!isdigit((unsigned char)*p))
        return SQ_EPARSE;
    for (const char *q = p; *q; q++)
        if (!isdigit((unsigned char)*q))
            return SQ_EPARSE;
    errno = 0;
    long long n = strtoll(s, NULL, 10);
    if (errno == ERANGE || n < min || n > max)
        return SQ_ERANGE;
    *v = n;
    return 0;
}

const char *value_path_problem(const char *path)
{
    if (!path || !path[0])
        return "an empty path";
    if (path[0] != '/')
        return "a path that does not start with '/'";
    size_t n = 0;
    for (const unsigned char *p = (const unsigned char *)path; *p; p++, n++) {
        if (*p < 0x20 || *p == 0x7f)
            return "a control byte (CR, LF, NUL, ...) in the path";
        if (*p == ' ')
            return "a space in the path";
        if (*p == '#')
            return "a '#' in the path";
    }
    return n > VALUE_PATH_MAX ? "a path longer than 8192 bytes" : NULL;
}

int value_token_ok(const char *s, size_t len, size_t max)
{
    if (!s || len == 0 || len > max)
        return 0;
    for (size_t i = 0; i < len; i++)
        if ((unsigned char)s[i] < 0x21 || (unsigned char)s[i] > 0x7e)
            return 0;
    return 1;
}

int value_parse_bytes(const char *s, int64_t *bytes)
{
    static const struct {
        const char *unit;
        int shift;
    } units[] = {{"", 0}, {"B", 0}, {"KiB", 10}, {"MiB", 20}, {"GiB", 30}};
    const char *p = s;
    uint64_t v = 0;
    if (!isdigit((unsigned char)*p))
        return SQ_EPARSE;
    for (; isdigit((unsigned char)*p); p++) {
        if (v > (UINT64_C(1) << 40))
            return SQ_ERANGE;
        v = v * 10 + (uint64_t)(*p - '0');
    }
    for (size_t i = 0; i < sizeof units / sizeof units[0]; i++) {
        if (strcmp(p, units[i].unit) == 0) {
            if (v > (UINT64_C(1) << 40) >> units[i].shift)
                return SQ_ERANGE;
            *bytes = (int64_t)(v << units[i].shift);
            return 0;
        }
    }
    return SQ_EPARSE;
}

int value_parse_listen(const char *s, char *host, size_t cap, int *port)
{
    const char *colon = strrchr(s, ':');
    char *end;
    if (!colon)
        return SQ_EPARSE;
    long p = strtol(colon + 1, &end, 10);
    if (*end || end == colon + 1 || p < 0 || p > 65535)
        return SQ_EPARSE;
    size_t n = (size_t)(colon - s);
    if (n >= 2 && s[0] == '[' && s[n - 1] == ']') {
        s++;
        n -= 2;
    }
    if (n == 0)
        snprintf(host, cap, "127.0.0.1");
    else if (n < cap)
        snprintf(host, cap, "%.*s", (int)n, s);
    else
        return SQ_EPARSE;
    *port = (int)p;
    return 0;
}

bool value_is_loopback(const char *host)
{
    struct in_addr a4;
    struct in6_addr a6;
    if (inet_pton(AF_INET, host, &a4) == 1)
        return (ntohl(a4.s_addr) >> 24) == 127;
    return inet_pton(AF_INET6, host, &a6) == 1 && IN6_IS_ADDR_LOOPBACK(&a6);
}

const char *value_format_duration(int64_t ns, char *buf, size_t cap)
{
    static const struct {
        int64_t ns;
        const char *unit;
        bool decimals;
    } u[] = {{INT64_C(3600000000000), "h", false},
             {INT64_C(60000000000), "m", false},
             {INT64_C(1000000000), "s", true},
             {INT64_C(1000000), "ms", true},
             {INT64_C(1000), "us", true}};
    if (ns == 0) {
        snprintf(buf, cap, "0");
        return buf;
    }
    uint64_t a = ns < 0 ? 0 - (uint64_t)ns : (uint64_t)ns;
    const char *sign = ns < 0 ? "-" : "";
    for (size_t i = 0; i < sizeof u / sizeof u[0]; i++) {
        uint64_t one = (uint64_t)u[i].ns;
        if (a < one)
            continue;
        if (a % one == 0) {
            snprintf(buf, cap, "%s%llu%s", sign, (unsigned long long)(a / one), u[i].unit);
            return buf;
        }
        uint64_t milli = one / 1000;
        if (u[i].decimals && a % milli == 0) {
            unsigned frac = (unsigned)(a % one / milli);
            int digits = 3;
            while (frac % 10 == 0) /* frac > 0: a is not a multiple of one */
                frac /= 10, digits--;
            snprintf(buf, cap, "%s%llu.%0*u%s", sign, (unsigned long long)(a / one), digits, frac,
                     u[i].unit);
            return buf;
        }
    }
    snprintf(buf, cap, "%s%lluns", sign, (unsigned long long)a);
    return buf;
}
