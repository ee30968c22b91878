/* libFuzzer target for the exposition parser (src/expo/): the first byte picks the format (even:
 * Prometheus 0.0.4, odd: OpenMetrics 1.0), the rest is the exposition. Every sample handed out
 * must keep the parser's promises (squall/expo.h); a broken promise aborts, which libFuzzer
 * reports with the input. */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/expo.h"

static int check(const expo_sample_t *s, void *ud)
{
    (void)ud;
    size_t fl = strlen(s->family), nl = strlen(s->name);
    if (nl == 0 || fl > nl || strncmp(s->name, s->family, fl) != 0 ||
        strcmp(s->name + fl, s->suffix) != 0 || s->n_labels > EXPO_MAX_LABELS || s->line == 0)
        abort();
    for (size_t i = 0; i < s->n_labels; i++) {
        if (s->labels[i].name[0] == '\0' || strcmp(s->labels[i].name, "__name__") == 0)
            abort();
        for (size_t j = 0; j < i; j++)
            if (strcmp(s->labels[i].name, s->labels[j].name) == 0)
                abort();
    }
    return 0;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size == 0)
        return 0;
    enum expo_format fmt = data[0] & 1 ? EXPO_OPENMETRICS : EXPO_PROMETHEUS;
    char err[256];
    int rc = expo_parse((const char *)data + 1, size - 1, fmt, check, NULL, err, sizeof err);
    if (rc != 0 && (rc != SQ_EPARSE || strncmp(err, "line ", 5) != 0))
        abort();
    return 0;
}
