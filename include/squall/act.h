/* Things a run does at planned moments beside its load: a phase's `actions` (an HTTP request
 * sent, or a program run, at an offset into the phase) and the plan's `observe.collect` (a URL
 * fetched into the results directory at the run's or a phase's start or end).
 *
 * Concepts. Every action and every collect is an *item*. The conductor tells this module
 * when the run and each phase start and end (act_moment); items due at that moment fire at
 * once, and a phase's actions are armed on timers at the phase's t = 0 plus their `at`. An
 * item fires once. An HTTP item goes through an engine of its own (one connection; the
 * target's settings when its URL is the target's origin or a path on it, plain ones
 * otherwise), its answer saved under DIR/actions/ (actions, up to ACT_MAX_SAVED bytes) or
 * DIR/collected/ (collects, up to their `max`; a longer answer is cut and says so). A program
 * runs without a shell (libuv's uv_spawn), its stdin empty, its stdout and stderr in
 * DIR/actions/NAME.out, the environment squall's plus SQUALL_TARGET and SQUALL_PHASE; when
 * its timeout passes it is killed by pid (SIGKILL). An action of a phase that ends before
 * its `at` does not fire and is recorded as such. Nothing an item does stops the run or
 * changes its verdict; every item is a marked instant (the `mark` callback, results.json's
 * "actions" section, the report's time plots).
 *
 * Threading: none; everything runs on the run's loop. */
#ifndef SQUALL_ACT_H
#define SQUALL_ACT_H

#include <jansson.h>
#include <stdbool.h>
#include <stdint.h>
#include <uv.h>

#include "squall/engine.h"
#include "squall/out.h"
#include "squall/plan.h"

#define ACT_MAX_SAVED (1024 * 1024) /* bytes of an action's answer kept */

typedef struct act act_t;

typedef struct {
    uv_loop_t *loop;
    const plan_t *plan;
    const eng_config_t *target; /* the plan target's engine settings */
    const char *dir;            /* the results directory */
    out_t *o;
    /* An item fired (name as in results.json): the series observer marks the second. */
    void (*mark)(void *user, const char *name);
    void *user;
} act_cfg_t;

/* The moments the conductor reports. */
enum act_moment { ACT_RUN_START, ACT_PHASE_START, ACT_PHASE_END, ACT_RUN_END };

/* Builds every item of the plan (none: *out = NULL, returns 0). Exec actions must have been
 * allowed by the caller (run_check refuses them otherwise). SQ_ENOMEM, SQ_EIO (a directory
 * under dir), SQ_ELIBCURL/SQ_ELIBUV (reported on o). */
int act_new(const act_cfg_t *cfg, act_t **out);
/* A moment of the run: phase is the plan phase's index (ignored for the run's moments);
 * base_ns its t = 0 (uv_hrtime base) for ACT_PHASE_START. NULL is allowed. */
void act_moment(act_t *a, enum act_moment m, size_t phase, int64_t base_ns);
/* Whether an item is still running (the conductor waits for run-end collects). */
bool act_busy(const act_t *a);
/* Stops everything: programs still running are killed, requests cancelled, handles closed
 * (the caller runs the loop afterwards). NULL is allowed. */
void act_stop(act_t *a);
/* The "actions" section of results.json (a new reference), NULL for NULL. */
json_t *act_section(const act_t *a);
void act_free(act_t *a);

#endif
