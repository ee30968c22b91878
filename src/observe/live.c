/* The live line: once a second on stderr, in fixed-width columns (the phase name padded to the
 * plan's longest, so nothing shifts when the phase changes): the time, what the phase's traffic
 * did (rate against the plan; in a fleet phase the tick we are in, what the last tick did and the
 * synchronisation gauge R̄ of the last closed window of its first action; in a teardown its
 * progress), the second's completions and latencies ("–" when nothing completed),
 * errors this second and in all, the peaks of the second in flight and queued, send lag, then
 * watch streams when the run has any, and why squall could not offer the load when it could not.
 */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/sched.h"
#include "squall/value.h"

#define DASH "\xe2\x80\x93" /* "–", one column wide */

/* The newest tick with completions of the last fleet phase's first action. Its answers may
 * arrive after the phase ended: they are still told once, beside the next phase's traffic. */
typedef struct {
    bool on; /* a fleet phase has started */
    size_t phase;
    int cls;
    enum plan_timing timing;
    int64_t base, offset, period, n_ticks;
    int64_t k;     /* -1 before the first */
    int64_t shown; /* the newest tick a line told */
    int64_t done, first_sent, last_sent;
    hist_t *response;
} live_tick_t;

typedef struct {
    const plan_t *plan;
    out_t *o;
    bool quiet;
    int64_t run_start_ns;
    double planned_s;       /* the plan's phases together, seconds */
    int name_w;             /* the longest phase name */
    int64_t errors;         /* in all */
    int64_t deleted;        /* teardown deletes answered */
    int64_t deleted_before; /* ... by the end of the second before */
    int64_t phase_base_ns;  /* the current phase's t = 0 */
    live_tick_t tick;
} live_t;

static void live_free(void *self)
{
    live_t *v = self;
    if (v)
        hist_free(v->tick.response);
    free(v);
}

static int live_new(const obs_cfg_t *cfg, void **self)
{
    live_t *v = calloc(1, sizeof(*v));
    if (!v)
        return SQ_ENOMEM;
    *self = v;
    v->plan = cfg->plan;
    v->o = cfg->o;
    v->quiet = cfg->quiet;
    for (size_t i = 0; i <= cfg->plan->n_phases; i++) {
        int w = (int)strlen(obs_phase_name(cfg->plan, i));
        v->name_w = w > v->name_w ? w : v->name_w;
        if (i < cfg->plan->n_phases)
            v->planned_s += (double)cfg->plan->phases[i].duration_ns / 1e9;
    }
    return hist_new_ns(&v->tick.response);
}

static void live_phase(void *self, size_t phase, int64_t base_ns, int64_t realtime0_ns)
{
    live_t *v = self;
    if (phase == 0 || !v->run_start_ns)
        v->run_start_ns = base_ns;
    v->phase_base_ns = base_ns;
    live_tick_t *t = &v->tick;
    const plan_phase_t *pp = phase < v->plan->n_phases ? &v->plan->phases[phase] : NULL;
    if (!pp || !pp->fleet.on || pp->fleet.n_send == 0 || pp->fleet.send[0].every_ns <= 0)
        return;
    t->on = true;
    t->phase = phase;
    t->cls = pp->fleet.send[0].cls.index;
    t->timing = pp->fleet.timing;
    t->period = pp->fleet.send[0].every_ns;
    t->base = base_ns;
    t->offset = t->timing == PLAN_TIMING_ALIGNED ? sched_align_offset(realtime0_ns, t->period) : 0;
    /* Ticks whose instant base + offset + k * period falls inside the phase. */
    t->n_ticks =
        pp->duration_ns > t->offset ? (pp->duration_ns - t->offset - 1) / t->period + 1 : 0;
    t->k = t->shown = -1;
}

static void tick_done(live_tick_t *t, const obs_done_t *d)
{
    int64_t k = obs_tick_of(t->timing, t->base, t->offset, t->period, d->intended_ns);
    if (k < 0 || k < t->k)
        return; /* a late answer of an earlier tick: the line shows the newest */
    if (k > t->k) {
        t->k = k;
        t->done = 0;
        t->first_sent = INT64_MAX;
        t->last_sent = 0;
        hist_reset(t->response);
    }
    t->done++;
    if (d->res->sent_ns) {
        t->first_sent = d->res->sent_ns < t->first_sent ? d->res->sent_ns : t->first_sent;
        t->last_sent = d->res->sent_ns > t->last_sent ? d->res->sent_ns : t->last_sent;
    }
    hist_record(t->response, d->res->done_ns - d->intended_ns);
}

static void live_done(void *self, const obs_done_t *d)
{
    live_t *v = self;
    if (d->whole)
        return;
    if (d->cls == OBS_TEARDOWN && d->res->outcome != ENG_OUT_CANCELLED)
        v->deleted++;
    if (v->tick.on && d->phase == v->tick.phase && d->cls == v->tick.cls)
        tick_done(&v->tick, d);
}

/* A value right-aligned in width columns ("–" for none); UTF-8 continuation bytes take none. */
static const char *col(char *buf, size_t cap, int width, const char *text)
{
    int cols = 0;
    for (const char *p = text; *p; p++)
        cols += ((unsigned char)*p & 0xC0) != 0x80;
    int pad = width > cols ? width - cols : 0;
    snprintf(buf, cap, "%*s%s", pad, "", text);
    return buf;
}

/* A latency in ms for the line with the given decimals ("12.3ms"), or "–" when nothing was
 * measured. */
static const char *ms_col(char *buf, size_t cap, int width, const hist_t *h, double p, int digits)
{
    char text[32] = DASH;
    if (h && hist_count(h))
        snprintf(text, sizeof text, "%.*fms", digits, (double)hist_value_at(h, p) / 1e6);
    return col(buf, cap, width, text);
}

/* A count as text, without thousands separators (DEVELOPERS.md, "Output"). */
static const char *count(int64_t n, char *buf, size_t cap)
{
    snprintf(buf, cap, "%lld", (long long)n);
    return buf;
}

/* A count right-aligned in width columns. */
static const char *count_col(char *buf, size_t cap, int width, int64_t n)
{
    snprintf(buf, cap, "%*lld", width, (long long)n);
    return buf;
}

/* What the newest tick did: "tick 4 of 6: 2000 done, written over 96.0ms, p99 12.3ms". */
static int tick_text(const live_tick_t *t, char *buf, size_t cap)
{
    char a[32], b[32];
    double spread = t->last_sent > t->first_sent ? (double)(t->last_sent - t->first_sent) / 1e6 : 0;
    return snprintf(buf, cap, "tick %lld of %lld: %s done, written over %.1fms, p99 %s",
                    (long long)(t->k + 1), (long long)t->n_ticks, count(t->done, a, sizeof a),
                    spread, ms_col(b, sizeof b, 0, t->response, 99, 1));
}

/* The synchronisation gauge of the phase's first action: "; sync R̄ 0.97" with R̄ of its last
 * closed window (gauge.c), always 4 columns wide ("–" before the first window closes, or when it
 * had no sends). */
static void sync_text(const live_tick_t *t, const obs_second_t *s, char *buf, size_t cap)
{
    char v[16] = DASH, c[32];
    for (size_t k = 0; k < s->n_sync; k++)
        if (s->sync[k].phase == t->phase && s->sync[k].cls == t->cls && s->sync[k].closed) {
            if (s->sync[k].last.gauge.n > 0) /* a window without sends has no R̄ to tell */
                snprintf(v, sizeof v, "%.2f", s->sync[k].last.gauge.r_bar);
            break;
        }
    snprintf(buf, cap, "; sync R\xcc\x84 %s", col(c, sizeof c, 4, v));
}

/* What the phase's traffic did this second. */
static void traffic(live_t *v, const obs_second_t *s, char *buf, size_t cap)
{
    char a[32], b[32], c[32];
    live_tick_t *t = &v->tick;
    bool teardown = s->phase >= v->plan->n_phases || v->plan->phases[s->phase].teardown.on;
    if (teardown && s->teardown_total > 0) {
        double rate = (double)(v->deleted - v->deleted_before) / s->secs;
        int64_t left = s->teardown_total - v->deleted;
        char eta[32] = DASH;
        /* Time left at the teardown's pace so far (its first second is a partial one). */
        double pace = (double)v->deleted / ((double)(s->end_ns - v->phase_base_ns) / 1e9);
        if (left <= 0)
            snprintf(eta, sizeof eta, "0s");
        else if (v->deleted > 0 && s->end_ns > v->phase_base_ns)
            snprintf(eta, sizeof eta, "%.1fs", (double)left / pace);
        snprintf(buf, cap, "deleted %s of %s, %.0f/s, %s left", count(v->deleted, a, sizeof a),
                 count(s->teardown_total, b, sizeof b), rate, eta);
    } else if (t->on && s->phase == t->phase && s->loading) {
        int64_t rel = s->end_ns - t->base - t->offset;
        double next = (double)(t->period - (rel % t->period + t->period) % t->period) / 1e9;
        if (t->k < 0) {
            snprintf(buf, cap, "tick %s of %lld, first in %.1fs", DASH, (long long)t->n_ticks,
                     next);
        } else {
            int n = tick_text(t, buf, cap);
            if (n > 0 && (size_t)n < cap)
                snprintf(buf + n, cap - (size_t)n, "; next in %.1fs", next);
        }
        size_t n = strlen(buf);
        if (n < cap)
            sync_text(t, s, buf + n, cap - n);
        t->shown = t->k;
        return;
    } else {
        char planned[32] = DASH;
        if (!isnan(s->planned))
            snprintf(planned, sizeof planned, "%.0f/s", s->planned / s->secs);
        snprintf(buf, cap, "sent %s/s of %s",
                 count_col(b, sizeof b, 6, (int64_t)llround((double)s->started / s->secs)),
                 col(c, sizeof c, 7, planned));
    }
    /* A tick of the fleet phase that ended, answered since the last line. */
    size_t n = strlen(buf);
    if (t->on && t->k > t->shown && n + 4 < cap) {
        n += (size_t)snprintf(buf + n, cap - n, "; %s ", obs_phase_name(v->plan, t->phase));
        if (n < cap)
            tick_text(t, buf + n, cap - n);
        t->shown = t->k;
    }
}

/* Watch streams, when the run has any: open, dropped and reconnecting this second, events per
 * second and the second's propagation p99. */
static void watches(const obs_second_t *s, char *buf, size_t cap)
{
    const obs_watch_second_t *w = s->watch;
    if (!w || !(w->open || w->opened || w->dropped || w->reconnects || w->events)) {
        buf[0] = '\0';
        return;
    }
    char a[32], b[32], c[32];
    snprintf(buf, cap,
             "  watches %s open, %lld dropped, %lld reconnects, %s events/s, "
             "propagation p99 %s",
             count(w->open, a, sizeof a), (long long)w->dropped, (long long)w->reconnects,
             count((int64_t)llround((double)w->events / s->secs), b, sizeof b),
             ms_col(c, sizeof c, 0, w->propagation, 99, 1));
}

static void line(live_t *v, const obs_second_t *s)
{
    double elapsed = (double)(s->end_ns - v->run_start_ns) / 1e9;
    char limited[300] = "";
    if (s->bound != OBS_BOUND_NONE)
        snprintf(limited, sizeof limited, "  %s: %s",
                 s->bound == OBS_BOUND_GENERATOR ? "GENERATOR-BOUND" : "CONNECTION-BOUND",
                 s->bound_why);
    char when[48]; /* the run's time against the plan's; draining and teardown come after it */
    int when_w = snprintf(NULL, 0, "%6.1fs, after %.0fs", elapsed, v->planned_s);
    snprintf(when, sizeof when, s->loading ? "%6.1fs of %.0fs" : "%6.1fs, after %.0fs", elapsed,
             v->planned_s);
    char what[200], w[300], done[32], p50[32], p99[32], lag[32], err[32], all[32];
    traffic(v, s, what, sizeof what);
    watches(s, w, sizeof w);
    const hist_t *resp = s->completed ? s->response : NULL;
    out_live(v->o,
             "%-*s %-*s | %s | done %s/s p50 %s p99 %s | errors %s/s, %s in all | peak in flight "
             "%5d, queued %5d | send lag p99 %s%s%s",
             v->name_w, obs_phase_name(v->plan, s->phase), when_w, when, what,
             count_col(done, sizeof done, 6, llround((double)s->completed / s->secs)),
             ms_col(p50, sizeof p50, 8, resp, 50, 1), ms_col(p99, sizeof p99, 8, resp, 99, 1),
             count_col(err, sizeof err, 4, s->errors), count_col(all, sizeof all, 0, v->errors),
             s->eng->max_in_flight, s->eng->max_queued,
             ms_col(lag, sizeof lag, 7, s->send_lag, 99, 2), w, limited);
}

static void live_second(void *self, const obs_second_t *s)
{
    live_t *v = self;
    v->errors += s->errors;
    if (!v->quiet && !s->final)
        line(v, s);
    v->deleted_before = v->deleted;
}

static const obs_ops_t ops = {
    .name = "live",
    .phase = live_phase,
    .done = live_done,
    .second = live_second,
    .free = live_free,
};

const obs_entry_t obs_live_entry = {.ops = &ops, .new = live_new};
