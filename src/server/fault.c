/* Fault configuration of the embedded target: defaults, parsing of flags and of the admin JSON
 * body, and the random draws (added latency). Decisions per request live in http.c. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/value.h"
#include "server_int.h"

void server_faults_init(server_faults_t *f)
{
    memset(f, 0, sizeof(*f));
    f->delay_kind = SERVER_DELAY_NONE;
    f->fail_status = 503;
    f->retry_after_s = 1;
    f->stall_at_ns = -1;
    f->fail_at_ns = -1;
    f->drop_at_ns = -1;
}

void server_opts_init(server_opts_t *o)
{
    memset(o, 0, sizeof(*o));
    o->host = "127.0.0.1";
    o->port = 7070;
    o->body_limit = 1 << 20;
    o->history = 10000;
    o->stream_buffer = 1 << 20;
    o->seed = 1;
    o->idle_timeout_s = 60;
    server_faults_init(&o->faults);
}

int server_duration_parse(const char *s, int64_t *ns)
{
    int64_t v;
    int rc = value_parse_duration(s, &v);
    if (rc)
        return rc;
    if (v > SERVER_DURATION_MAX_NS)
        return SQ_ERANGE;
    *ns = v;
    return 0;
}

/* The times of a delay spec after its "kind:": one duration, or "A..B" for uniform. */
static int delay_times(server_faults_t *f, enum server_delay_kind kind, const char *t)
{
    char a[64];
    const char *dots = strstr(t, "..");
    if ((kind == SERVER_DELAY_UNIFORM) != (dots != NULL))
        return SQ_EPARSE;
    size_t n = dots ? (size_t)(dots - t) : strlen(t);
    if (n >= sizeof a)
        return SQ_EPARSE;
    memcpy(a, t, n);
    a[n] = '\0';
    int64_t x, y = 0;
    if (server_duration_parse(a, &x) || (dots && server_duration_parse(dots + 2, &y)))
        return SQ_EPARSE;
    if (dots && y < x)
        return SQ_EPARSE;
    f->delay_kind = kind;
    f->delay_a_ns = x;
    f->delay_b_ns = y;
    return 0;
}

int server_delay_parse(server_faults_t *f, const char *spec)
{
    if (strcmp(spec, "none") == 0) {
        f->delay_kind = SERVER_DELAY_NONE;
        return 0;
    }
    static const struct {
        const char *prefix;
        enum server_delay_kind kind;
    } kinds[] = {{"fixed:", SERVER_DELAY_FIXED},
                 {"uniform:", SERVER_DELAY_UNIFORM},
                 {"exp:", SERVER_DELAY_EXP}};
    for (size_t i = 0; i < sizeof kinds / sizeof kinds[0]; i++) {
        size_t n = strlen(kinds[i].prefix);
        if (strncmp(spec, kinds[i].prefix, n) == 0)
            return delay_times(f, kinds[i].kind, spec + n);
    }
    return SQ_EPARSE;
}

bool srv_fault_in_error_window(const server_faults_t *f, uint64_t applied_ns, uint64_t now_ns)
{
    if (f->fail_at_ns < 0 || f->fail_for_ns <= 0)
        return false;
    uint64_t start = applied_ns + (uint64_t)f->fail_at_ns;
    return now_ns >= start && now_ns < start + (uint64_t)f->fail_for_ns;
}

int64_t srv_fault_delay(const server_faults_t *f, rng_t *r)
{
    switch (f->delay_kind) {
    case SERVER_DELAY_FIXED:
        return f->delay_a_ns;
    case SERVER_DELAY_UNIFORM:
        return f->delay_a_ns + (int64_t)rng_below(r, (uint64_t)(f->delay_b_ns - f->delay_a_ns) + 1);
    case SERVER_DELAY_EXP:
        return f->delay_a_ns > 0 ? (int64_t)llround(rng_exp(r, 1.0 / (double)f->delay_a_ns)) : 0;
    default:
        return 0;
    }
}

/* A duration given as a string with a unit, or a number of seconds. */
static int json_duration(const json_t *v, int64_t *ns)
{
    if (json_is_string(v))
        return server_duration_parse(json_string_value(v), ns);
    double s = json_is_number(v) ? json_number_value(v) : -1;
    if (s >= 0 && s <= (double)SERVER_DURATION_MAX_NS / 1e9) {
        *ns = (int64_t)llround(s * 1e9);
        return 0;
    }
    return SQ_EPARSE;
}

static int fault_key(server_faults_t *f, const char *k, const json_t *v, char *err, size_t n)
{
    json_int_t i = json_is_integer(v) ? json_integer_value(v) : -1;
    if (strcmp(k, "delay") == 0) {
        if (json_is_string(v) && server_delay_parse(f, json_string_value(v)) == 0)
            return 0;
        snprintf(err, n, "delay: expected %s", SERVER_DELAY_EXPECTS);
        return SQ_EPARSE;
    }
    if (strcmp(k, "fail_rate") == 0) {
        f->fail_rate = json_is_number(v) ? json_number_value(v) : -1;
        return f->fail_rate >= 0 && f->fail_rate <= 1 ? 0 : SQ_EPARSE;
    }
    if (strcmp(k, "fail_status") == 0)
        return (i == 503 || i == 429) ? (f->fail_status = (int)i, 0) : SQ_EPARSE;
    if (strcmp(k, "retry_after") == 0)
        return (i >= 0 && i <= 86400) ? (f->retry_after_s = (int)i, 0) : SQ_EPARSE;
    int64_t *t = strcmp(k, "stall_at") == 0          ? &f->stall_at_ns
                 : strcmp(k, "stall_for") == 0       ? &f->stall_for_ns
                 : strcmp(k, "fail_at") == 0         ? &f->fail_at_ns
                 : strcmp(k, "fail_for") == 0        ? &f->fail_for_ns
                 : strcmp(k, "drop_watches_at") == 0 ? &f->drop_at_ns
                                                     : NULL;
    if (t) {
        if (json_duration(v, t) == 0)
            return 0;
        snprintf(err, n, "%s: expected %s (or a number of seconds)", k, SERVER_DURATION_RANGE);
        return SQ_EPARSE;
    }
    if (strcmp(k, "max_inflight") == 0)
        return (i >= 0 && i <= 1000000) ? (f->max_inflight = (int)i, 0) : SQ_EPARSE;
    if (strcmp(k, "over_limit") == 0 && json_is_string(v)) {
        const char *s = json_string_value(v);
        f->over_limit_reject = strcmp(s, "reject") == 0;
        return f->over_limit_reject || strcmp(s, "queue") == 0 ? 0 : SQ_EPARSE;
    }
    snprintf(err, n,
             "unknown fault '%s' (known: delay, fail_rate, fail_status, retry_after, "
             "stall_at, stall_for, fail_at, fail_for, drop_watches_at, max_inflight, "
             "over_limit)",
             k);
    return SQ_EINVAL;
}

int srv_faults_from_json(server_faults_t *f, const json_t *j, char *err, size_t errlen)
{
    server_faults_init(f);
    if (!json_is_object(j)) {
        snprintf(err, errlen, "the fault configuration must be a JSON object");
        return SQ_EPARSE;
    }
    const char *k;
    json_t *v;
    json_object_foreach((json_t *)j, k, v)
    {
        err[0] = '\0';
        int rc = fault_key(f, k, v, err, errlen);
        if (rc < 0) {
            if (!err[0])
                snprintf(err, errlen, "fault '%s': value out of range or of the wrong type", k);
            return rc;
        }
    }
    return 0;
}

/* ns as exact decimal seconds ("135s", "0.05s", "0.00001s"), which server_duration_parse reads
 * back to the same value. */
static void fmt_seconds(char *buf, size_t len, int64_t ns)
{
    char frac[16];
    snprintf(frac, sizeof frac, ".%09lld", (long long)(ns % 1000000000));
    size_t n = strlen(frac);
    while (n > 1 && frac[n - 1] == '0')
        frac[--n] = '\0';
    snprintf(buf, len, "%lld%ss", (long long)(ns / 1000000000), n > 1 ? frac : "");
}

static json_t *ns_json(int64_t ns)
{
    char s[48];
    fmt_seconds(s, sizeof s, ns);
    return json_string(s);
}

json_t *srv_faults_to_json(const server_faults_t *f)
{
    static const char *const kinds[] = {"none", "fixed", "uniform", "exp"};
    char d[128], a[48], b[48];
    fmt_seconds(a, sizeof a, f->delay_a_ns);
    fmt_seconds(b, sizeof b, f->delay_b_ns);
    if (f->delay_kind == SERVER_DELAY_UNIFORM)
        snprintf(d, sizeof(d), "uniform:%s..%s", a, b);
    else if (f->delay_kind != SERVER_DELAY_NONE)
        snprintf(d, sizeof(d), "%s:%s", kinds[f->delay_kind], a);
    else
        snprintf(d, sizeof(d), "none");
    json_t *j =
        json_pack("{s:s,s:f,s:i,s:i,s:i,s:s}", "delay", d, "fail_rate", f->fail_rate, "fail_status",
                  f->fail_status, "retry_after", f->retry_after_s, "max_inflight", f->max_inflight,
                  "over_limit", f->over_limit_reject ? "reject" : "queue");
    if (j && f->stall_at_ns >= 0) {
        json_object_set_new(j, "stall_at", ns_json(f->stall_at_ns));
        json_object_set_new(j, "stall_for", ns_json(f->stall_for_ns));
    }
    if (j && f->fail_at_ns >= 0) {
        json_object_set_new(j, "fail_at", ns_json(f->fail_at_ns));
        json_object_set_new(j, "fail_for", ns_json(f->fail_for_ns));
    }
    if (j && f->drop_at_ns >= 0)
        json_object_set_new(j, "drop_watches_at", ns_json(f->drop_at_ns));
    return j;
}
