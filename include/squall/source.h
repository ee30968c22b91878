/* Traffic sources: the ways a phase starts requests, each one entry of one table.
 *
 * Concepts. A phase of the plan uses one or more *sources* (open-loop arrivals, closed-loop
 * clients, a fleet of periodic agents, watch streams, churn, teardown). Each is a table of
 * functions (src_ops_t), NULL where a step does not apply, chosen once per phase by its
 * `used_by` and then called without asking what kind it is. A source gets a narrow context
 * (src_ctx_t): the loop, the engine settings made from the plan's target, a function to issue
 * a request through the run's main engine, and the run's recorder (observe.h); never the
 * conductor itself. Its *model* (`expected`) says how many starts it plans in an interval; it
 * is the one answer to that question, used by `check`, the estimate and the live line alike.
 * Times are uv_hrtime() nanoseconds unless a name says "rel" (from the phase's t = 0).
 *
 * The *issuer* (request.c) is what turns a source's wish (class, intended start, agent) into
 * a request on the main engine: templates compiled once, rendered per request, lists followed
 * page by page, every completion recorded through the observers before the source's `done`.
 * Glossary: "class" is a plan class index; "intended" is the schedule's start time, from
 * which response time counts (no coordinated omission). */
#ifndef SQUALL_SOURCE_H
#define SQUALL_SOURCE_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <uv.h>

#include "squall/engine.h"
#include "squall/observe.h"
#include "squall/out.h"
#include "squall/plan.h"
#include "squall/sched.h"
#include "squall/tmpl.h"

typedef struct src_issuer src_issuer_t;
typedef struct src src_t;

/* ---- the plan's target as engine settings ------------------------------------------------- */

/* Everything squall sends to a target is built from these: one function turns the plan's
 * target (URL, HTTP version, connections, streams, headers, TLS, token, timeout) into engine
 * settings, for the main engine, the watch engines, the teardown and `cleanup` alike. */
typedef struct {
    eng_config_t eng;     /* strings point into the plan and into this struct */
    const char **headers; /* "Name: value" of target.headers (owned) */
    char *token;          /* the bearer token read from its file or variable (owned, secret) */
} src_target_t;

/* Fills t from the plan's target; `insecure` adds the command line's --insecure. Reads the
 * token (target.token.file or .env), never printing it. SQ_EINVAL or SQ_EIO with one line on
 * o naming the setting, SQ_ENOMEM. */
int src_target_init(src_target_t *t, const plan_t *plan, bool insecure, out_t *o);
/* Wipes the token and frees what t owns. */
void src_target_close(src_target_t *t);
/* Headers of a plan (target.headers, a class's headers) as "Name: value" lines: *out holds
 * *n_out of them (also on failure, for src_headers_free). SQ_ENOMEM. */
int src_headers_new(const plan_kv_t *kv, size_t n, const char ***out, size_t *n_out);
void src_headers_free(const char **h, size_t n);

/* ---- a request a source wants sent ---------------------------------------------------------- */

typedef struct {
    int cls;
    int64_t intended_ns;
    int agent;  /* {{agent}}: fleet agent, closed-loop client, else 0 */
    int client; /* handed back in done: a closed-loop client, a fleet's after-answer action,
                 * else -1 */
    /* Issued ahead of intended_ns (a storm tick rendered before its instant): rendered, with
     * {{now_ns}} at intended_ns, and handed to the engine now, but held there until src_release
     * at or after intended_ns; only then is it counted as started. One cancelled while held
     * (the run stopped) was never started: its source's done() is not called for it. */
    bool ahead;
} src_req_t;

/* What a source's done() receives for each of its requests (a list once, when its last page
 * ended). */
typedef struct {
    int cls;
    int client;
    int agent;               /* the request's src_req_t.agent */
    const eng_result_t *res; /* of the last page */
} src_done_t;

/* ---- the context a source gets -------------------------------------------------------------- */

typedef struct {
    const plan_t *plan;
    size_t phase;         /* plan phase index (n_phases: the teardown the run adds) */
    const char *name;     /* the phase's name ("teardown" for the added one) */
    int64_t duration_ns;  /* 0 for an open-ended phase (teardown) */
    int64_t base_ns;      /* uv_hrtime() at the phase's t = 0 (0 when only modelling) */
    int64_t realtime0_ns; /* CLOCK_REALTIME at t = 0 (aligned fleets line up on it) */
    uint64_t seed;        /* the run's seed; streams come from sched_seed(seed, phase, k) */
    /* This process's share of the run (`run --shard I/N`; {0, 0} or {1, 1} = all of it) and
     * its own seed (sched_shard_seed): each source sends only its share (see DEVELOPERS.md,
     * "Shards"); what must match the single run (even schedules' mix, fleet phases) draws from
     * `seed`, what is the shard's own (Poisson arrivals, think times, jitter) from shard_seed. */
    sched_shard_t shard;
    uint64_t shard_seed;
    double alive;    /* objects of the run alive when the phase starts (churn's model) */
    bool stopped;    /* the run was stopped early (teardown then has a time limit) */
    bool keep;       /* --keep: the teardown deletes nothing */
    uv_loop_t *loop; /* NULL when only modelling (check, estimates) */
    const src_target_t *target;
    src_issuer_t *issuer; /* the main engine's request path (NULL when modelling) */
    obs_t *obs;           /* the recorder */
    out_t *o;
} src_ctx_t;

/* ---- the table --------------------------------------------------------------------------------
 */

typedef struct src_ops {
    const char *name; /* "open", "closed", "fleet", "watches", "churn", "teardown" */
    /* Whether a phase uses this source. */
    bool (*used_by)(const plan_t *plan, const plan_phase_t *pp);
    /* Builds the source from the plan and validates it: no I/O, no loop (also run by `check`).
     * Problems are reported on ctx->o at their plan position: SQ_EINVAL, SQ_ELIMIT, SQ_ENOMEM.
     * ctx is copied. */
    int (*new)(const src_ctx_t *ctx, void **self);
    /* The phase begins (ctx->loop and ctx->base_ns are set): open what it needs. `me` is what
     * its requests name as their source (src_issue's `from`). */
    int (*start)(void *self, src_t *me);
    /* Its earliest pending intended start (absolute ns); false when none is pending now. */
    bool (*next)(const void *self, int64_t *at_ns);
    /* Issues everything due at now_ns. */
    int (*due)(void *self, int64_t now_ns);
    /* One of its requests finished (after the observers saw it). */
    void (*done)(void *self, const src_done_t *d);
    /* Starts planned in [t0, t1) (rel ns), added per class into per_class (may be NULL; it has
     * plan->n_reqs + 1 entries, the last for a teardown's deletes); returns their sum, or NAN
     * when the source plans no count (closed loop without think time). */
    double (*expected)(const void *self, int64_t t0, int64_t t1, double *per_class);
    /* The phase is over (or the run stops): no more starts; long-lived streams close. */
    void (*stop)(void *self);
    /* True when it has nothing left to send or wait for (ends open-ended phases). */
    bool (*idle)(const void *self);
    /* After the run: attach its sections to the results. */
    int (*finish)(void *self, results_t *res);
    void (*free)(void *self);
} src_ops_t;

/* The table, in the order sources of one phase are started; NULL-terminated. */
extern const src_ops_t *const src_table[];

extern const src_ops_t src_open_ops, src_closed_ops, src_fleet_ops, src_watches_ops, src_churn_ops,
    src_teardown_ops, src_replay_ops;

/* A built source: its ops, its state, its phase. */
struct src {
    const src_ops_t *ops;
    void *self;
    size_t phase;
};

/* Builds every source phase ctx->phase uses into *out (n_out of them, at most as many as the
 * table has). On failure those built are freed. */
int src_phase_new(const src_ctx_t *ctx, src_t *out, size_t *n_out);
/* Open files one process of `shards` needs at most for the plan: the target's connections, its
 * share of the busiest phase's watch streams (one connection each over HTTP/1.1, multiplexed
 * over HTTP/2) and a reserve for the engine; the figure each phase checks against RLIMIT_NOFILE. */
int64_t src_files_needed(const plan_t *p, int shards);
/* Sums `expected` over the given sources; NAN if any plans no count. */
double src_expected(const src_t *s, size_t n, int64_t t0, int64_t t1, double *per_class);

/* ---- the issuer -------------------------------------------------------------------------------
 */

/* A request class compiled for the run. */
typedef struct {
    const plan_req_t *pr;
    tmpl_t *path, *body;
    const char **headers; /* the class's own headers, "Name: value" */
    size_t n_headers;
    uint64_t seq; /* next {{seq}} */
    int64_t timeout_ms;
    bool paginate; /* a list with a continuation token */
} src_class_t;

/* Compiles every class's templates against the plan's vars and the ledger's {{pick}}
 * (reporting mistakes at their plan positions: SQ_EPARSE), SQ_ENOMEM. `seed` seeds the
 * renderer's draws. */
int src_issuer_new(const plan_t *plan, uint64_t seed, obs_t *obs, out_t *o, src_issuer_t **out);
void src_issuer_free(src_issuer_t *is);
/* Deals {{seq}} to a shard: every class's numbers are index - 1, index - 1 + N, ... so shards
 * name their objects in disjoint sets whose union is 0, 1, 2, ... (the whole run: from 0). */
void src_issuer_shard(src_issuer_t *is, sched_shard_t sh);
/* The engine requests go to (set when the run starts). */
void src_issuer_attach(src_issuer_t *is, eng_t *eng);
/* Renders and submits one request for `from`; its done() is called when it finished. Returns
 * 0 (also when a {{pick}} pool is empty and nothing is sent), or a template or engine error. */
int src_issue(src_issuer_t *is, src_t *from, const src_req_t *req);
/* Submits one recorded request (replay) as class req->cls: the given method and path (already
 * validated: an RFC 9110 token, an origin-form path), the class's body template rendered for a
 * write (a write class without a body is refused: SQ_EINVAL), a list sent as one page (the log
 * holds the pages that followed). The engine copies method and path. */
int src_issue_as(src_issuer_t *is, src_t *from, const src_req_t *req, const char *method,
                 const char *path);
/* The agents of phase pp's fleet that shard sh runs (sched_shard_share; all of them when the
 * run is not split): a shard keeps connections for its own agents only. */
int src_fleet_agents(const plan_phase_t *pp, sched_shard_t sh);
/* Whether phase pp's fleet has a connection of its own per agent (fleet.connections:
 * per-agent; by default an aligned fleet over HTTP/1.1 whose shard sh has more agents than
 * target.connections, when their connections fit the open-file limit, which this raises to the
 * hard one). */
bool src_fleet_per_agent(const plan_t *plan, const plan_phase_t *pp, sched_shard_t sh);
/* The main engine's connections in shard sh: target.connections, or the most agents the shard
 * runs in a fleet that has a connection per agent. The engine keeps them open across ticks
 * (libcurl closes a connection idle for more than 118 s, CURLOPT_MAXAGE_CONN's default). */
int src_fleet_connections(const plan_t *plan, sched_shard_t sh);
/* The connections phase `phase` may use in shard sh (eng_set_connections): its fleet's agents
 * in the shard when it has a connection per agent, else target.connections (also for the
 * teardown, phase n_phases). */
int src_phase_connections(const plan_t *plan, size_t phase, sched_shard_t sh);

/* Sends the requests issued ahead whose intended start is at or before now_ns (eng_release);
 * returns how many. */
int src_release(src_issuer_t *is, int64_t now_ns);
/* The earliest intended start of a request issued ahead and not yet released; false if none. */
bool src_held_next(const src_issuer_t *is, int64_t *at_ns);
/* Whether lists may fetch further pages (false once the run stops starting requests). */
void src_issuer_paging(src_issuer_t *is, bool on);
const src_class_t *src_class(const src_issuer_t *is, int cls);
/* Renders a class's path with the given context into buf (watch streams and relists). */
int src_render_path(src_issuer_t *is, int cls, const tmpl_ctx_t *ctx, tmpl_buf_t *buf);

/* Percent-encodes s for a query string (RFC 3986 unreserved characters kept) into dst;
 * returns the length, or 0 when cap is too small. */
size_t src_url_escape(const char *s, char *dst, size_t cap);

/* ---- the estimate -----------------------------------------------------------------------------
 */

#define SRC_MAX_REQS PLAN_MAX_REQS

/* What a phase would do, from the plan alone and the sources' own models. */
typedef struct {
    int64_t duration_ns; /* 0 and open_ended for a teardown with no duration */
    bool open_ended;
    double per_class[SRC_MAX_REQS + 1]; /* planned starts per class (watches: streams opened);
                                           the last used entry: teardown deletes */
    double requests;                    /* sum over non-watch classes */
    double peak_rate;                   /* highest planned request rate, per second */
    double burst;                       /* aligned fleets: requests due at one instant */
    bool closed_loop, bounded;          /* closed loop; with think > 0 the counts are a bound */
    int clients, watches, agents;
    double created, deleted; /* objects; a teardown deletes everything still alive */
    double alive_after;
    /* Writes of classes without `creates` whose 201 Created would also make objects to tear
     * down (plan_req_may_create, not kept): at most this many more in this phase; for a
     * teardown phase, at most this many more deleted (everything before it). */
    double may_create;
    bool replay;
} src_estimate_t;

/* Fills e[0 .. n_phases) (in order: each phase starts with the objects the ones before left
 * alive) from the sources' models, seeded and timed as a run starting at realtime0 would be.
 * Returns 0 or a source's own error (reported on o). */
int src_estimate(const plan_t *plan, uint64_t seed, int64_t realtime0_ns, out_t *o,
                 src_estimate_t *e);
/* The same for one shard's share (sh {0, 0} or {1, 1}: the whole run, as src_estimate). */
int src_estimate_shard(const plan_t *plan, uint64_t seed, sched_shard_t sh, int64_t realtime0_ns,
                       out_t *o, src_estimate_t *e);

#endif
