/* The load plan: a YAML file read once into typed, read-only structs, with strict validation.
 *
 * A plan names a target, request classes and an ordered list of phases, plus objectives and
 * brakes. plan_load() reads the file (and its includes, and --set overrides), checks
 * everything, prints every problem as one line `FILE:LINE:COL: error: WHAT (expected ..., got
 * ...)` and either fails or returns a plan whose every value is parsed, defaulted, in range and
 * cross-referenced: later modules only read these structs, never the YAML.
 * Glossary: "class" = a named request class (requests.NAME); "source" = one way a phase starts
 * requests (open-loop rate, closed-loop clients, fleet, watches, churn, teardown, replay);
 * "ref" = a class or phase named by another entry, resolved to an index at load time.
 * Durations are int64 nanoseconds; rates are requests per second (double); percentages are
 * fractions (5% = 0.05). File paths in a plan (tls, token.file, replay.log) are relative to
 * the plan file that names them and are stored already joined with its directory. Every struct
 * carries the source position of its YAML node. */
#ifndef SQUALL_PLAN_H
#define SQUALL_PLAN_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/out.h"

/* ---- the data model -------------------------------------------------------------------- */

typedef struct {
    const char *file; /* as given to plan_load (or an include path); "--set" for overrides */
    int line, col;    /* 1-based; 0 when the value came from a --set override */
} plan_pos_t;

typedef struct {
    const char *name;
    const char *value;
    plan_pos_t pos;
} plan_kv_t;

/* A name that refers to a class or a phase; index is resolved at load (-1 = "*" or absent). */
typedef struct {
    const char *name;
    int index;
    plan_pos_t pos;
} plan_ref_t;

enum plan_http { PLAN_HTTP_1_1, PLAN_HTTP_2 };

typedef struct {
    plan_pos_t pos;
    const char *url; /* e.g. "http://127.0.0.1:7070" (no trailing slash) */
    bool https;
    const char *host; /* without brackets for IPv6 */
    int port;         /* explicit or the scheme's default */
    bool loopback;    /* host is 127.0.0.0/8, ::1 or "localhost"; others need --confirm-target */
    enum plan_http http;
    int connections;    /* default 16 */
    int streams;        /* HTTP/2 streams per connection, 1..10000; 0 = not given (100) */
    int64_t timeout_ns; /* default 10 s; per-request classes may override */
    int64_t max_body;   /* bytes of a response body squall keeps at most; default 16 MiB */
    plan_kv_t *headers;
    size_t n_headers;
    struct {
        const char *ca, *cert, *key; /* file paths or NULL */
        bool insecure;
    } tls;
    struct {
        const char *file, *env; /* at most one is set; a literal token is never accepted */
    } token;
} plan_target_t;

/* vars.NAME: a list of words, or an integer range {from, to} (inclusive). */
typedef struct {
    const char *name;
    plan_pos_t pos;
    const char **values; /* NULL for a range */
    size_t n_values;     /* for a range: to - from + 1 */
    bool is_range;
    int64_t from, to;
} plan_var_t;

enum plan_kind { PLAN_GET, PLAN_LIST, PLAN_WRITE, PLAN_WATCH };
enum plan_framing { PLAN_FRAME_NDJSON, PLAN_FRAME_SSE, PLAN_FRAME_RAW };
enum plan_backoff {
    PLAN_BACKOFF_IMMEDIATE,
    PLAN_BACKOFF_FIXED,
    PLAN_BACKOFF_EXPONENTIAL,
    PLAN_BACKOFF_FULL_JITTER,
    PLAN_BACKOFF_EQUAL_JITTER,
    PLAN_BACKOFF_DECORRELATED
};

typedef struct {
    const char *name;
    plan_pos_t pos;
    enum plan_kind kind;
    const char *path; /* template text, compiled by tmpl */
    plan_pos_t path_pos;
    plan_kv_t *headers;
    size_t n_headers;
    int64_t timeout_ns; /* the target's unless set; 0 for watches means "no timeout" */
    struct {            /* kind list */
        int page;       /* items per page, 0 = no limit parameter sent */
        const char *limit_param, *token_key,
            *token_param; /* "limit", "continue", "continue" (the embedded target's names) */
    } list;
    struct {                /* kind write */
        const char *method; /* POST, PUT, PATCH or DELETE (default PUT) */
        const char *body;   /* template text or NULL */
        plan_pos_t body_pos;
        bool creates, deletes;
        bool keep;            /* its created objects stay after the run (not torn down) */
        const char *keep_why; /* the plan's reason, or NULL */
    } write;
    struct { /* kind watch */
        enum plan_framing framing;
        const char *version_key, *stamp_key; /* "version", "stamp" */
        int too_old_status;                  /* 410 */
        plan_ref_t relist;                   /* a list class, index -1 if none */
        enum plan_backoff policy;            /* full-jitter */
        int64_t base_ns, cap_ns;             /* 200 ms, 10 s */
    } watch;
} plan_req_t;

enum plan_load_shape { PLAN_LOAD_NONE, PLAN_LOAD_CONSTANT, PLAN_LOAD_RAMP, PLAN_LOAD_STEPS };
enum plan_arrivals { PLAN_ARRIVALS_EVEN, PLAN_ARRIVALS_POISSON };
/* phases[].fleet.connections. */
enum plan_fleet_conns { PLAN_CONNS_DEFAULT, PLAN_CONNS_SHARED, PLAN_CONNS_PER_AGENT };

enum plan_timing { PLAN_TIMING_SPREAD, PLAN_TIMING_JITTER, PLAN_TIMING_ALIGNED };

typedef struct {
    plan_ref_t cls;
    double weight; /* > 0; weights of a mix need not sum to anything */
} plan_mix_t;

typedef struct {
    double rate;
    int64_t for_ns;
    plan_pos_t pos;
} plan_step_t;

/* phases[].fleet.next: where an agent's next action comes from. */
enum plan_next { PLAN_NEXT_FIXED, PLAN_NEXT_AFTER_ANSWER };

/* phases[].fleet.retry: how an after-answer agent waits after a failed answer (an error status,
 * a transport error, a timeout) before it tries again; the policies of watch reconnects. */
typedef struct {
    enum plan_backoff policy; /* full-jitter */
    int64_t base_ns, cap_ns;  /* 200 ms, 7 s */
} plan_retry_t;
/* The default retry of lease renewers, common practice (from memory: client libraries of
 * coordination services retry a failed renewal after a jittered wait from a few hundred
 * milliseconds, capped at a few seconds, well inside the lease). */
#define PLAN_RETRY_BASE_NS INT64_C(200000000)
#define PLAN_RETRY_CAP_NS  INT64_C(7000000000)

typedef struct {
    plan_ref_t cls;
    int64_t every_ns;    /* the fleet's `every` unless given */
    enum plan_next next; /* the fleet's `next` unless given */
    double jitter;       /* the fleet's `jitter` unless given (jitter timing, after-answer) */
    plan_retry_t retry;  /* the fleet's `retry` unless given (after-answer only) */
} plan_send_t;

typedef struct {
    plan_ref_t cls; /* a watch class */
    int count;
} plan_watch_set_t;

/* A replay rule: a POSIX extended regular expression on the recorded path (query included) and
 * what a match gives: the rewritten path (`{{1}}`..`{{9}}` groups, `{{copy}}`) or a class. */
typedef struct {
    const char *match;
    plan_pos_t pos;
    const char *to; /* rewrite: the template */
    plan_ref_t cls; /* classify: the class (resolved by the replay source) */
} plan_replay_rule_t;

/* A URL squall fetches beside the load: absolute (http:// or https://), or a path ("/...")
 * on the target's origin. */
typedef struct {
    const char *url; /* as written */
    bool relative;   /* a path on the target: https, host, port and loopback are the target's */
    bool https;
    const char *host; /* without brackets */
    int port;
    const char *path; /* path and query, at least "/" */
    bool loopback;
} plan_url_t;

/* observe.metrics[i]: an endpoint in a metrics text format (Prometheus 0.0.4 or OpenMetrics
 * 1.0) scraped while the run goes. */
typedef struct {
    plan_url_t at;
    int64_t every_ns;  /* default 5 s */
    const char **keep; /* metric name patterns ('*' matches any run); none: every series */
    size_t n_keep;
    plan_pos_t pos;
} plan_scrape_t;

/* observe.collect[i]: a URL fetched into the results directory at one moment of the run. */
enum plan_moment { PLAN_AT_RUN_START, PLAN_AT_RUN_END, PLAN_AT_PHASE_START, PLAN_AT_PHASE_END };
typedef struct {
    plan_url_t at;
    enum plan_moment when;
    int phase;          /* PHASE_START/END: the phase's index */
    const char *save;   /* file name under DIR/collected/ */
    int64_t timeout_ns; /* default 10 s */
    int64_t max_bytes;  /* default 16 MiB: a longer answer is cut there and says so */
    plan_pos_t pos;
} plan_collect_t;

/* phases[i].actions[k]: a request sent or a program run at an offset into the phase. */
typedef struct {
    const char *name;   /* default "NAME-K" from the phase's name */
    int64_t at_ns;      /* from the phase's start */
    bool exec;          /* a program (needs --allow-exec), else an HTTP request */
    const char *method; /* http: default POST */
    plan_url_t url;
    const char *body;        /* http: NULL = none */
    const char *const *argv; /* exec: program and arguments, NULL-terminated; no shell */
    int64_t timeout_ns;      /* default 30 s */
    plan_pos_t pos;
} plan_action_t;

typedef struct {
    const char *name;
    plan_pos_t pos;
    int64_t duration_ns; /* 0 = open-ended (teardown, replay) */
    bool has_duration;

    /* Open loop: one of constant rate, ramp or steps, driving `mix`. */
    enum plan_load_shape shape;
    double rate, ramp_from, ramp_to;
    plan_step_t *steps; /* in order; the last rate holds if the duration is longer */
    size_t n_steps;
    enum plan_arrivals arrivals; /* even */
    plan_mix_t *mix;             /* for open loop or closed-loop clients */
    size_t n_mix;

    struct {
        bool on;
        int count;
        int64_t think_ns;
    } clients;
    struct {
        bool on;
        int agents;
        int64_t every_ns;
        enum plan_timing timing; /* spread */
        double jitter, drift;    /* fractions of `every` (jitter timing and after-answer
                                  * periods; clock drift per agent) */
        enum plan_next next;     /* fixed: the default of its send items */
        plan_retry_t retry;      /* the default of its after-answer send items */
        int64_t join_ns;         /* agents join evenly over this time, 0 = all at start */
        int64_t leave_ns;        /* they leave (first in, first out) over the phase's last
                                  * `leave`, 0 = all stay to the end */
        plan_ref_t watch;        /* each agent's own watch (a watch class; name NULL if none):
                                  * also added to `watches` as a set of `agents` streams whose
                                  * {{agent}} is the agent's index */
        plan_send_t *send;
        size_t n_send;
        enum plan_fleet_conns conns; /* connections: shared | per-agent (default: per-agent
                                      * for aligned fleets over HTTP/1.1 that fit the
                                      * open-file limit; see src_fleet_connections) */
    } fleet;
    struct {
        plan_watch_set_t *sets;
        size_t n_sets;
        int64_t spread_ns; /* 0 = open all at once */
    } watches;
    struct {
        bool on;
        plan_ref_t create, del; /* write classes with creates / deletes */
        double rate;            /* creates + deletes per second */
        int population;
        double tolerance; /* fraction of population, default 10% */
    } churn;
    struct {
        bool on;
        double rate; /* 0 = as fast as the connections allow */
    } teardown;
    struct {
        bool on;
        const char *log;
        double speed;        /* 1.0 */
        plan_kv_t *log_opts; /* format, time-unit, duration-unit, time-at and
                              * field=NAME=KEY, as alog_config_set takes them */
        size_t n_log_opts;
        int64_t from_ns, to_ns; /* window from the log's first record; to 0 = end */
        bool has_to;
        const char **methods; /* only these methods (NULL: all) */
        size_t n_methods;
        const char *match; /* only paths matching this POSIX ERE (or NULL) */
        plan_pos_t match_pos;
        plan_replay_rule_t *rewrite; /* {match, to}: first match rewrites the path */
        size_t n_rewrite;
        plan_replay_rule_t *classify; /* {match, class}: first match names the class */
        size_t n_classify;
        int copies;                /* 1 */
        int64_t offset_ns;         /* copy k starts k x offset later (default 1 ms) */
        enum plan_arrivals spread; /* within a 1 s record's second: even (default) */
        int get_cls, list_cls;     /* unmatched GET/HEAD: object or collection class */
        const char *watch_param;   /* query parameter marking a watch ("watch") */
        int64_t watch_min_ns;      /* a marked request lasting this long is a stream (1 s) */
        int watch_cls;             /* unmatched watches: `replay-watch` */
    } replay;
    plan_action_t *actions; /* in the order of their `at` */
    size_t n_actions;
} plan_phase_t;

enum plan_metric {
    PLAN_METRIC_RESPONSE,
    PLAN_METRIC_SERVICE,
    PLAN_METRIC_OPEN,
    PLAN_METRIC_PROPAGATION
};
/* MAX_SYNC: the synchronisation gauge R̄ of every whole window of a fleet action (value). */
enum plan_limit {
    PLAN_LIMIT_PERCENTILE,
    PLAN_LIMIT_ERROR_RATE,
    PLAN_LIMIT_MIN_RATE,
    PLAN_LIMIT_MAX_SYNC
};

typedef struct {
    plan_pos_t pos;
    plan_ref_t cls;   /* index -1 for "*" (every class) */
    plan_ref_t phase; /* index -1 for every phase */
    enum plan_metric metric;
    enum plan_limit limit;
    double percentile; /* 99.9 for p99.9 */
    int64_t max_ns;    /* for PERCENTILE */
    double value;      /* fraction for ERROR_RATE, per second for MIN_RATE, R̄ for MAX_SYNC */
} plan_objective_t;

enum plan_brake_kind {
    PLAN_BRAKE_ERROR_RATE,
    PLAN_BRAKE_PERCENTILE,
    PLAN_BRAKE_UNREACHABLE,
    PLAN_BRAKE_SATURATION
};

typedef struct {
    plan_pos_t pos;
    enum plan_brake_kind kind;
    plan_ref_t cls;    /* index -1 = all classes */
    double percentile; /* PERCENTILE */
    int64_t max_ns;    /* PERCENTILE: the latency limit; UNREACHABLE: how long */
    double value;      /* ERROR_RATE fraction */
    int64_t for_ns;    /* window the condition must hold, default 10 s */
} plan_brake_t;

/* Reasons a run is INCONCLUSIVE that a plan may accept (`accept:`), in plan_accept_names order. */
enum plan_accept {
    PLAN_ACCEPT_GENERATOR_BOUND,
    PLAN_ACCEPT_FEW_SAMPLES,
    PLAN_ACCEPT_STOPPED_EARLY
};
extern const char *const plan_accept_names[]; /* "generator-bound", "few-samples", ... */

struct plan_mem; /* private: owns every string and array below */

typedef struct {
    const char *path;
    bool has_seed;
    uint64_t seed;
    plan_target_t target;
    plan_var_t *vars;
    size_t n_vars;
    plan_req_t *reqs;
    size_t n_reqs;
    plan_phase_t *phases;
    size_t n_phases;
    plan_objective_t *objectives;
    size_t n_objectives;
    plan_brake_t *brakes;
    size_t n_brakes;
    unsigned accept;        /* 1 << enum plan_accept: reasons for INCONCLUSIVE the plan accepts */
    plan_scrape_t *scrapes; /* observe.metrics */
    size_t n_scrapes;
    plan_collect_t *collects; /* observe.collect */
    size_t n_collects;
    struct plan_mem *mem;
} plan_t;

/* A --set override: key is a dotted path (`target.connections`, `phases.steady.rate`, list items
 * by name or 0-based index), value a YAML scalar. It applies to the last file (the includer
 * before its includes) that already holds the path's parent, else to the top file, where
 * missing mapping keys are created. Its errors are located as "--set KEY=VALUE". */
typedef struct {
    const char *key;
    const char *value;
} plan_override_t;

/* Splits a command line's "KEY=VALUE" into *ov, pointing into *copy (malloc'd; the caller frees
 * it after plan_load). SQ_EINVAL when there is no '=' or the key is empty, SQ_ENOMEM. */
int plan_override_split(const char *kv, plan_override_t *ov, char **copy);

/* Reads, overrides, validates. On success returns 0 and a plan to release with plan_free. On
 * failure every error has been printed (one line each, OUT_ERROR) and *out is NULL: SQ_EIO when
 * a file cannot be read, SQ_EPARSE for any other problem, SQ_ENOMEM. */
int plan_load(const char *path, const plan_override_t *overrides, size_t n, plan_t **out, out_t *o);
void plan_free(plan_t *p);

/* Index of the class or phase with that name, or -1. */
int plan_find_req(const plan_t *p, const char *name);
int plan_find_phase(const plan_t *p, const char *name);

/* Names for enum values, as written in plans. */
const char *plan_kind_name(enum plan_kind k);
/* Whether a 201 Created answer to class r makes an object the run must journal and tear down:
 * any write but a DELETE or a `deletes` class, whatever `creates` says (RFC 9110, 15.3.2). */
bool plan_req_may_create(const plan_req_t *r);
const char *plan_backoff_name(enum plan_backoff b);
/* "fixed", "after-answer". */
const char *plan_next_name(enum plan_next n);

/* Every key the loader accepts, per mapping of a plan (src/plan/keys.c): the loader checks each
 * mapping against its set, so this table is the plan format's list of keys, and squall-plan(5)
 * is tested against it. To add a key, add it to its set here and read it in its parser. */
enum plan_keyset {
    PLAN_KEYS_ROOT,
    PLAN_KEYS_TARGET,
    PLAN_KEYS_TLS,
    PLAN_KEYS_TOKEN,
    PLAN_KEYS_RANGE,
    PLAN_KEYS_REQUEST,
    PLAN_KEYS_RECONNECT,
    PLAN_KEYS_PHASE,
    PLAN_KEYS_RAMP,
    PLAN_KEYS_STEP,
    PLAN_KEYS_CLIENTS,
    PLAN_KEYS_WATCHES, /* besides the watch class names */
    PLAN_KEYS_FLEET,
    PLAN_KEYS_SEND,
    PLAN_KEYS_RETRY,
    PLAN_KEYS_SEND_RETRY,
    PLAN_KEYS_CHURN,
    PLAN_KEYS_TEARDOWN,
    PLAN_KEYS_REPLAY,
    PLAN_KEYS_REWRITE,
    PLAN_KEYS_CLASSIFY,
    PLAN_KEYS_ACTION,
    PLAN_KEYS_ACTION_HTTP,
    PLAN_KEYS_OBJECTIVE,
    PLAN_KEYS_BRAKE,
    PLAN_KEYS_OBSERVE,
    PLAN_KEYS_SCRAPE,
    PLAN_KEYS_COLLECT,
    PLAN_KEYS_N
};
typedef struct {
    const char *where;       /* the mapping as squall-plan(5) names it, "" for the top level,
                              * e.g. "target.tls", "requests.NAME", "phases[].fleet" */
    const char *const *keys; /* NULL-terminated */
    const unsigned *kinds;   /* per key, the request kinds it applies to (bit 1 << enum
                              * plan_kind), or NULL when every key applies everywhere */
} plan_keyset_t;
extern const plan_keyset_t plan_keysets[PLAN_KEYS_N];
/* The NULL-terminated keys of one set. */
const char *const *plan_keys(enum plan_keyset s);

#define PLAN_MAX_REQS 256 /* validation rejects plans with more classes */

#endif
