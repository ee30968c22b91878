/* Internals of the observer list: each observer's ops, and the rule for a generator-bound
 * second that the list applies and the brakes read. */
#ifndef SQUALL_OBS_INT_H
#define SQUALL_OBS_INT_H

#include "squall/observe.h"

/* Each observer: built from the list's config (new may be NULL-free: it always exists). */
typedef struct {
    const obs_ops_t *ops;
    int (*new)(const obs_cfg_t *cfg, void **self);
} obs_entry_t;

extern const obs_entry_t obs_ledger_entry, obs_storm_entry, obs_brakes_entry, obs_series_entry,
    obs_live_entry, obs_export_entry;

/* export.c: a watch stream's change, for squall's own metrics (self NULL: not exporting). */
void obs_export_watch(void *self, size_t phase, int cls, enum obs_watch_ev ev);

/* The brakes in force (brakes.c), for obs_brakes_json. */
json_t *obs_brakes_section(const void *brakes);

/* health.c: could squall offer the planned load, second by second. */
typedef struct {
    int64_t second;        /* its index */
    bool loading;          /* the plan's phases were sending (only then does it count) */
    int64_t lag_p90_ns;    /* schedule lag p90 of the second */
    int64_t svc_sum_ns, svc_n; /* service times of the second's completions */
    double planned_per_s;  /* the sources' plan (NAN: none, e.g. a closed loop) */
    double completed_per_s;
} obs_health_in_t;

typedef struct {
    int64_t seconds;
    char why[240]; /* the last reason */
    int64_t *list; /* which seconds (at most 10,000 kept) */
    size_t n, cap;
} obs_bound_list_t;

typedef struct {
    obs_bound_list_t generator, connections;
    int64_t max_queue_wait_ns, max_loop_busy_ns;
    int max_queued, max_in_flight;
    double max_busy_fraction;
    int64_t late_seconds; /* the run's first seconds (0..late_seconds - 1), counted bound by
                             obs_health_late */
} obs_health_t;

enum obs_bound obs_health_second(obs_health_t *h, const eng_stats_t *st, const obs_health_in_t *in,
                                 char *why, size_t cap);
void obs_health_close(obs_health_t *h);
/* The run's first `seconds` (0..seconds - 1) are generator-bound: it began late (--start-at). The
 * seconds' own judgement does not count them again. */
void obs_health_late(obs_health_t *h, int64_t seconds, const char *why);
json_t *obs_health_json(const obs_health_t *h);
/* Which seconds, as "4, 5, 9" (", ..." when more than fit or were kept). */
void obs_bound_seconds(const obs_bound_list_t *b, char *buf, size_t cap);

/* gauge.c: the synchronisation gauge of every fleet action, owned by the list. */
typedef struct obs_gauge obs_gauge_t;
int obs_gauge_new(const plan_t *plan, obs_gauge_t **out);
void obs_gauge_free(obs_gauge_t *g);
void obs_gauge_phase(obs_gauge_t *g, size_t phase, int64_t base_ns);
void obs_gauge_done(obs_gauge_t *g, const obs_done_t *d);
/* Closes the windows ended by now_ns; the actions' last closed windows (*n of them). */
const obs_sync_t *obs_gauge_second(obs_gauge_t *g, int64_t now_ns, size_t *n);
/* The run ended at end_ns (windows it cut are partial). */
void obs_gauge_end(obs_gauge_t *g, int64_t end_ns);
/* The "sync" section (a new reference), NULL with *rc = 0 when no fleet phase ran. */
json_t *obs_gauge_json(const obs_gauge_t *g, int *rc);

/* storm.c: the tick of a fleet action an intended start belongs to (-1: before the first).
 * Aligned and jittered ticks are windows centred on base + offset + k * period (a jittered agent
 * fires on either side of it); spread ticks are the periods. offset: for aligned ticks the
 * phase's sched_align_offset, else 0. */
int64_t obs_tick_of(enum plan_timing timing, int64_t base, int64_t offset, int64_t period,
                    int64_t intended);

/* The name series, live line and cells use for a phase and a class (teardown included). */
const char *obs_phase_name(const plan_t *p, size_t phase);
const char *obs_class_name(const plan_t *p, int cls);
/* A paginated list class's whole-list twin, "<class>/all-pages", written into buf. */
const char *obs_whole_name(const char *cls, char *buf, size_t cap);

/* The configuration the list was built from (summary.c reads its plan, results and output). */
const obs_cfg_t *obs_cfg(const obs_t *l);

#endif
