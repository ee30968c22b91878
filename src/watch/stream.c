/* A watch stream's lifecycle: one setter for its state, the resume point, and the decision of
 * what to do when a stream or its relist ends (reconnect after a delay, relist, or stop). */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/value.h"
#include "squall/watch.h"

static const char *const state_names[WATCH__STATES] = {
    [WATCH_IDLE] = "idle",           [WATCH_OPENING] = "opening", [WATCH_OPEN] = "open",
    [WATCH_RELISTING] = "relisting", [WATCH_WAITING] = "waiting", [WATCH_CLOSED] = "closed",
};

const char *watch_state_name(enum watch_state st)
{
    return st >= 0 && st < WATCH__STATES ? state_names[st] : "unknown";
}

void watch_stream_init(watch_stream_t *s, const watch_stream_cfg_t *cfg)
{
    memset(s, 0, sizeof(*s));
    s->state = WATCH_IDLE;
    watch_backoff_init(&s->backoff, cfg->policy, cfg->base_ns, cfg->cap_ns);
    s->too_old_status = cfg->too_old_status;
    s->can_relist = cfg->can_relist;
}

void watch_stream_set(watch_stream_t *s, enum watch_state to)
{
    enum watch_state from = s->state;
    if (from == to || from == WATCH_CLOSED)
        return; /* closed is final: late completions never revive a stream */
    s->state = to;
    if (to == WATCH_OPENING)
        s->opens++;
    if (s->on_state)
        s->on_state(s->user, from, to);
}

/* A version is the target's text that goes back to it in a query or a header: visible ASCII
 * only (a CR or LF would start a header line of the target's choosing). */
static bool version_ok(const char *v)
{
    return value_token_ok(v, strlen(v), WATCH_VERSION_MAX);
}

bool watch_stream_event(watch_stream_t *s, const watch_fields_t *f)
{
    if (!f->has_version)
        return false;
    if (!version_ok(f->version)) {
        s->bad_versions++;
        return false;
    }
    if (f->version_numeric && s->version_numeric && s->has_version &&
        f->version_num <= s->version_num) {
        s->duplicates++;
        return true;
    }
    s->has_version = true;
    s->version_numeric = f->version_numeric;
    s->version_num = f->version_num;
    snprintf(s->version, sizeof(s->version), "%s", f->version);
    return false;
}

void watch_stream_relisted(watch_stream_t *s, const char *version)
{
    s->has_version = version && version[0] && version_ok(version);
    s->bad_versions += version && version[0] && !s->has_version;
    snprintf(s->version, sizeof(s->version), "%s", s->has_version ? version : "");
    char *end = NULL;
    unsigned long long n = s->has_version ? strtoull(s->version, &end, 10) : 0;
    s->version_numeric = s->has_version && end && *end == '\0';
    s->version_num = s->version_numeric ? (uint64_t)n : 0;
    s->relists++;
}

/* A relist that failed is retried after the backoff delay; one that worked opens at once. */
static enum watch_action relist_ended(watch_stream_t *s, const watch_end_t *end, rng_t *rng,
                                      int64_t *delay_ns)
{
    if (end->status >= 200 && end->status < 300) {
        *delay_ns = 0;
        watch_stream_set(s, WATCH_WAITING);
        return WATCH_DO_RECONNECT;
    }
    *delay_ns = watch_backoff_next(&s->backoff, rng);
    watch_stream_set(s, WATCH_WAITING);
    return WATCH_DO_RELIST;
}

enum watch_action watch_stream_ended(watch_stream_t *s, const watch_end_t *end, rng_t *rng,
                                     int64_t *delay_ns)
{
    *delay_ns = 0;
    if (s->state == WATCH_CLOSED)
        return WATCH_DO_NOTHING;
    if (s->state == WATCH_RELISTING)
        return relist_ended(s, end, rng, delay_ns);
    if (end->status == s->too_old_status && s->too_old_status > 0) {
        s->too_old++;
        s->has_version = false;
        s->version_numeric = false;
        if (s->can_relist) {
            watch_stream_set(s, WATCH_RELISTING);
            return WATCH_DO_RELIST;
        }
        *delay_ns = watch_backoff_next(&s->backoff, rng);
        watch_stream_set(s, WATCH_WAITING);
        return WATCH_DO_FRESH;
    }
    /* A stream that delivered and then broke was healthy: its backoff starts again. */
    if (end->got_events)
        watch_backoff_reset(&s->backoff);
    if (end->got_events || (end->status >= 200 && end->status < 300))
        s->drops++; /* it was open: the server or the network ended it */
    s->reconnects++;
    *delay_ns = watch_backoff_next(&s->backoff, rng);
    watch_stream_set(s, WATCH_WAITING);
    return WATCH_DO_RECONNECT;
}
