/* The runner's private state, shared by its files: runner.c (lifecycle, phases, signals),
 * issue.c (one request from template to completion), series.c (per-second rows and the live
 * line), health.c (generator limits and brakes), summary.c (the closing table). */
#ifndef SQUALL_RUN_INT_H
#define SQUALL_RUN_INT_H

#include <stdio.h>
#include <uv.h>

#include "squall/engine.h"
#include "squall/hist.h"
#include "squall/results.h"
#include "squall/rng.h"
#include "squall/run.h"
#include "squall/sched.h"
#include "squall/tmpl.h"

enum run_state {
    RUN_IDLE,     /* not started */
    RUN_ACTIVE,   /* a phase is issuing starts */
    RUN_DRAINING, /* no new starts; in-flight requests finish */
    RUN_DONE,     /* everything finished; handles are being closed */
};

/* Why the run ended; decides the exit code. */
enum run_stop { RUN_STOP_NONE, RUN_STOP_SIGNAL, RUN_STOP_BRAKE, RUN_STOP_UNREACHABLE };

/* A request class compiled for the run. */
typedef struct {
    const plan_req_t *pr;
    tmpl_t *path, *body;
    const char **headers; /* "Name: value", owned */
    size_t n_headers;
    uint64_t seq; /* next {{seq}} */
    int64_t timeout_ms;
    bool paginate;  /* list with a token key: follow continuation tokens */
    char *all_name; /* "<class>/all-pages": the whole list as one sample */
} run_class_t;

/* One fleet action: agents sending one class every period. */
typedef struct {
    int cls;
    sched_fleet_t *sched;
} run_fleet_send_t;

/* A phase's schedules, kept until the run ends (closed-loop completions arrive late). */
typedef struct {
    const plan_phase_t *pp;
    int64_t base_ns; /* uv_hrtime() at the phase's t = 0 */
    int64_t duration_ns;
    sched_open_cfg_t open_cfg;
    sched_open_t *open; /* open loop, or NULL */
    sched_mix_t *mix;   /* for open loop and closed loop */
    int *mix_cls;       /* mix index -> class index */
    sched_closed_t *closed;
    run_fleet_send_t *fleet;
    size_t n_fleet;
    sched_step_t *steps;
    uint64_t started;
    int64_t counted_to; /* expected starts are counted into the live line up to here */
} run_phase_t;

/* A request in flight (or a multi-page list); taken from a free list. */
typedef struct run_req {
    struct runner *r;
    int phase, cls;
    int client;                /* closed-loop client, else -1 */
    int64_t first_intended_ns; /* of page 1, for the whole-list sample */
    int pages;
    int64_t bytes_in, bytes_out; /* over all pages */
    char *base_path;             /* paginated lists: page 1's path, for the following pages */
    struct run_req *next_free;
} run_req_t;

/* Per-class figures of the current second. */
typedef struct {
    int64_t started, completed, errors;
    hist_t *response;
} run_sec_t;

struct runner {
    const plan_t *plan;
    const run_opts_t *opts;
    out_t *o;
    uv_loop_t loop;
    uv_timer_t tick, second;
    uv_signal_t sigint, sigterm;
    eng_t *eng;
    results_t *res;
    tmpl_env_t *env;
    rng_t rng;
    uint64_t seed;
    enum run_state state;
    enum run_stop stop;
    char stop_reason[256];
    int signals;

    run_class_t *classes;
    size_t n_classes;
    run_phase_t *phases;
    size_t n_phases, cur;   /* cur: the phase issuing starts */
    results_cell_t **cells; /* [phase][2 * class][outcome], created on first use */

    tmpl_buf_t path_buf, body_buf;
    run_req_t *free_reqs;
    void **req_chunks;
    size_t n_req_chunks;
    int in_flight; /* requests handed to the engine, not yet done */
    int64_t drain_deadline_ns;

    int64_t run_start_ns, run_start_unix_ms, run_end_ns;
    int64_t planned_ns; /* sum of phase durations */

    /* The current second (series.c) and run totals. */
    run_sec_t *sec;        /* one per class */
    hist_t *sec_all;       /* every class's response times this second */
    hist_t *sched_lag;     /* submitted - intended, the whole run (the generator's own lag) */
    hist_t *sec_sched_lag; /* the same, this second */
    int64_t sec_index;     /* seconds since run start */
    int64_t sec_started, sec_errors, sec_completed;
    double sec_target; /* expected starts this second, from the schedules */
    FILE *series;
    int64_t total_started, total_completed, total_errors;

    /* Health (health.c). */
    int64_t limited_seconds;
    int64_t max_queue_wait_ns, max_loop_busy_ns;
    int max_queued;
    double max_busy_fraction;
    bool limited_now;
    char limited_why[160];
    struct run_health *health; /* the brakes (health.c) */
    int64_t last_response_ns;  /* last HTTP answer of any kind */
    int64_t busy_since_ns;     /* when in_flight last went from 0 to 1 */

    /* watch: the current phase's watch streams (watches.c). */
    struct run_watches *watches;
    struct run_storm *storm; /* fleet phases' storm reporting (storm.c) */

    /* judge: objectives and report.html (verdict.c). */
    struct run_verdict *verdict;

    /* life: pools, journal, churn and teardown (lifecycle.c). */
    struct run_life *life;
};

typedef struct runner runner_t;

/* issue.c */
int run_issue(runner_t *r, int phase, int cls, int64_t intended_ns, int agent, int client);
int run_classes_init(runner_t *r);
void run_classes_close(runner_t *r);
void run_reqs_close(runner_t *r);
bool run_is_error(enum eng_outcome oc);
/* Percent-encodes s for a query string (RFC 3986 unreserved characters kept) into dst; returns
 * the length, or 0 when cap is too small. */
size_t run_url_escape(const char *s, char *dst, size_t cap);

/* series.c */
int run_series_open(runner_t *r, const char *dir);
void run_series_close(runner_t *r);
/* DIR/storms.csv from the results' "storms" section (one row per fleet tick); nothing without
 * fleets. SQ_EIO with a line on r->o. */
int run_storms_csv(runner_t *r, const char *dir);
/* Closes the current second: a series row per class, the live line, health and brakes. The
 * final, partial second at the end of a run gets its rows but no live line. */
void run_second(runner_t *r, bool final);
void run_sec_record(runner_t *r, int cls, const eng_result_t *res);

/* health.c */
int run_health_init(runner_t *r);
void run_health_close(runner_t *r);
/* Called once a second with the engine's window; may set r->stop (brake). */
void run_health_second(runner_t *r, const eng_stats_t *st, int64_t lag_p99_ns);
json_t *run_health_json(const runner_t *r);
/* The phase's expected starts in [t0, t1) (relative ns), from its schedules. */
double run_phase_expected(const run_phase_t *ph, int64_t t0, int64_t t1);

/* summary.c */
void run_summary(runner_t *r, const char *dir);

/* judge: verdict.c. After the loop ends and before results are written: run_verdict_judge
 * adds the "objectives" and "phases" sections to r->res; run_verdict_failed says whether an
 * objective failed (exit 1). After writing: run_verdict_report writes DIR/report.html. */
int run_verdict_judge(runner_t *r);
bool run_verdict_failed(const runner_t *r);
void run_verdict_print(runner_t *r);
int run_verdict_report(runner_t *r, const char *dir);
void run_verdict_close(runner_t *r);
/* health.c, for judge: the brakes in force, {"shared_target": bool, "brakes": [{kind, source
 * ("plan" or "default"), class, for_s, ...the limit}]}, a new reference. */
json_t *run_health_brakes_json(const runner_t *r);

/* life: lifecycle.c. Pools of the objects that creating classes made (201 answers), served to
 * templates by the `pick` resolver; the journal (DIR/journal.ndjson) of every create and
 * delete; churn phases; and the teardown after the last phase. run_life_init (from
 * run_classes_init, before any template is compiled), run_life_start (opens the journal once
 * the results directory exists), per request run_life_skip (before rendering: true when a
 * {{pick}} pool is empty, so nothing is sent), run_life_sending (a create's write-ahead journal
 * line), run_life_done (every answer), run_life_churn_due (every wake-up), run_life_second
 * (flushes the journal), run_life_teardown (after the loop ends, before results are written;
 * runs its own engine on r->loop) and run_life_close. */
int run_life_init(runner_t *r);
int run_life_start(runner_t *r, const char *dir);
bool run_life_skip(runner_t *r, int cls);
void run_life_sending(runner_t *r, int cls, const char *path);
void run_life_done(runner_t *r, const run_req_t *q, const eng_result_t *res);
int run_life_churn_due(runner_t *r, int64_t now_ns);
void run_life_second(runner_t *r);
void run_life_teardown(runner_t *r, const char *token);
void run_life_close(runner_t *r);

/* watch: watches.c. A phase's watch streams run on their own engine (one connection per stream
 * over HTTP/1.1, multiplexed over HTTP/2) so they never take the main engine's slots; they open
 * at once or spread, live for the phase, and close at its end. run_watches_init (before any
 * traffic; raises RLIMIT_NOFILE and refuses a plan the limit stops; keeps `token`), then per
 * phase run_watches_start (from phase_start), run_watches_tick (every wake-up: opens and
 * reconnects that are due), run_watches_stop (at the phase's end and in finish: writes the
 * "watches" section), and run_watches_close (teardown). All are no-ops without watches. */
/* watch: storm.c. For fleet phases: run_storm_start (from phase_start, after the fleet's
 * schedules exist), run_storm_done (every recorded completion, any class), run_storm_finish
 * (once every request has finished: the "storms" section), run_storm_close (teardown). */
int run_storm_start(runner_t *r, size_t phase);
void run_storm_done(runner_t *r, int phase, int cls, int64_t intended, const eng_result_t *res);
void run_storm_finish(runner_t *r);
void run_storm_close(runner_t *r);
int run_watches_init(runner_t *r, const char *token);
int run_watches_start(runner_t *r, size_t phase);
void run_watches_tick(runner_t *r, int64_t now_ns);
void run_watches_stop(runner_t *r);
void run_watches_close(runner_t *r);

/* life: lifecycle.c. Pools of the objects that creating classes made (201 answers), served to
 * templates by the `pick` resolver; the journal (DIR/journal.ndjson) of every create and
 * delete; churn phases; and the teardown after the last phase. run_life_init (from
 * run_classes_init, before any template is compiled), run_life_start (opens the journal once
 * the results directory exists), per request run_life_skip (before rendering: true when a
 * {{pick}} pool is empty, so nothing is sent), run_life_sending (a create's write-ahead journal
 * line), run_life_done (every answer), run_life_churn_due (every wake-up), run_life_second
 * (flushes the journal), run_life_teardown (after the loop ends, before results are written;
 * runs its own engine on r->loop) and run_life_close. */
int run_life_init(runner_t *r);
int run_life_start(runner_t *r, const char *dir);
bool run_life_skip(runner_t *r, int cls);
void run_life_sending(runner_t *r, int cls, const char *path);
void run_life_done(runner_t *r, const run_req_t *q, const eng_result_t *res);
int run_life_churn_due(runner_t *r, int64_t now_ns);
void run_life_second(runner_t *r);
void run_life_teardown(runner_t *r, const char *token);
void run_life_close(runner_t *r);

/* runner.c */
/* Issues every closed-loop start of the current phase that is due at now_ns. */
int run_closed_due(runner_t *r, int64_t now_ns);
void run_request_stop(runner_t *r, enum run_stop why, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

#endif
