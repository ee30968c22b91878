/* Internals of the observer list: each observer's ops, and the rule for a generator-limited
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
    obs_live_entry;

/* The brakes in force (brakes.c), for obs_brakes_json. */
json_t *obs_brakes_section(const void *brakes);

/* The name series, live line and cells use for a phase and a class (teardown included). */
const char *obs_phase_name(const plan_t *p, size_t phase);
const char *obs_class_name(const plan_t *p, int cls);

#endif
