/* The observer list: records every completion into its results cell and the open second,
 * fans completions and seconds out to the observers, and judges each second's generator
 * health (is squall itself keeping its schedule). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/clock.h"
#include "squall/err.h"

static const obs_entry_t *const entries[] = {
    &obs_ledger_entry, &obs_storm_entry, &obs_brakes_entry,
    &obs_series_entry, &obs_live_entry,  &obs_export_entry,
};
#define N_ENTRIES (sizeof entries / sizeof entries[0])
#define BRAKES    2 /* entries[BRAKES] */
#define EXPORT    5 /* entries[EXPORT] */

struct obs {
    obs_cfg_t cfg;
    size_t n_phases, n_classes; /* phases + 1 (teardown), classes + 1 (teardown deletes) */
    void *self[N_ENTRIES];
    results_cell_t **cells; /* [phase][2 * class + whole][outcome], created on first use */

    /* The open second. */
    int64_t sec_index, sec_start_ns;
    int64_t first_sent_real_ns; /* the first request handed to an engine, wall clock */
    double planned;
    bool unplanned;        /* a source of the second plans no count */
    obs_cell_t *wcells;    /* [phase][class] */
    obs_cell_t *per_class; /* [class] */
    obs_cell_t *active;    /* the second's wcells with figures, copied out at its end */
    size_t n_active;
    hist_t *all, *sec_lag, *sec_send;
    int64_t started, completed, errors;

    /* The run. */
    hist_t *sched_lag;
    hist_t *send_lag; /* sent - intended of first pages that were sent */
    int64_t total_started, total_completed, total_errors;
    int in_flight;
    int64_t busy_since_ns, last_answer_ns, unanswered_since_ns;
    obs_health_t health;
    obs_gauge_t *gauge;
    int64_t svc_sum_ns, svc_n; /* the open second's service times */
    char marks[512];           /* the open second's marked instants, ';'-separated */
    char brake_why[256];       /* the brake that fired, "" until one does */
    obs_watch_second_t watch;  /* open is a gauge; the rest counts the open second */
    hist_t *sec_propagation;
    bool watched; /* a watch stream has opened */
    int64_t teardown_total;
};

bool obs_is_error(enum eng_outcome oc)
{
    return oc != ENG_OUT_S2XX && oc != ENG_OUT_S3XX && oc != ENG_OUT_CANCELLED;
}

/* Class index -> slot: the teardown's deletes take the last one. */
static size_t cls_slot(const obs_t *l, int cls)
{
    return cls < 0 ? l->n_classes - 1 : (size_t)cls;
}

static int window_init(obs_t *l)
{
    size_t n = l->n_phases * l->n_classes;
    l->wcells = calloc(n, sizeof(*l->wcells));
    l->active = calloc(n, sizeof(*l->active));
    l->per_class = calloc(l->n_classes, sizeof(*l->per_class));
    if (!l->wcells || !l->active || !l->per_class)
        return SQ_ENOMEM;
    for (size_t i = 0; i < n; i++) {
        l->wcells[i].phase = i / l->n_classes;
        l->wcells[i].cls = (int)(i % l->n_classes) == (int)l->n_classes - 1
                               ? OBS_TEARDOWN
                               : (int)(i % l->n_classes);
    }
    for (size_t c = 0; c < l->n_classes; c++)
        l->per_class[c].cls = c + 1 == l->n_classes ? OBS_TEARDOWN : (int)c;
    /* A class's response times over every phase serve only a brake on that class. */
    const plan_t *p = l->cfg.plan;
    for (size_t b = 0; b < p->n_brakes; b++) {
        obs_cell_t *k = p->brakes[b].cls.index >= 0 ? &l->per_class[p->brakes[b].cls.index] : NULL;
        if (k && !k->response && hist_new_ns(&k->response))
            return SQ_ENOMEM;
    }
    if (hist_new_ns(&l->all) || hist_new_ns(&l->sec_lag) || hist_new_ns(&l->sched_lag) ||
        hist_new_ns(&l->sec_send) || hist_new_ns(&l->send_lag))
        return SQ_ENOMEM;
    return 0;
}

static void list_brake(void *user, int kind, const char *why)
{
    obs_t *l = user;
    snprintf(l->brake_why, sizeof l->brake_why, "%s", why);
    l->cfg.brake(l->cfg.user, kind, why);
}

int obs_new(const obs_cfg_t *cfg, obs_t **out)
{
    *out = NULL;
    obs_t *l = calloc(1, sizeof(*l));
    if (!l)
        return SQ_ENOMEM;
    l->cfg = *cfg;
    l->n_phases = cfg->plan->n_phases + 1;
    l->n_classes = cfg->plan->n_reqs + 1;
    l->cells = calloc(l->n_phases * 2 * l->n_classes * ENG_OUT_COUNT, sizeof(*l->cells));
    int rc = l->cells ? window_init(l) : SQ_ENOMEM;
    rc = rc ? rc : obs_gauge_new(cfg->plan, &l->gauge);
    obs_cfg_t inner = *cfg; /* a brake that fires is seen by the list, then the conductor */
    inner.brake = cfg->brake ? list_brake : NULL;
    inner.user = l;
    for (size_t i = 0; rc == 0 && i < N_ENTRIES; i++)
        rc = entries[i]->new (&inner, &l->self[i]);
    if (rc) {
        obs_free(l);
        return rc;
    }
    *out = l;
    return 0;
}

void obs_free(obs_t *l)
{
    if (!l)
        return;
    for (size_t i = 0; i < N_ENTRIES; i++)
        if (l->self[i])
            entries[i]->ops->free(l->self[i]);
    for (size_t i = 0; l->wcells && i < l->n_phases * l->n_classes; i++)
        hist_free(l->wcells[i].response);
    for (size_t c = 0; l->per_class && c < l->n_classes; c++)
        hist_free(l->per_class[c].response);
    free(l->wcells);
    free(l->active);
    free(l->per_class);
    free(l->cells);
    hist_free(l->all);
    hist_free(l->sec_lag);
    hist_free(l->sched_lag);
    hist_free(l->sec_send);
    hist_free(l->send_lag);
    hist_free(l->sec_propagation);
    obs_health_close(&l->health);
    obs_gauge_free(l->gauge);
    free(l);
}

int obs_open(obs_t *l, const char *dir)
{
    for (size_t i = 0; i < N_ENTRIES; i++) {
        int rc = entries[i]->ops->open ? entries[i]->ops->open(l->self[i], dir) : 0;
        if (rc)
            return rc;
    }
    return 0;
}

const obs_cfg_t *obs_cfg(const obs_t *l)
{
    return &l->cfg;
}

ledger_t *obs_ledger(obs_t *l)
{
    return l->self[0];
}

json_t *obs_brakes_json(const obs_t *l)
{
    return obs_brakes_section(l->self[BRAKES]);
}

void obs_phase(obs_t *l, size_t phase, int64_t base_ns, int64_t realtime0_ns)
{
    obs_gauge_phase(l->gauge, phase, base_ns);
    for (size_t i = 0; i < N_ENTRIES; i++)
        if (entries[i]->ops->phase)
            entries[i]->ops->phase(l->self[i], phase, base_ns, realtime0_ns);
}

static obs_cell_t *wcell(obs_t *l, size_t phase, int cls)
{
    return &l->wcells[phase * l->n_classes + cls_slot(l, cls)];
}

void obs_sent(obs_t *l, const obs_sent_t *s)
{
    if (l->in_flight++ == 0)
        l->busy_since_ns = clock_mono_ns();
    if (!l->first_sent_real_ns)
        l->first_sent_real_ns = clock_real_ns();
    if (!s->page) {
        wcell(l, s->phase, s->cls)->started++;
        l->per_class[cls_slot(l, s->cls)].started++;
        l->started++;
        l->total_started++;
    }
    for (size_t i = 0; i < N_ENTRIES; i++)
        if (entries[i]->ops->sent)
            entries[i]->ops->sent(l->self[i], s);
}

void obs_watch(obs_t *l, size_t phase, int cls, enum obs_watch_ev ev)
{
    obs_export_watch(l->self[EXPORT], phase, cls, ev);
    obs_watch_second_t *w = &l->watch;
    if (ev == OBS_WATCH_OPENED) {
        l->watched = true;
        w->open++;
        w->opened++;
    } else if (ev == OBS_WATCH_ENDED && w->open > 0) {
        w->open--;
    } else if (ev == OBS_WATCH_DROPPED) {
        w->dropped++;
    } else if (ev == OBS_WATCH_RECONNECT) {
        w->reconnects++;
    }
}

void obs_watch_event(obs_t *l, int64_t propagation_ns)
{
    l->watch.events++;
    if (propagation_ns >= 0 && (l->sec_propagation || !hist_new_ns(&l->sec_propagation)))
        hist_record(l->sec_propagation, propagation_ns);
}

void obs_teardown_total(obs_t *l, int64_t n)
{
    l->teardown_total = n;
}

void obs_mark(obs_t *l, const char *name)
{
    size_t used = strlen(l->marks);
    /* A name that does not fit is left out of series.csv; results.json has every instant. */
    if (used + strlen(name) + 2 < sizeof l->marks)
        snprintf(l->marks + used, sizeof l->marks - used, "%s%s", used ? ";" : "", name);
}

void obs_answered(obs_t *l, int64_t at_ns)
{
    if (at_ns > l->last_answer_ns)
        l->last_answer_ns = at_ns;
    l->unanswered_since_ns = 0;
}

/* The results cell of (phase, class or its whole-list twin, outcome), looked up once. The
 * teardown the run adds itself records no cells: objectives judge the plan's phases. */
static results_cell_t *cell_for(obs_t *l, const obs_done_t *d)
{
    const plan_t *p = l->cfg.plan;
    if (d->phase >= p->n_phases)
        return NULL;
    size_t slot = ((d->phase * l->n_classes + cls_slot(l, d->cls)) * 2 + d->whole) * ENG_OUT_COUNT +
                  d->res->outcome;
    if (!l->cells[slot]) {
        char whole[300];
        const char *name = obs_class_name(p, d->cls);
        l->cells[slot] = results_cell(l->cfg.res, obs_phase_name(p, d->phase),
                                      d->whole ? obs_whole_name(name, whole, sizeof whole) : name,
                                      eng_outcome_name(d->res->outcome));
    }
    return l->cells[slot];
}

static void record(obs_t *l, const obs_done_t *d)
{
    const eng_result_t *r = d->res;
    results_sample_t s = {
        .intended_ns = d->intended_ns,
        .done_ns = r->done_ns,
        .bytes_in = d->bytes_in,
        .bytes_out = d->bytes_out,
    };
    if (!d->whole) {
        s.status = r->status > 0 && r->status < 1000 ? (int)r->status : 0;
        s.sent_ns = r->sent_ns;
        s.with_lag = true;
        s.connect_ns = r->connect_us * 1000;
        s.tls_ns = r->appconnect_us > 0 ? (r->appconnect_us - r->connect_us) * 1000 : 0;
        s.first_byte_ns = r->starttransfer_us * 1000;
    }
    results_record(cell_for(l, d), &s);
}

/* The open second's figures of one completion. */
static void tally(obs_t *l, const obs_done_t *d)
{
    const eng_result_t *r = d->res;
    int64_t v = r->done_ns - r->intended_ns;
    bool err = obs_is_error(r->outcome);
    obs_cell_t *c = wcell(l, d->phase, d->cls), *k = &l->per_class[cls_slot(l, d->cls)];
    if (!c->response && hist_new_ns(&c->response))
        return; /* out of memory: this second's row misses it, the results keep it */
    c->completed++;
    k->completed++;
    c->errors += err;
    k->errors += err;
    hist_record(c->response, v);
    if (k->response)
        hist_record(k->response, v);
    hist_record(l->all, v);
    l->completed++;
    l->errors += err;
    l->total_completed++;
    l->total_errors += err;
    if (r->sent_ns && r->done_ns >= r->sent_ns) {
        l->svc_sum_ns += r->done_ns - r->sent_ns;
        l->svc_n++;
    }
    if (d->first && r->submitted_ns) {
        hist_record(l->sched_lag, r->submitted_ns - d->intended_ns);
        hist_record(l->sec_lag, r->submitted_ns - d->intended_ns);
    }
    if (d->first && r->sent_ns) {
        int64_t v = r->sent_ns - d->intended_ns;
        hist_record(l->send_lag, v < 0 ? 0 : v);
        hist_record(l->sec_send, v < 0 ? 0 : v);
    }
}

void obs_done(obs_t *l, const obs_done_t *d)
{
    record(l, d);
    if (!d->whole) {
        l->in_flight--;
        if (d->res->status > 0)
            obs_answered(l, d->res->done_ns);
        else if (d->res->outcome != ENG_OUT_CANCELLED && !l->unanswered_since_ns)
            l->unanswered_since_ns = d->res->done_ns;
        tally(l, d);
        obs_gauge_done(l->gauge, d);
    }
    for (size_t i = 0; i < N_ENTRIES; i++)
        if (entries[i]->ops->done)
            entries[i]->ops->done(l->self[i], d);
}

results_cell_t *obs_cell(obs_t *l, size_t phase, int cls, const char *outcome)
{
    return results_cell(l->cfg.res, obs_phase_name(l->cfg.plan, phase),
                        obs_class_name(l->cfg.plan, cls), outcome);
}

int obs_section_put(obs_t *l, const char *section, const char *key, json_t *value)
{
    json_t *s = results_section(l->cfg.res, section);
    s = s ? json_deep_copy(s) : json_object();
    if (!s || json_object_set_new(s, key, value)) {
        json_decref(s);
        return SQ_ENOMEM;
    }
    return results_set_section(l->cfg.res, section, s);
}

void obs_planned(obs_t *l, size_t phase, const double *per_class, double total)
{
    if (isnan(total))
        l->unplanned = true;
    else
        l->planned += total;
    for (size_t c = 0; c < l->n_classes; c++) {
        int cls = c + 1 == l->n_classes ? OBS_TEARDOWN : (int)c;
        wcell(l, phase, cls)->planned += per_class[c];
    }
}

int obs_in_flight(const obs_t *l)
{
    return l->in_flight;
}

/* The second's cells with figures, in (phase, class) order. */
static void collect(obs_t *l)
{
    l->n_active = 0;
    for (size_t i = 0; i < l->n_phases * l->n_classes; i++)
        if (l->wcells[i].started || l->wcells[i].completed || l->wcells[i].planned > 0)
            l->active[l->n_active++] = l->wcells[i];
}

static void window_reset(obs_t *l, int64_t now)
{
    for (size_t i = 0; i < l->n_phases * l->n_classes; i++) {
        obs_cell_t *c = &l->wcells[i];
        c->started = c->completed = c->errors = 0;
        c->planned = 0;
        if (c->response)
            hist_reset(c->response);
    }
    for (size_t c = 0; c < l->n_classes; c++) {
        obs_cell_t *k = &l->per_class[c];
        k->started = k->completed = k->errors = 0;
        if (k->response)
            hist_reset(k->response);
    }
    hist_reset(l->all);
    hist_reset(l->sec_lag);
    hist_reset(l->sec_send);
    l->started = l->completed = l->errors = 0;
    l->watch.opened = l->watch.dropped = l->watch.reconnects = l->watch.events = 0;
    if (l->sec_propagation)
        hist_reset(l->sec_propagation);
    l->svc_sum_ns = l->svc_n = 0;
    l->planned = 0;
    l->unplanned = false;
    l->sec_index++;
    l->sec_start_ns = now;
}

void obs_second(obs_t *l, const eng_stats_t *st, bool loading, size_t phase, bool final)
{
    int64_t now = clock_mono_ns();
    if (!l->sec_start_ns)
        l->sec_start_ns = now - st->window_ns;
    char why[240] = "";
    collect(l);
    obs_second_t s = {
        .index = l->sec_index,
        .start_ns = l->sec_start_ns,
        .end_ns = now,
        .secs = st->window_ns > 0 ? (double)st->window_ns / 1e9 : 1.0,
        .final = final,
        .loading = loading,
        .phase = phase,
        .planned = l->unplanned ? NAN : l->planned,
        .started = l->started,
        .completed = l->completed,
        .errors = l->errors,
        .response = l->all,
        .sched_lag = l->sec_lag,
        .send_lag = l->sec_send,
        .cells = l->active,
        .n_cells = l->n_active,
        .per_class = l->per_class,
        .eng = st,
        .in_flight = l->in_flight,
        .busy_since_ns = l->busy_since_ns,
        .last_answer_ns = l->last_answer_ns,
        .unanswered_since_ns = l->unanswered_since_ns,
        .bound_why = why,
        .marks = l->marks,
        .brake_fired = l->brake_why,
        .watch = l->watched ? &l->watch : NULL,
        .teardown_total = l->teardown_total,
    };
    l->watch.propagation = l->sec_propagation;
    if (final)
        obs_gauge_end(l->gauge, now);
    s.sync = obs_gauge_second(l->gauge, now, &s.n_sync);
    obs_health_in_t in = {
        .second = l->sec_index,
        .loading = loading,
        .lag_p90_ns = hist_value_at(l->sec_lag, 90),
        .svc_sum_ns = l->svc_sum_ns,
        .svc_n = l->svc_n,
        .planned_per_s = l->unplanned ? NAN : l->planned / s.secs,
        .completed_per_s = (double)l->completed / s.secs,
    };
    s.bound = obs_health_second(&l->health, st, &in, why, sizeof why);
    for (size_t i = 0; i < N_ENTRIES; i++)
        if (entries[i]->ops->second)
            entries[i]->ops->second(l->self[i], &s);
    window_reset(l, now);
    l->marks[0] = '\0';
}

static json_t *generator_json(const obs_t *l)
{
    json_t *g = obs_health_json(&l->health);
    json_object_set_new(g, "schedule_lag_p50_ms",
                        json_real((double)hist_value_at(l->sched_lag, 50) / 1e6));
    json_object_set_new(g, "schedule_lag_p99_ms",
                        json_real((double)hist_value_at(l->sched_lag, 99) / 1e6));
    json_object_set_new(g, "schedule_lag_max_ms", json_real((double)hist_max(l->sched_lag) / 1e6));
    json_object_set_new(g, "send_lag_p50_ms",
                        json_real((double)hist_value_at(l->send_lag, 50) / 1e6));
    json_object_set_new(g, "send_lag_p99_ms",
                        json_real((double)hist_value_at(l->send_lag, 99) / 1e6));
    json_object_set_new(g, "send_lag_max_ms", json_real((double)hist_max(l->send_lag) / 1e6));
    json_object_set_new(g, "started", json_integer(l->total_started));
    json_object_set_new(g, "completed", json_integer(l->total_completed));
    json_object_set_new(g, "errors", json_integer(l->total_errors));
    bool closed = false;
    for (size_t i = 0; i < l->cfg.plan->n_phases; i++)
        closed |= l->cfg.plan->phases[i].clients.on;
    json_object_set_new(g, "closed_loop", json_boolean(closed));
    return g;
}

int obs_finish(obs_t *l, const char *dir)
{
    int rc = results_set_section(l->cfg.res, "generator", generator_json(l));
    int grc;
    json_t *sync = obs_gauge_json(l->gauge, &grc);
    if (sync && results_set_section(l->cfg.res, "sync", sync))
        grc = SQ_ENOMEM;
    rc = rc ? rc : grc;
    for (size_t i = 0; i < N_ENTRIES; i++) {
        if (!entries[i]->ops->finish)
            continue;
        int e = entries[i]->ops->finish(l->self[i], l->cfg.res, dir);
        rc = rc ? rc : e;
    }
    return rc;
}

void obs_totals(const obs_t *l, obs_totals_t *t)
{
    *t = (obs_totals_t){
        .started = l->total_started,
        .completed = l->total_completed,
        .errors = l->total_errors,
        .generator_bound_s = l->health.generator.seconds,
        .connection_bound_s = l->health.connections.seconds,
        .generator_why = l->health.generator.why,
        .connection_why = l->health.connections.why,
        .sched_lag = l->sched_lag,
        .send_lag = l->send_lag,
        .first_sent_real_ns = l->first_sent_real_ns,
    };
    obs_bound_seconds(&l->health.generator, t->generator_seconds, sizeof t->generator_seconds);
    obs_bound_seconds(&l->health.connections, t->connection_seconds, sizeof t->connection_seconds);
}

void obs_late_start(obs_t *l, int64_t late_ns, const char *why)
{
    obs_health_late(&l->health, (late_ns + INT64_C(999999999)) / INT64_C(1000000000), why);
}
