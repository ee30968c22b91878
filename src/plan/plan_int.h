/* Private to src/plan: the loading context, the plan's memory, and YAML node readers.
 *
 * Every reader takes the mapping it reads from, the key, and the dotted "where" of the mapping
 * (e.g. "requests.renew") so an error line can name the exact setting. A reader that finds a
 * bad value prints one error line and returns false; a missing key returns false silently and
 * leaves *out untouched, so defaults are set before reading. */
#ifndef SQUALL_PLAN_INT_H
#define SQUALL_PLAN_INT_H

#include <yaml.h>

#include "squall/plan.h"
#include "squall/value.h"

/* Which kinds a key applies to (bit per enum plan_kind), for "page on a write" errors. */
#define PK_GET   (1u << PLAN_GET)
#define PK_LIST  (1u << PLAN_LIST)
#define PK_WRITE (1u << PLAN_WRITE)
#define PK_WATCH (1u << PLAN_WATCH)
#define PK_ANY   (PK_GET | PK_LIST | PK_WRITE | PK_WATCH)

#define PC_MAX_FILES 64 /* at least load.c's include limit */

typedef struct {
    plan_t *p;
    out_t *o;
    int errors;
    yaml_document_t *doc;
    const char *file;       /* owned by the plan's memory */
    const char **set_names; /* "--set #K KEY=VALUE" per override, for positions */
    size_t n_set;
    /* Errors are held until the load ends, then printed sorted by position (pc_flush_errors):
     * by file in the order they were read, line, column; then the --set errors in order. */
    struct pc_err *errs;
    size_t n_errs, cap_errs;
    const char *files[PC_MAX_FILES]; /* the files read, in order */
    size_t n_files;
    bool nomem;
    bool url_given, phases_given; /* so a bad value is not also reported as missing */
} pctx_t;

/* Nodes created by override k carry start_mark.line == PC_SET_MARK - k. */
#define PC_SET_MARK ((size_t)-1)

/* Memory owned by the plan: zeroed blocks and strings freed together by plan_free. */
void *pmem_alloc(pctx_t *c, size_t n);
const char *pmem_strdup(pctx_t *c, const char *s);
void pmem_free(struct plan_mem *m);

/* Diagnostics: `FILE:LINE:COL: error: ` + the formatted text, at the node (or pos). */
void pc_error(pctx_t *c, const yaml_node_t *n, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
void pc_error_at(pctx_t *c, plan_pos_t pos, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));
plan_pos_t pc_pos(pctx_t *c, const yaml_node_t *n);
/* Prints the errors held so far, sorted by position, and forgets them. */
void pc_flush_errors(pctx_t *c);

/* Nodes. */
yaml_node_t *pc_node(pctx_t *c, int id);
/* "a mapping", "a list", "'text'" (truncated), or "nothing" for an empty plain scalar. */
void pc_describe(const yaml_node_t *n, char *buf, size_t len);
/* The text of a non-empty scalar node, or NULL. */
const char *pc_text(const yaml_node_t *n);
bool pc_expect_map(pctx_t *c, yaml_node_t *n, const char *where);
bool pc_expect_seq(pctx_t *c, yaml_node_t *n, const char *where);

/* Reports unknown keys (with a suggestion from `keys`, NULL-terminated), non-scalar keys and
 * duplicate keys in mapping `map`. */
void pc_check_keys(pctx_t *c, yaml_node_t *map, const char *where, const char *const *keys);
/* Value node of `key` in mapping `map`, or NULL (the first one when duplicated). */
yaml_node_t *pc_get(pctx_t *c, yaml_node_t *map, const char *key);
/* The key node of `key` (for positions of errors about the key itself), or NULL. */
yaml_node_t *pc_get_key(pctx_t *c, yaml_node_t *map, const char *key);

/* Typed readers (see the file comment). */
bool pc_str(pctx_t *c, yaml_node_t *map, const char *key, const char *where, const char **out);
/* A file path, made relative to the directory of the plan file that names it. */
bool pc_path(pctx_t *c, yaml_node_t *map, const char *key, const char *where, const char **out);
bool pc_int(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min,
            int64_t max, int *out);
bool pc_dur(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min_ns,
            int64_t *out);
bool pc_rate(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double *out);
bool pc_pct(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double *out);
bool pc_num(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double min, double max,
            double *out);
/* A size in bytes (`512KiB`, `32MiB`) within [min, max]. */
bool pc_bytes(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min,
              int64_t max, int64_t *out);
bool pc_bool(pctx_t *c, yaml_node_t *map, const char *key, const char *where, bool *out);
/* One of `names` (NULL-terminated); *out is its index. */
bool pc_enum(pctx_t *c, yaml_node_t *map, const char *key, const char *where,
             const char *const *names, int *out);
/* Value readers for a node already in hand (sequence items, mix weights). */
bool pc_node_rate(pctx_t *c, yaml_node_t *n, const char *where, double *out);
bool pc_node_dur(pctx_t *c, yaml_node_t *n, const char *where, int64_t min_ns, int64_t *out);

/* Names: class, phase and variable names are [A-Za-z0-9_.-]+ (no dots, for --set paths). */
bool pc_name_ok(pctx_t *c, yaml_node_t *n, const char *where, const char *what);
/* Sets ref's name and position from scalar node n (index -1); false after a type error.
 * References are resolved, and their kinds checked, by plan_check_whole once every file is
 * read, since arrays may still move while files are read. */
bool pc_ref(pctx_t *c, plan_ref_t *ref, yaml_node_t *n, const char *what);

/* headers: {Name: value}; a header already in *out (any case) is replaced. */
void plan_parse_headers_into(pctx_t *c, yaml_node_t *n, const char *where, plan_kv_t **out,
                             size_t *count);

/* The sections, in parse_*.c. Each reads one top-level key of one file's document. */
void plan_parse_target(pctx_t *c, yaml_node_t *n);
void plan_parse_vars(pctx_t *c, yaml_node_t *n);
void plan_parse_requests(pctx_t *c, yaml_node_t *n);
void plan_parse_phases(pctx_t *c, yaml_node_t *n);
/* A phase's replay: key (parse_replay.c); adds the replay-get and replay-list classes. */
/* A watch class's defaults (ndjson framing, keys "version" and "stamp", 410, no relist,
 * full-jitter backoff from 200 ms to 10 s). */
void plan_watch_defaults(plan_req_t *r);
void plan_parse_replay(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph);
void plan_parse_objectives(pctx_t *c, yaml_node_t *n);
void plan_parse_brakes(pctx_t *c, yaml_node_t *n);
void plan_parse_accept(pctx_t *c, yaml_node_t *n);
void plan_parse_observe(pctx_t *c, yaml_node_t *n);
/* A phase's `actions` list (parse_observe.c, beside the other things done beside the load). */
void plan_parse_actions(pctx_t *c, yaml_node_t *n, const char *where, plan_phase_t *ph);
/* Splits http[s]://host[:port][/path] at vn (where names it in errors): false after an error. */
bool plan_split_url(pctx_t *c, yaml_node_t *vn, const char *where, bool *https, char *host,
                    size_t cap, int *port, const char **path, bool *loopback);
/* Resolves every reference and runs the checks that need the whole plan. */
void plan_check_whole(pctx_t *c);

/* Applies --set override k to the document c->doc (see set.c). */
void plan_apply_override(pctx_t *c, size_t k, const plan_override_t *ov);
/* True when every part of the override's path but the last exists in c->doc. */
bool plan_override_fits(pctx_t *c, const plan_override_t *ov);

/* Names of enum plan_kind and enum plan_backoff values as written in plans, NULL-terminated
 * (names.c), for pc_enum. */
extern const char *const plan_kind_names[];
extern const char *const plan_backoff_names[];
extern const char *const plan_next_names[];

/* A backoff mapping {policy, base, cap} (a watch's reconnect, a fleet's retry) at n, its keys
 * checked against `keys`: what it gives overwrites *policy, *base_ns, *cap_ns (the defaults
 * the caller set); cap below base is an error at its position. */
void pc_backoff(pctx_t *c, yaml_node_t *n, const char *w, enum plan_keyset keys,
                enum plan_backoff *policy, int64_t *base_ns, int64_t *cap_ns);

/* Appends n zeroed elements to a plan array (copying, since arrays live in plan memory). */
void *pc_grow(pctx_t *c, void *arr, size_t *count, size_t add, size_t elem);

/* ---- text.c: a plan file's bytes before YAML ------------------------------------------- */

#define PLAN_MAX_BYTES   (4 << 20) /* a plan file larger than this is refused */
#define PLAN_MAX_NESTING 64        /* flow collections ([ and {) nested deeper are refused */

typedef struct {
    bool too_deep; /* nesting passed PLAN_MAX_NESTING at byte `at` */
    char unclosed; /* else: the '[', '{', '"' or '\'' opened at byte `at` never closed, or 0 */
    size_t at;
} plan_text_scan_t;

/* Scans the text: brackets outside quotes and comments, quotes. */
void plan_text_scan(const char *s, size_t len, plan_text_scan_t *r);
/* The line and column of byte `at` of the text (columns count UTF-8 characters). */
plan_pos_t plan_text_pos(const char *file, const char *s, size_t len, size_t at);

#endif
