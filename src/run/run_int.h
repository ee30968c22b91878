/* The conductor's private state, shared by its files: run.c (the phase sequence, signals,
 * shutdown order), prepare.c (what is checked and built before anything is sent) and
 * finish.c (results, verdict, report; the terminal summary is the observers' obs_summary). */
#ifndef SQUALL_RUN_INT_H
#define SQUALL_RUN_INT_H

#include <uv.h>

#include "squall/act.h"
#include "squall/engine.h"
#include "squall/judge.h"
#include "squall/observe.h"
#include "squall/results.h"
#include "squall/run.h"
#include "squall/scrape.h"
#include "squall/source.h"

#define RUN_MAX_SOURCES 8 /* sources one phase may use: one of each kind */

enum run_state {
    RUN_IDLE,     /* not started */
    RUN_LOADING,  /* the plan's phases are sending */
    RUN_DRAINING, /* no new starts; requests in flight finish */
    RUN_TEARDOWN, /* deleting what the run created */
    RUN_ENDING,   /* the run-end collects are fetched; then everything finishes */
    RUN_DONE,     /* everything finished; handles are closing */
};

/* A phase as it runs: the plan's, or the teardown the run adds after them. */
typedef struct {
    const char *name;
    int64_t duration_ns; /* 0: open-ended (ends when its sources are idle) */
    bool teardown;       /* a teardown phase: starts once everything before it drained */
    src_t src[RUN_MAX_SOURCES];
    size_t n_src;
    bool started;
    bool ready;                    /* its sources were built and started ahead of base_ns */
    int ready_rc;                  /* ... and what that returned */
    int64_t base_ns, realtime0_ns; /* its t = 0 */
    int64_t ended_ns;              /* when it stopped starting requests; 0 while it runs */
    int64_t planned_to_ns;         /* its planned starts are counted up to here */
} run_phase_t;

/* wake.c: a wake-up at a nanosecond instant of the monotonic clock (a timerfd on the loop). */
typedef struct {
    uv_poll_t poll;
    int fd;
    bool started;
    int64_t armed_ns; /* the expiry set, INT64_MAX when none */
    bool future;      /* it was in the future when set */
    int64_t late_avg_ns, late_dev_ns; /* smoothed wake-up latency and its deviation */
    void (*cb)(void *data);
    void *data;
} run_wake_t;

int run_wake_init(uv_loop_t *loop, run_wake_t *w, void (*cb)(void *data), void *data);
/* Arms the wake-up for the instant at_ns (clock_mono_ns()); one in the past fires at once. */
void run_wake_at(run_wake_t *w, int64_t at_ns);
void run_wake_stop(run_wake_t *w);
/* How early to arm for an instant: the smoothed wake-up latency plus four deviations, within
 * 10..RUN_WAKE_EARLY_MAX_NS µs; the caller spins the rest (run_wake_spin). */
#define RUN_WAKE_EARLY_MAX_NS INT64_C(100000)
int64_t run_wake_early(const run_wake_t *w);
/* Spins (a pause instruction per turn) until clock_mono_ns() reaches at_ns; returns the clock. */
int64_t run_wake_spin(int64_t at_ns);
void run_wake_close(run_wake_t *w);

typedef struct run {
    const plan_t *plan;
    const run_opts_t *opts;
    out_t *o;
    uint64_t seed;
    sched_shard_t shard; /* run_shard(opts) */
    uint64_t shard_seed; /* sched_shard_seed(seed, shard) */
    char dir[4096];

    void (*on_brake)(void *run, int kind, const char *why); /* set before run_prepare; NULL to check */
    src_target_t target;
    obs_t *obs;
    src_issuer_t *issuer;
    results_t *res;
    eng_t *eng;
    scrape_t *scrape; /* the target's metrics (observe.metrics), NULL without */
    act_t *act;       /* actions and collects, NULL without */

    uv_loop_t loop;
    run_wake_t wake;
    uv_timer_t second;
    uv_prepare_t prepare; /* before every poll: rearm the wake-up, notice the end of draining */
    uv_signal_t sigint, sigterm;
    int64_t wake_at_ns;  /* the instant the wake-up is armed for (INT64_MAX: not armed) */
    int64_t wake_floor_ns; /* no wake-up before this: a source was due but did not move on */

    enum run_state state;
    enum run_end end;
    char why[256];
    int signals;

    run_phase_t *phases;
    size_t n_phases, cur; /* plan phases, plus the added teardown when there is one */
    int64_t start_ns, end_ns, drain_deadline_ns, sec_start_ns;
    int64_t load_end_ns; /* when the plan's phases stopped sending (0 while they send) */
    int64_t start_at_mono; /* --start-at on the monotonic clock while waiting for it; 0 none */
    int64_t late_ns;       /* how late the run began after --start-at (< 0: early) */
    int64_t build_ns;      /* what building the first phase's sources took (validation) */
    eng_clock_t clock;     /* the main engine's clock offset against the target, kept at its end */
} run_t;

/* run.c: stops the run (the first reason is kept): no new starts, requests in flight get the
 * grace time, then the teardown. */
void run_stop(run_t *r, enum run_end why, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* prepare.c */
int run_prepare(run_t *r);
int run_phases_init(run_t *r);
void run_close(run_t *r);
/* The context a phase's sources are built with. */
src_ctx_t run_src_ctx(const run_t *r, size_t phase);

/* finish.c: after the loop ended: fills res (outcome, write_failed). Returns write_failed. */
bool run_finish(run_t *r, run_result_t *res);

#endif
