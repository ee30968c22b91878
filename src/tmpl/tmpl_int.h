/* Private to src/tmpl: the compiled form of a template and the registry's entries. */
#ifndef SQUALL_TMPL_INT_H
#define SQUALL_TMPL_INT_H

#include "squall/tmpl.h"

/* A slice of text owned by someone else (the template's copy or a list's copy). */
typedef struct {
    const char *p;
    size_t len;
} tmpl_str_t;

typedef struct {
    char *name;
    tmpl_str_t *items;
    size_t n;
    char *store; /* the items' bytes */
} tmpl_list_t;

typedef struct {
    char *name;
    tmpl_resolve_fn fn;
    void *user;
} tmpl_resolver_t;

struct tmpl_env {
    tmpl_list_t **lists; /* pointers, so templates' references survive growth */
    size_t n_lists;
    tmpl_resolver_t **resolvers;
    size_t n_resolvers;
};

enum tmpl_seg_kind {
    TMPL_LIT,
    TMPL_AGENT,
    TMPL_SEQ,
    TMPL_NOW_NS,
    TMPL_NOW_MS,
    TMPL_PHASE,
    TMPL_PICK_ITEMS, /* items[first .. first + n) of the template's own items */
    TMPL_PICK_RANGE,
    TMPL_LIST,
    TMPL_RESOLVER,
};

typedef struct {
    enum tmpl_seg_kind kind;
    int width;      /* zero-padding for AGENT and SEQ, 0 = none */
    tmpl_str_t str; /* LIT: the text; RESOLVER: its argument */
    size_t first, n;
    int64_t lo, hi;
    const tmpl_list_t *list;
    const tmpl_resolver_t *res;
} tmpl_seg_t;

struct tmpl {
    char *text;
    tmpl_seg_t *segs;
    size_t n_segs, cap_segs;
    tmpl_str_t *items; /* every [list] item of the template */
    size_t n_items, cap_items;
    bool uses_rng;
    bool uses_now;
};

/* Lookups in a possibly NULL env; NULL when absent. */
const tmpl_list_t *tmpl_env_list(const tmpl_env_t *env, const char *name, size_t len);
const tmpl_resolver_t *tmpl_env_resolver(const tmpl_env_t *env, const char *name, size_t len);
/* True for a well-formed name: a letter or '_', then letters, digits, '_' or '-'. */
bool tmpl_name_ok(const char *s, size_t len);
/* True for agent, seq, now_ns, now_ms, phase and pick. */
bool tmpl_name_builtin(const char *s, size_t len);

#endif
