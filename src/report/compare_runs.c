/* What differs between the two runs compared, besides the target's behaviour: another plan,
 * another target, other --set overrides, an older series.csv. One warning line each. */
#include <string.h>

#include "compare_int.h"

/* The overrides a run recorded (sections.run.overrides), or NULL when it recorded none: an
 * older squall, unknown. */
static json_t *overrides(const results_t *r)
{
    json_t *ov = json_object_get(results_section(r, "run"), "overrides");
    return json_is_array(ov) ? ov : NULL;
}

static size_t count_of(const json_t *list, const char *s)
{
    size_t i, n = 0;
    json_t *v;
    json_array_foreach(list, i, v) n += json_is_string(v) && !strcmp(json_string_value(v), s);
    return n;
}

/* The same overrides in any order (each KEY=VALUE as often in both). */
static bool same_overrides(const json_t *a, const json_t *b)
{
    if (json_array_size(a) != json_array_size(b))
        return false;
    size_t i;
    json_t *v;
    json_array_foreach(a, i, v)
    {
        const char *s = json_string_value(v);
        if (!s || count_of(a, s) != count_of(b, s))
            return false;
    }
    return true;
}

/* "A=1 B=2" (cut short with "..." past the buffer), or "none". */
static void list_text(const json_t *list, char *buf, size_t cap)
{
    size_t i, at = 0;
    json_t *v;
    snprintf(buf, cap, "none");
    json_array_foreach(list, i, v)
    {
        const char *s = json_string_value(v);
        int w = snprintf(buf + at, cap - at, "%s%s", i ? " " : "", s ? s : "?");
        if (w < 0 || (size_t)w >= cap - at) {
            snprintf(buf + (cap > 4 ? cap - 4 : 0), cap > 4 ? 4 : cap, "...");
            return;
        }
        at += (size_t)w;
    }
}

static bool differ(const char *a, const char *b)
{
    return a && b && strcmp(a, b) != 0;
}

int report_cmp_warn(const report_cmp_t *c, const results_t *base, const results_t *nw, out_t *o)
{
    const results_meta_t *mb = results_meta(base), *mn = results_meta(nw);
    int n = 0;
    if (differ(mb->plan_sha256, mn->plan_sha256) && ++n)
        out_warn(o,
                 "BASE and NEW ran different plans (sha256 %.12s... in BASE, %.12s... in NEW): "
                 "a difference may come from the plan, not the target",
                 mb->plan_sha256, mn->plan_sha256);
    if (differ(mb->target_url, mn->target_url) && ++n)
        out_warn(o, "BASE and NEW ran against different targets (%s in BASE, %s in NEW)",
                 mb->target_url, mn->target_url);
    json_t *ob = overrides(base), *on = overrides(nw);
    if (ob && on && !same_overrides(ob, on) && ++n) {
        char tb[512], tn[512];
        list_text(ob, tb, sizeof tb);
        list_text(on, tn, sizeof tn);
        out_warn(o, "BASE and NEW ran with different overrides (BASE: %s; NEW: %s)", tb, tn);
    }
    for (int k = 0; k < 2; k++)
        if (c->lacks_p999[k] && ++n)
            out_warn(o,
                     "%s's series.csv has no p999_ms column (an older squall wrote it): p99.9 "
                     "per second is tested on the per-second max instead",
                     k ? "NEW" : "BASE");
    return n;
}
