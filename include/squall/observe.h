/* Observers: everything that watches a run's completions and seconds, behind one list.
 *
 * Concepts. The *list* (obs_t) is the run's one recorder. Sources report to it through three
 * calls: obs_sent (a request is about to go to the engine), obs_done (a request finished; it
 * is recorded into its results cell by results_record, then every observer sees it), and
 * obs_answered (the target answered something that is not a finished request, e.g. a watch's
 * first byte). Once a second the conductor calls obs_second: the list closes the *window* (the
 * second's figures: starts, completions, errors and response times per phase x class, the
 * main engine's peaks, the generator's own health) and hands it to every observer in order.
 * Observers are registered once and know nothing of each other; each is one entry of ops,
 * NULL where a step does not apply:
 *   ledger   the objects this run created (pools behind {{pick}}, the journal): ledger.c
 *   storm    per tick of every fleet action: dispatch spread, burst, latency: storm.c
 * Beside them the list keeps, like the generator's health (health.c), the synchronisation
 * gauge of every fleet action (gauge.c): its last closed window reaches the observers in each
 * second (obs_second_t.sync) and its windows become results.json's "sync" section.
 *   brakes   generator health totals and the brakes, which may stop the run: brakes.c
 *   series   series.csv, one row per phase x class x second: series.c
 *   live     the live line on stderr: live.c
 * Glossary: "phase" is a plan phase index, or n_phases for the teardown the run adds after
 * its last phase when the plan has none; "class" is a plan class index, or OBS_TEARDOWN for a
 * teardown's deletes; "whole" is a multi-page list counted once with its pages summed.
 * Threading: none; everything runs on the run's loop. */
#ifndef SQUALL_OBSERVE_H
#define SQUALL_OBSERVE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/engine.h"
#include "squall/hist.h"
#include "squall/out.h"
#include "squall/plan.h"
#include "squall/results.h"
#include "squall/sync.h"
#include "squall/tmpl.h"

#define OBS_TEARDOWN (-1) /* the class of a teardown's deletes */

typedef struct obs obs_t;

/* A request handed to an engine (obs_sent). */
typedef struct {
    size_t phase;
    int cls;
    const char *path; /* the rendered path without a query: the object of a write */
    bool page;        /* a following page of a list (not a new start) */
} obs_sent_t;

/* A finished request (obs_done). */
typedef struct {
    size_t phase;
    int cls;
    bool whole;          /* the whole of a multi-page list: intended = page 1's, bytes summed */
    bool first;          /* a single request or the first page (schedule lag counts) */
    int agent;           /* fleet agent, closed-loop client, else -1 */
    const char *source;  /* the source that sent it ("fleet", "open", ...; src_ops_t.name) or
                            NULL */
    const char *path;    /* writes and lists: the object path (rendered, no query), else NULL */
    int64_t intended_ns; /* this sample's intended start */
    int64_t bytes_in, bytes_out; /* the whole list's when whole, else the result's */
    const eng_result_t *res;
} obs_done_t;

/* A second in which squall could not offer the planned load: generator-bound when squall itself
 * fell behind (the target's figures for it are not evidence); connection-bound when every
 * connection was busy because the target answered slowly (a fair verdict on the target: more
 * connections would offer more load). */
enum obs_bound { OBS_BOUND_NONE, OBS_BOUND_GENERATOR, OBS_BOUND_CONNECTIONS };

/* Per phase x class figures of one second. */
typedef struct {
    size_t phase;
    int cls;
    double planned; /* starts its sources planned in the second */
    int64_t started, completed, errors;
    hist_t *response; /* response times of the completions */
} obs_cell_t;

/* Watch streams in the second the list just closed, over every watch class. */
typedef struct {
    int64_t open;                                /* streams open at the end of the second */
    int64_t opened, dropped, reconnects, events; /* in the second */
    const hist_t *propagation;                   /* of the second's stamped events */
} obs_watch_second_t;

/* The synchronisation gauge of one fleet action (gauge.c) as a second sees it. */
typedef struct {
    size_t phase;
    int cls;
    int64_t period_ns;
    bool closed;        /* a window of it has closed (else `last` is empty) */
    sync_window_t last; /* the last closed window (start_ns on the monotonic clock) */
} obs_sync_t;

/* The second the list just closed: what every observer's second() reads. */
typedef struct {
    int64_t index; /* seconds since the run's start: 0, 1, ... */
    int64_t start_ns, end_ns;
    double secs;    /* end - start in seconds (the last one is partial) */
    bool final;     /* the run's last, partial second */
    bool loading;   /* the plan's phases sent during this second (not only drain or teardown) */
    size_t phase;   /* the phase current at the end of the second */
    double planned; /* starts the sources planned for the second (NAN: no plan, e.g. closed
                       loop without think time) */
    int64_t started, completed, errors; /* every class */
    const hist_t *response;             /* every class */
    const hist_t *sched_lag;            /* submitted - intended of first pages */
    const hist_t *send_lag;             /* sent (on the wire) - intended of first pages */
    const obs_cell_t *cells;            /* phase x class with a start or completion */
    size_t n_cells;
    const obs_cell_t *per_class;           /* per class over every phase: [n_classes]; response
                                              times only of a class a plan brake names */
    const eng_stats_t *eng;                /* the main engine's window (peaks of the second) */
    int in_flight;                         /* requests of the run not finished at the end */
    int64_t busy_since_ns, last_answer_ns; /* in_flight last went 0 -> 1; the last answer */
    int64_t unanswered_since_ns; /* the first request that ended without an HTTP answer
                                    (refused, reset, timeout, ...) since the last answer; 0 */
    const char *marks;       /* instants marked in the second (obs_mark), ';'-separated */
    const char *brake_fired; /* the brake that stopped the run ("" while none has); the text
                                fills during the brakes observer's own second() */
    const obs_watch_second_t *watch; /* NULL while no watch stream has opened in the run */
    int64_t teardown_total;          /* objects the teardown set out to delete (0: none yet) */
    const obs_sync_t *sync; /* every fleet action that has started, in plan order */
    size_t n_sync;
    enum obs_bound bound;  /* could squall offer the planned load (health.c) */
    const char *bound_why; /* when bound: why, e.g. "schedule lag p99 12.3 ms" */
} obs_second_t;

typedef struct obs_ops {
    const char *name;
    /* A phase starts: its index, its t = 0 (uv_hrtime ns) and the wall clock then. */
    /* The run is about to send: open its files in the results directory. */
    int (*open)(void *self, const char *dir);
    void (*phase)(void *self, size_t phase, int64_t base_ns, int64_t realtime0_ns);
    void (*sent)(void *self, const obs_sent_t *s);
    void (*done)(void *self, const obs_done_t *d);
    void (*second)(void *self, const obs_second_t *s);
    /* The run has ended and every request finished: attach sections, write files into dir.
     * Returns 0 or SQ_EIO / SQ_ENOMEM (reported on the list's out_t). */
    int (*finish)(void *self, results_t *res, const char *dir);
    void (*free)(void *self);
} obs_ops_t;

/* What the list's observers are built from. */
typedef struct {
    const plan_t *plan;
    results_t *res; /* cells are recorded here */
    out_t *o;
    bool quiet;     /* no live line */
    bool no_brakes; /* drop the default brakes */
    /* squall's own metrics served at metrics_host:metrics_port while the run goes (export.c);
     * NULL: none. The server listens from obs_open on (a check never listens). */
    const char *metrics_host;
    int metrics_port;
    /* A brake fired: the conductor stops the run (called from obs_second). kind is the brake's
     * enum plan_brake_kind. */
    void (*brake)(void *user, int kind, const char *why);
    void *user;
} obs_cfg_t;

/* The list with every observer above, in that order; it writes no file yet (`check` builds
 * one to validate a plan exactly as a run does). SQ_ENOMEM. */
int obs_new(const obs_cfg_t *cfg, obs_t **out);
/* Opens the observers' files in dir (series.csv, the journal): SQ_EIO (reported). */
int obs_open(obs_t *l, const char *dir);
void obs_free(obs_t *l);

void obs_phase(obs_t *l, size_t phase, int64_t base_ns, int64_t realtime0_ns);
void obs_sent(obs_t *l, const obs_sent_t *s);
void obs_done(obs_t *l, const obs_done_t *d);
void obs_answered(obs_t *l, int64_t at_ns);
/* A watch stream's change, for squall's own metrics. */
enum obs_watch_ev { OBS_WATCH_OPENED, OBS_WATCH_ENDED, OBS_WATCH_DROPPED, OBS_WATCH_RECONNECT };
void obs_watch(obs_t *l, size_t phase, int cls, enum obs_watch_ev ev);
/* A watch event arrived; propagation_ns is its stamp's age (negative: not stamped). */
void obs_watch_event(obs_t *l, int64_t propagation_ns);
/* The teardown starts: n objects to delete (the live line's progress). */
void obs_teardown_total(obs_t *l, int64_t n);
/* Marks an instant of the open second (an action or a collect fired): series.csv's `marks`. */
void obs_mark(obs_t *l, const char *name);
/* The results cell of (phase, class, outcome) for figures that are not finished requests
 * (a watch's events, open and propagation times); NULL when out of memory. */
results_cell_t *obs_cell(obs_t *l, size_t phase, int cls, const char *outcome);
/* Sets section[key] = value in the results (the section is created when missing); steals
 * value. SQ_ENOMEM, SQ_EINVAL. */
int obs_section_put(obs_t *l, const char *section, const char *key, json_t *value);
/* Adds a phase's planned starts in the open second: per class (plan->n_reqs + 1 entries, the
 * last for teardown deletes) and their total (NAN when a source plans no count). */
void obs_planned(obs_t *l, size_t phase, const double *per_class, double total);
/* Closes the second [start of window, now): stats is the main engine's window (reset by the
 * caller), loading and phase as in obs_second_t, final for the run's last. */
void obs_second(obs_t *l, const eng_stats_t *stats, bool loading, size_t phase, bool final);
/* Every observer's finish, in order; the first error is returned, all are called. */
int obs_finish(obs_t *l, const char *dir);

/* Requests handed to an engine and not finished. */
int obs_in_flight(const obs_t *l);
/* Run totals for the summary and the verdict. */
typedef struct {
    int64_t started, completed, errors;
    int64_t generator_bound_s, connection_bound_s; /* while the plan's phases were sending */
    const char *generator_why, *connection_why;    /* the last reasons */
    char generator_seconds[160];                   /* which, e.g. "4, 5, 9" */
    char connection_seconds[160];
    const hist_t *sched_lag; /* the whole run's */
    const hist_t *send_lag;  /* the whole run's: sent (on the wire) - intended */
    int64_t first_sent_real_ns; /* wall clock when the first request went to an engine; 0 none */
} obs_totals_t;
void obs_totals(const obs_t *l, obs_totals_t *t);

/* The summary printed on the terminal at a run's end (summary.c): the request and watch tables
 * per phase and class, the totals, the seconds squall could not offer the load, the objects kept
 * on purpose, the objectives and the verdict. The conductor supplies what only it knows. */
struct judge;
typedef struct {
    const int64_t *elapsed_ns;   /* per plan phase: how long it ran (0: never started) */
    const struct judge *judged;  /* the objectives judged (judge.h); NULL when judging failed */
    const char *verdict;         /* "PASS", "FAIL" or "INCONCLUSIVE" */
    const json_t *reasons;       /* why, when not a plain pass (strings) */
    const json_t *accepted;      /* reasons the plan accepted (strings) */
    int64_t run_ns;              /* the run's start to its end */
    const char *stopped_why;     /* NULL when the run went to its planned end */
    const char *dir;             /* the results directory */
} obs_summary_t;
void obs_summary(obs_t *l, const obs_summary_t *s);
/* The run began late_ns after its start instant (--start-at): its first seconds (late_ns rounded
 * up to whole seconds) count as generator-bound, for `why`. */
void obs_late_start(obs_t *l, int64_t late_ns, const char *why);
/* The brakes in force as the "brakes" section of results.json (a new reference):
 * {"shared_target": bool, "brakes": [{kind, source, class, for_s, ...the limit}]}. */
json_t *obs_brakes_json(const obs_t *l);

/* DIR/storms.csv from a "storms" section (the storm observer's, or a merge's): one row per
 * fleet tick; tick_s counts from the start of its phase. SQ_EIO with a line on o. */
int obs_storms_csv(json_t *storms, const char *dir, out_t *o);

/* Whether an outcome counts as an error: anything but 2xx, 3xx and cancelled. */
bool obs_is_error(enum eng_outcome oc);

/* ---- the ledger: objects this run created ------------------------------------------------- */

/* Pools of the objects creating classes made (201 answers) and of what list classes
 * discovered, served to templates by the `pick` resolver; the journal (DIR/journal.ndjson)
 * of every create and delete. Only 201 makes an object "ours"; creates that got a 5xx, a
 * timeout or were cancelled may exist and are "uncertain": a teardown deletes them too. */
typedef struct ledger ledger_t;

ledger_t *obs_ledger(obs_t *l);
/* Registers `pick` in env and checks every {{pick...}} of the plan's templates, reporting a
 * mistake at its plan position. Called before templates compile. SQ_EINVAL, SQ_ENOMEM. */
int ledger_prepare(ledger_t *g, tmpl_env_t *env);
/* Before rendering a request of cls: false when a pool it picks from lacks objects (nothing
 * is sent; counted as skipped). */
bool ledger_ready(ledger_t *g, int cls);
/* Objects of a creating class alive now, including its creates in flight. */
int64_t ledger_alive(const ledger_t *g, int cls);
/* Every object this run may have created (pools, deletes in flight, uncertain creates):
 * paths[i] and the class index of each (-1 when unknown); both owned by the ledger and valid
 * until ledger_deleted or the ledger is freed. */
size_t ledger_gather(ledger_t *g, const char ***paths, const int **cls);
/* A teardown delete of path ended with fate (JOURNAL_DONE/GONE: journaled as deleted). */
void ledger_torn(ledger_t *g, const char *path, int cls, bool gone);
/* Whether the run may have something to tear down: some class writes (any write answered 201
 * Created made an object of the run's, whatever its class says). */
bool ledger_creates(const ledger_t *g);
/* Objects of class cls left on the target because the class keeps them (`keep:`). */
size_t ledger_kept(const ledger_t *g, int cls);
/* The journal's path. */
const char *ledger_journal(const ledger_t *g);
/* The teardown's outcome, for the "lifecycle" section (json: a new reference, or NULL). */
void ledger_teardown_json(ledger_t *g, json_t *teardown);
/* A churn phase's band: the population seen once it was first reached (min, max), and the one
 * the plan asked for: pop objects (this shard's share) within ±tolerance (a fraction). */
void ledger_churn_band(ledger_t *g, size_t phase, bool reached, int64_t min, int64_t max,
                       int64_t pop, double tolerance);

#endif
