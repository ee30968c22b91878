/* Merging results (shards of one run, or runs to pool): histograms add, counters add, and the
 * merged meta lists every input. Contract in include/squall/results.h. */
#include <string.h>

#include "results_int.h"
#include "squall/err.h"

static bool is_fresh(const results_t *r)
{
    return r->ncells == 0 && json_array_size(r->inputs) == 0 &&
           json_object_size(r->sections) == 0 && r->meta.start_unix_ms == 0;
}

/* The input entry describing src: its meta plus its name and sections. */
static json_t *input_entry(const results_t *src, const char *name)
{
    json_t *e = results_meta_json(src);
    if (!e)
        return NULL;
    if (json_object_set_new(e, "name", json_string(name ? name : "")) ||
        json_object_set_new(e, "sections", json_deep_copy(src->sections))) {
        json_decref(e);
        return NULL;
    }
    return e;
}

static int add_inputs(results_t *dst, const results_t *src, const char *name)
{
    if (json_array_size(src->inputs) == 0)
        return json_array_append_new(dst->inputs, input_entry(src, name)) ? SQ_ENOMEM : 0;
    json_t *copy = json_deep_copy(src->inputs);
    int rc = copy && json_array_extend(dst->inputs, copy) == 0 ? 0 : SQ_ENOMEM;
    json_decref(copy);
    return rc;
}

static int merge_cells(results_t *dst, const results_t *src)
{
    for (size_t i = 0; i < src->ncells; i++) {
        const results_cell_t *s = src->cells[i];
        results_cell_t *d = results_cell(dst, s->phase, s->class_name, s->outcome);
        if (!d)
            return SQ_ENOMEM;
        d->counters.count += s->counters.count;
        d->counters.bytes_in += s->counters.bytes_in;
        d->counters.bytes_out += s->counters.bytes_out;
        for (size_t k = 0; k < RESULTS_STATUS_MAX; k++)
            results_status_add(&d->counters, s->counters.status[k].code, s->counters.status[k].n);
        d->counters.status_other += s->counters.status_other;
        for (int m = 0; m < RESULTS_M__COUNT; m++) {
            if (!s->hists[m])
                continue;
            hist_t *h = results_cell_hist(d, m);
            if (!h)
                return SQ_ENOMEM;
            int rc = hist_merge(h, s->hists[m]);
            if (rc != 0)
                return rc;
        }
    }
    return 0;
}

/* The first input's meta is adopted; later ones widen the time span and raise the flags. */
static int merge_meta(results_t *dst, const results_t *src, bool first, out_t *o, const char *name)
{
    results_meta_t *d = &dst->meta;
    const results_meta_t *s = &src->meta;
    int64_t d_end = d->start_unix_ms * 1000000 + d->duration_ns;
    int64_t s_end = s->start_unix_ms * 1000000 + s->duration_ns;
    if (first || (s->start_unix_ms && s->start_unix_ms < d->start_unix_ms))
        d->start_unix_ms = s->start_unix_ms;
    int64_t end = first || s_end > d_end ? s_end : d_end;
    d->duration_ns = end - d->start_unix_ms * 1000000;
    d->shard_index = d->shard_count = 0;
    d->interrupted |= s->interrupted;
    if (!first && (s->plan_sha256 == NULL) != (d->plan_sha256 == NULL))
        out_warn(o, "%s: comes from another plan than the inputs before it", name);
    else if (!first && s->plan_sha256 && strcmp(s->plan_sha256, d->plan_sha256) != 0)
        out_warn(o, "%s: comes from another plan (sha256 %.12s..., first input %.12s...)", name,
                 s->plan_sha256, d->plan_sha256);
    if (first && (results_meta_str(&d->plan_path, s->plan_path) ||
                  results_meta_str(&d->plan_sha256, s->plan_sha256) ||
                  results_meta_str(&d->target_url, s->target_url)))
        return SQ_ENOMEM;
    if (!d->stop_reason && s->stop_reason)
        return results_meta_str(&d->stop_reason, s->stop_reason);
    return 0;
}

/* The first merge adopts src's sections; later merges keep only those equal in both. */
static int merge_sections(results_t *dst, const results_t *src, bool first)
{
    if (first) {
        json_t *copy = json_deep_copy(src->sections);
        if (!copy)
            return SQ_ENOMEM;
        json_decref(dst->sections);
        dst->sections = copy;
        return 0;
    }
    const char *key;
    json_t *v;
    void *tmp;
    json_object_foreach_safe(dst->sections, tmp, key, v)
    {
        if (!json_equal(v, json_object_get(src->sections, key)))
            json_object_del(dst->sections, key);
    }
    return 0;
}

int results_merge(results_t *dst, const results_t *src, const char *name, out_t *o)
{
    bool first = json_array_size(dst->inputs) == 0;
    if (first && !is_fresh(dst))
        return SQ_EINVAL;
    if (dst->lowest != src->lowest || dst->highest != src->highest || dst->digits != src->digits) {
        out_error(o,
                  "%s: histograms (lowest %lld, highest %lld, %d digits) differ from the "
                  "inputs before it (lowest %lld, highest %lld, %d digits); refusing to merge",
                  name, (long long)src->lowest, (long long)src->highest, src->digits,
                  (long long)dst->lowest, (long long)dst->highest, dst->digits);
        return SQ_EMISMATCH;
    }
    int rc = merge_cells(dst, src);
    if (rc == 0)
        rc = merge_sections(dst, src, first);
    if (rc == 0)
        rc = merge_meta(dst, src, first, o, name);
    if (rc == 0)
        rc = add_inputs(dst, src, name);
    if (rc == SQ_ERANGE)
        out_error(o, "%s: a histogram bucket would exceed 4294967295 samples", name);
    return rc;
}
