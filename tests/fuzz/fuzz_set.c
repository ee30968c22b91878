/* libFuzzer target for --set (plan_override_split and the overrides plan_load applies): each
 * input line is one KEY=VALUE, applied to a small valid plan. */
#include <string.h>

#include "fuzz_util.h"
#include "squall/out.h"
#include "squall/plan.h"

#define MAX_SETS 8

static const char base[] =
    "target: {url: \"http://127.0.0.1:7070\", connections: 4}\n"
    "vars: {site: [north, south]}\n"
    "requests:\n"
    "  read: {kind: get, path: \"/v1/sites/{{site}}/gateways/gw-1\"}\n"
    "  scan: {kind: list, path: /v1/sites/north/gateways, page: 50}\n"
    "phases:\n"
    "  - {name: steady, rate: 10/s, duration: 1s, mix: {read: 3, scan: 1}}\n"
    "objectives:\n"
    "  - {class: read, p99: 1s}\n";

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_file((const uint8_t *)base, sizeof base - 1);
    char *text = malloc(size + 1);
    if (!text)
        abort();
    memcpy(text, data, size);
    text[size] = '\0';
    plan_override_t ov[MAX_SETS];
    char *copies[MAX_SETS];
    size_t n = 0;
    for (char *line = text, *next; line && n < MAX_SETS; line = next) {
        next = strchr(line, '\n');
        if (next)
            *next++ = '\0';
        if (plan_override_split(line, &ov[n], &copies[n]) == 0)
            n++;
    }
    out_t *o = out_new_capture();
    plan_t *p = NULL;
    if (!o)
        abort();
    plan_load(path, ov, n, &p, o);
    plan_free(p);
    out_free(o);
    for (size_t i = 0; i < n; i++)
        free(copies[i]);
    free(text);
    return 0;
}
