/* The few fields squall reads from a watch event: its version (the resume point), its writer's
 * stamp (propagation latency), and whether the server ended the stream with an error event. */
#include <inttypes.h>
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/watch.h"

/* The key at the top level, else inside the event's "object" member. */
static json_t *lookup(json_t *doc, const char *key)
{
    if (!key || !key[0])
        return NULL;
    json_t *v = json_object_get(doc, key);
    if (v)
        return v;
    json_t *obj = json_object_get(doc, "object");
    return json_is_object(obj) ? json_object_get(obj, key) : NULL;
}

static void read_version(json_t *v, watch_fields_t *f)
{
    if (json_is_integer(v) && json_integer_value(v) >= 0) {
        f->has_version = true;
        f->version_numeric = true;
        f->version_num = (uint64_t)json_integer_value(v);
        snprintf(f->version, sizeof(f->version), "%" PRIu64, f->version_num);
    } else if (json_is_string(v) && json_string_length(v) < sizeof(f->version)) {
        const char *s = json_string_value(v);
        f->has_version = s[0] != '\0';
        snprintf(f->version, sizeof(f->version), "%s", s);
        /* A string of digits still orders numerically (control planes often send "12345"). */
        char *end = NULL;
        unsigned long long n = strtoull(s, &end, 10);
        f->version_numeric = f->has_version && s[0] >= '0' && s[0] <= '9' && *end == '\0';
        f->version_num = f->version_numeric ? (uint64_t)n : 0;
    }
}

int watch_event_fields(const char *data, size_t len, const char *version_key, const char *stamp_key,
                       watch_fields_t *f)
{
    memset(f, 0, sizeof(*f));
    json_t *doc = json_loadb(data, len, 0, NULL);
    if (!json_is_object(doc)) {
        json_decref(doc);
        return SQ_EPARSE;
    }
    json_t *type = json_object_get(doc, "type");
    f->is_error = json_is_string(type) && strcmp(json_string_value(type), "error") == 0;
    read_version(lookup(doc, version_key), f);
    json_t *st = lookup(doc, stamp_key);
    if (json_is_integer(st)) {
        f->has_stamp = true;
        f->stamp_ns = (int64_t)json_integer_value(st);
    }
    json_decref(doc);
    return 0;
}
