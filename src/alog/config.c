/* Reader options: defaults, and setting one by name as the command line (and later plans) spell
 * them, so every caller accepts the same words. */
#include <stdio.h>
#include <string.h>

#include "alog_int.h"
#include "squall/err.h"

static const char *const format_names[] = {"auto", "common", "combined", "ndjson", NULL};
static const char *const time_names[] = {"auto", "rfc3339", "s", "ms", "us", "ns", NULL};
static const char *const unit_names[] = {"s", "ms", "us", "ns", NULL};
static const char *const field_names[] = {"time",   "method", "path", "status", "duration",
                                          "client", "bytes",  "body", NULL};

void alog_config_init(alog_config_t *c)
{
    memset(c, 0, sizeof *c);
    c->format = ALOG_AUTO;
    c->ndjson = (alog_ndjson_t){.time = "time",
                                .method = "method",
                                .path = "path",
                                .status = "status",
                                .duration = "duration",
                                .client = "client",
                                .bytes = "bytes",
                                .body = "body",
                                .time_kind = ALOG_TIME_AUTO,
                                .duration_unit = ALOG_UNIT_S};
}

const char *alog_format_name(enum alog_format f)
{
    return format_names[f];
}

static int lookup(const char *const *names, const char *v)
{
    for (int i = 0; names[i]; i++)
        if (strcmp(names[i], v) == 0)
            return i;
    return -1;
}

static int one_of(const char *key, const char *const *names, const char *v, int *out, char *err,
                  size_t len)
{
    if ((*out = lookup(names, v)) >= 0)
        return 0;
    char list[200] = "";
    for (int i = 0; names[i]; i++)
        snprintf(list + strlen(list), sizeof list - strlen(list), "%s%s", i ? ", " : "", names[i]);
    snprintf(err, len, "%s: unknown value (expected one of %s, got '%s')", key, list, v);
    return SQ_EINVAL;
}

/* "NAME=KEY": which NDJSON field reads which JSON key. */
static int set_field(alog_config_t *c, const char *v, char *err, size_t len)
{
    const char *eq = strchr(v, '=');
    char name[16];
    size_t n = eq ? (size_t)(eq - v) : 0;
    if (!eq || n == 0 || n >= sizeof name) {
        snprintf(err, len, "field: expected NAME=KEY such as time=msec, got '%s'", v);
        return SQ_EINVAL;
    }
    memcpy(name, v, n);
    name[n] = '\0';
    int f;
    if (one_of("field", field_names, name, &f, err, len))
        return SQ_EINVAL;
    const char *key = eq + 1;
    if (!key[0] && f <= 2) {
        snprintf(err, len, "field: %s is required (expected a JSON key, got nothing)", name);
        return SQ_EINVAL;
    }
    const char **slots[] = {&c->ndjson.time,   &c->ndjson.method,   &c->ndjson.path,
                            &c->ndjson.status, &c->ndjson.duration, &c->ndjson.client,
                            &c->ndjson.bytes,  &c->ndjson.body};
    *slots[f] = key[0] ? key : NULL;
    return 0;
}

int alog_config_set(alog_config_t *c, const char *key, const char *value, char *err, size_t len)
{
    int v;
    if (strcmp(key, "format") == 0) {
        if (one_of(key, format_names, value, &v, err, len))
            return SQ_EINVAL;
        c->format = (enum alog_format)v;
    } else if (strcmp(key, "field") == 0) {
        return set_field(c, value, err, len);
    } else if (strcmp(key, "time-unit") == 0) {
        if (one_of(key, time_names, value, &v, err, len))
            return SQ_EINVAL;
        c->ndjson.time_kind = (enum alog_time_kind)v;
    } else if (strcmp(key, "duration-unit") == 0) {
        if (one_of(key, unit_names, value, &v, err, len))
            return SQ_EINVAL;
        c->ndjson.duration_unit = (enum alog_unit)v;
    } else if (strcmp(key, "time-at") == 0) {
        static const char *const at[] = {"start", "end", NULL};
        if (one_of(key, at, value, &v, err, len))
            return SQ_EINVAL;
        c->time_at_end = v == 1;
    } else {
        snprintf(err, len,
                 "unknown log option (expected format, field, time-unit, duration-unit or "
                 "time-at, got '%s')",
                 key);
        return SQ_EINVAL;
    }
    return 0;
}
