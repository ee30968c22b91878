/* A merge's inputs as their entries in meta.inputs keep them: name, wall-clock start and
 * sections, and when each ran its phases. Both the sections' and the storm ticks' merges read
 * them. */
#include <stdlib.h>
#include <string.h>

#include "results_int.h"

results_input_t *results_inputs_of(const results_t *r, size_t *n)
{
    *n = json_array_size(r->inputs);
    results_input_t *in = calloc(*n ? *n : 1, sizeof(*in));
    for (size_t i = 0; in && i < *n; i++) {
        const json_t *e = json_array_get(r->inputs, i);
        const char *start = json_string_value(json_object_get(e, "start"));
        in[i].name = json_string_value(json_object_get(e, "name"));
        in[i].name = in[i].name ? in[i].name : "?";
        in[i].sections = json_object_get(e, "sections");
        if (!start || !results_parse_time(start, &in[i].start_ms))
            in[i].start_ms = 0;
    }
    return in;
}

bool results_input_phase_ms(const results_input_t *in, const char *name, double *ms)
{
    const json_t *list = json_object_get(json_object_get(in->sections, "phases"), "phases"), *p;
    size_t i;
    json_array_foreach(list, i, p)
    {
        const char *n = json_string_value(json_object_get(p, "name"));
        if (!n || strcmp(n, name) || json_number_value(json_object_get(p, "elapsed_s")) <= 0)
            continue;
        *ms = (double)in->start_ms + 1e3 * json_number_value(json_object_get(p, "start_s"));
        return in->start_ms != 0;
    }
    return false;
}

bool results_first_phase_ms(const results_input_t *in, size_t n, const char *name, double *ms)
{
    bool any = false;
    for (size_t i = 0; i < n; i++) {
        double t;
        if (results_input_phase_ms(&in[i], name, &t) && (!any || t < *ms)) {
            *ms = t;
            any = true;
        }
    }
    return any;
}
