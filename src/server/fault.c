/* Fault configuration of the embedded target: defaults, parsing of flags and of the admin JSON
 * body, and the random draws (added latency). Decisions per request live in http.c. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

void server_faults_init(server_faults_t *f)
{
    memset(f, 0, sizeof(*f));
    f->delay_kind = SERVER_DELAY_NONE;
    f->fail_status = 503;
    f->retry_after_s = 1;
    f->stall_at_ns = -1;
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
    server_faults_init(&o->faults);
}

int server_duration_parse(const char *s, int64_t *ns)
{
    char *end;
    double v = strtod(s, &end);
    if (end == s || !(v >= 0) || v > 1e7)
        return SQ_EPARSE;
    double mult;
    if (strcmp(end, "ns") == 0)
        mult = 1;
    else if (strcmp(end, "us") == 0)
        mult = 1e3;
    else if (strcmp(end, "ms") == 0)
        mult = 1e6;
    else if (strcmp(end, "s") == 0 || (*end == '\0' && v == 0))
        mult = 1e9;
    else
        return SQ_EPARSE;
    *ns = (int64_t)llround(v * mult);
    return 0;
}

int server_delay_parse(server_faults_t *f, const char *spec, char *err, size_t errlen)
{
    char a[64] = "", b[64] = "";
    const char *colon = strchr(spec, ':');
    if (strcmp(spec, "none") == 0) {
        f->delay_kind = SERVER_DELAY_NONE;
        return 0;
    }
    if (!colon || strlen(colon + 1) >= sizeof(a))
        goto bad;
    size_t kl = (size_t)(colon - spec);
    const char *dots = strstr(colon + 1, "..");
    if (dots) {
        snprintf(a, sizeof(a), "%.*s", (int)(dots - colon - 1), colon + 1);
        snprintf(b, sizeof(b), "%s", dots + 2);
    } else {
        snprintf(a, sizeof(a), "%s", colon + 1);
    }
    enum server_delay_kind k;
    if (kl == 5 && strncmp(spec, "fixed", 5) == 0 && !dots)
        k = SERVER_DELAY_FIXED;
    else if (kl == 7 && strncmp(spec, "uniform", 7) == 0 && dots)
        k = SERVER_DELAY_UNIFORM;
    else if (kl == 3 && strncmp(spec, "exp", 3) == 0 && !dots)
        k = SERVER_DELAY_EXP;
    else
        goto bad;
    int64_t x, y = 0;
    if (server_duration_parse(a, &x) < 0 || (dots && server_duration_parse(b, &y) < 0))
        goto bad;
    if (dots && y < x)
        goto bad;
    f->delay_kind = k;
    f->delay_a_ns = x;
    f->delay_b_ns = y;
    return 0;
bad:
    snprintf(err, errlen,
             "delay '%s': expected none, fixed:D, uniform:A..B or exp:MEAN (D like 50ms)", spec);
    return SQ_EPARSE;
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
    if (json_is_number(v) && json_number_value(v) >= 0 && json_number_value(v) <= 1e7) {
        *ns = (int64_t)llround(json_number_value(v) * 1e9);
        return 0;
    }
    return SQ_EPARSE;
}

static int fault_key(server_faults_t *f, const char *k, const json_t *v, char *err, size_t n)
{
    json_int_t i = json_is_integer(v) ? json_integer_value(v) : -1;
    if (strcmp(k, "delay") == 0)
        return json_is_string(v) ? server_delay_parse(f, json_string_value(v), err, n) : SQ_EPARSE;
    if (strcmp(k, "fail_rate") == 0) {
        f->fail_rate = json_is_number(v) ? json_number_value(v) : -1;
        return f->fail_rate >= 0 && f->fail_rate <= 1 ? 0 : SQ_EPARSE;
    }
    if (strcmp(k, "fail_status") == 0)
        return (i == 503 || i == 429) ? (f->fail_status = (int)i, 0) : SQ_EPARSE;
    if (strcmp(k, "retry_after") == 0)
        return (i >= 0 && i <= 86400) ? (f->retry_after_s = (int)i, 0) : SQ_EPARSE;
    if (strcmp(k, "stall_at") == 0)
        return json_duration(v, &f->stall_at_ns);
    if (strcmp(k, "stall_for") == 0)
        return json_duration(v, &f->stall_for_ns);
    if (strcmp(k, "drop_watches_at") == 0)
        return json_duration(v, &f->drop_at_ns);
    if (strcmp(k, "max_inflight") == 0)
        return (i >= 0 && i <= 1000000) ? (f->max_inflight = (int)i, 0) : SQ_EPARSE;
    if (strcmp(k, "over_limit") == 0 && json_is_string(v)) {
        const char *s = json_string_value(v);
        f->over_limit_reject = strcmp(s, "reject") == 0;
        return f->over_limit_reject || strcmp(s, "queue") == 0 ? 0 : SQ_EPARSE;
    }
    snprintf(err, n,
             "unknown fault '%s' (known: delay, fail_rate, fail_status, retry_after, "
             "stall_at, stall_for, drop_watches_at, max_inflight, over_limit)",
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

static json_t *ns_json(int64_t ns)
{
    char s[48];
    snprintf(s, sizeof(s), "%.9gs", (double)ns / 1e9);
    return json_string(s);
}

json_t *srv_faults_to_json(const server_faults_t *f)
{
    static const char *const kinds[] = {"none", "fixed", "uniform", "exp"};
    char d[128];
    if (f->delay_kind == SERVER_DELAY_UNIFORM)
        snprintf(d, sizeof(d), "uniform:%.9gs..%.9gs", (double)f->delay_a_ns / 1e9,
                 (double)f->delay_b_ns / 1e9);
    else if (f->delay_kind != SERVER_DELAY_NONE)
        snprintf(d, sizeof(d), "%s:%.9gs", kinds[f->delay_kind], (double)f->delay_a_ns / 1e9);
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
    if (j && f->drop_at_ns >= 0)
        json_object_set_new(j, "drop_watches_at", ns_json(f->drop_at_ns));
    return j;
}
