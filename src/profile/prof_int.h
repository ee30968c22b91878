/* Private to src/profile/: the shape trie, classes, keys, fleets and the analysis they make up. */
#ifndef SQUALL_PROF_INT_H
#define SQUALL_PROF_INT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/alog.h"
#include "squall/plan.h"
#include "squall/profile.h"

#define PROF_NONE       UINT32_MAX
#define PROF_MAX_DEPTH  32         /* path segments; deeper paths are left out */
#define PROF_MAX_NODES  1000000    /* trie nodes; paths past the limit are left out */
#define PROF_MAX_KEYS   (1u << 20) /* keys tracked for fleets; later keys are not */
#define PROF_WORD_CAP   64         /* literal siblings before they become one variable */
#define PROF_VALUES     64         /* values kept per variable */
#define PROF_RESERVOIR  2048       /* durations kept per class (a uniform sample) */
#define PROF_MAX_SPAN_S (31 * 86400)

/* How a segment looks: words stay literal unless siblings make them a variable; the others
 * are variables from the start. */
enum prof_lex { LEX_WORD, LEX_NUM, LEX_PNUM, LEX_UUID, LEX_HEX, LEX_TOKEN };

typedef struct {
    char *text; /* a literal's text; a PNUM variable's prefix */
    uint32_t parent, child, next, var, cls;
    uint8_t lex;
    bool ends;      /* a path ends here */
    bool dead;      /* merged into another node */
    uint64_t count; /* requests through this node */
} prof_node_t;

typedef struct {
    int64_t min, max; /* the number of NUM / PNUM values */
    int wmin, wmax;   /* their digit counts */
    bool lead0;       /* some value had a leading zero: zero-padded */
    char *values[PROF_VALUES];
    uint64_t vhash[PROF_VALUES];
    size_t n_values;
    bool more;     /* more distinct values were seen than kept */
    char name[48]; /* the plan variable's name, when it needs one */
} prof_var_t;

typedef struct {
    prof_node_t *nodes;
    size_t n, cap;
    prof_var_t *vars;
    size_t n_vars, cap_vars;
    uint64_t left_out; /* paths too deep or past the node limit */
} prof_trie_t;

int prof_trie_init(prof_trie_t *t);
void prof_trie_close(prof_trie_t *t);
/* Pass 1: adds a path's shape (its part before '?'). 0, or -1 when it is left out. */
int prof_trie_add(prof_trie_t *t, const char *path);
/* After pass 1: word siblings with the same non-empty sub-shapes (3 or more) become a
 * variable; variables with a single value become literals. */
void prof_trie_finalize(prof_trie_t *t);
/* Passes 2 and 3: the shape node a path ends at, or PROF_NONE. */
uint32_t prof_trie_match(const prof_trie_t *t, const char *path);
/* A collection: its children include a variable (objects named by ids). */
bool prof_trie_collection(const prof_trie_t *t, uint32_t node);
enum prof_lex prof_lex_of(const char *s, size_t n);

typedef struct {
    uint32_t node;
    char method[33];
    enum plan_kind kind;
    uint32_t next_at_node;
    uint64_t count, residual, fleet;
    uint64_t status[6]; /* [d] answers d xx, [0] without status */
    uint64_t created;   /* 201 */
    uint64_t keys;      /* distinct (client, method, path) */
    uint64_t with_token;
    struct {
        int64_t v;
        uint64_t n;
    } limits[8];
    size_t n_limits;
    char *qnames[8];
    size_t n_q;
    char watch_value[16];
    double dur_sum;
    uint64_t dur_n;
    int64_t res[PROF_RESERVOIR];
    size_t n_res;
    char *body;
    size_t body_len;
    int32_t *open;        /* watches: streams opened minus ended per second (pass 3) */
    uint32_t open_median; /* watches: streams open at the middle of the median second */
    char name[64];
} prof_class_t;

typedef struct {
    uint64_t hash; /* 0: empty slot */
    uint32_t cls;
    int32_t fleet; /* -1: none */
    uint32_t n;
    int64_t first, prev;
    double mean, m2; /* Welford over the gaps, ns */
    double c, s;     /* sums of cos and sin of the phases (pass 3) */
} prof_key_t;

typedef struct {
    uint32_t cls;
    uint32_t agents;
    int64_t period_ns, every_ns;
    double gap_sd_ns;
    uint64_t requests;
    prof_rayleigh_t ray;
    bool aligned, in_plan;
    double spread_ms, offset_ms;
    uint32_t agent_var; /* the node whose number tells agents apart, PROF_NONE if none */
} prof_fleet_t;

typedef struct {
    double rate;
    int64_t for_s;
} prof_step_t;

struct prof {
    prof_config_t cfg;
    char *log_path;
    alog_stats_t log; /* counts of the last pass; samples are not kept */
    int64_t t0, t1, res;
    uint64_t records, no_method, no_shape;
    char no_method_names[64];
    prof_trie_t trie;
    prof_class_t *cls;
    size_t n_cls, cap_cls;
    uint64_t too_many_classes;
    prof_key_t *keys;
    size_t cap_keys, n_keys;
    uint64_t untracked;
    prof_fleet_t *fleets;
    size_t n_fleets;
    uint32_t *sec; /* residual starts per second from t0 */
    size_t n_sec;
    uint64_t residual;
    prof_step_t *steps;
    size_t n_steps;
    prof_dispersion_t disp; /* pooled over the steps */
    int disp_interval_s;
    bool poisson;
};

/* analyze.c helpers shared with the writer. */
uint64_t prof_hash(const void *s, size_t n, uint64_t h);
int64_t prof_class_quantile(const prof_class_t *c, double q); /* -1 without durations */
int64_t prof_span_s(const prof_t *p);

/* Pass 2/3 helpers (keys.c). */
int prof_keys_init(prof_t *p);
prof_key_t *prof_key_find(prof_t *p, uint64_t h, bool add);
void prof_fleets_find(prof_t *p);
void prof_fleets_phases(prof_t *p);

/* Rates (rates.c): steps and dispersion of the residual per-second counts. */
void prof_rates(prof_t *p);

/* The writer's naming and path rendering (render.c). */
void prof_name_things(prof_t *p);
int prof_render_path(const prof_t *p, const prof_class_t *c, const prof_fleet_t *f, char *buf,
                     size_t len);

#endif
