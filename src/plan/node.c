/* Reading libyaml document nodes strictly: plan memory, error lines with positions, key checks
 * (unknown, duplicate, "did you mean") and typed value readers shared by every section. */
#include <libgen.h>
#include <limits.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"
#include "squall/suggest.h"

struct plan_mem {
    struct plan_mem *next;
};

void *pmem_alloc(pctx_t *c, size_t n)
{
    struct plan_mem *b = calloc(1, sizeof(*b) + n + 16);
    if (!b) {
        c->nomem = true;
        return NULL;
    }
    b->next = c->p->mem;
    c->p->mem = b;
    /* The payload starts after a header rounded up to 16 bytes, aligned for any member. */
    return (char *)b + 16;
}

const char *pmem_strdup(pctx_t *c, const char *s)
{
    if (!s)
        return NULL;
    size_t n = strlen(s) + 1;
    char *d = pmem_alloc(c, n);
    if (d)
        memcpy(d, s, n);
    return d ? d : "";
}

void pmem_free(struct plan_mem *m)
{
    while (m) {
        struct plan_mem *next = m->next;
        free(m);
        m = next;
    }
}

void *pc_grow(pctx_t *c, void *arr, size_t *count, size_t add, size_t elem)
{
    char *d = pmem_alloc(c, (*count + add) * elem);
    if (!d)
        return arr;
    if (*count)
        memcpy(d, arr, *count * elem);
    *count += add;
    return d;
}

plan_pos_t pc_pos(pctx_t *c, const yaml_node_t *n)
{
    plan_pos_t pos = {c->file, 0, 0};
    if (n && n->start_mark.line > PC_SET_MARK - c->n_set - 1) {
        pos.file = c->set_names[PC_SET_MARK - n->start_mark.line];
    } else if (n) {
        pos.line = (int)n->start_mark.line + 1;
        pos.col = (int)n->start_mark.column + 1;
    }
    return pos;
}

struct pc_err {
    size_t group; /* file index, then n_files + set index; SIZE_MAX when unknown */
    int line, col;
    size_t seq; /* the order it was found in, for equal positions */
    char *text; /* the whole line */
};

/* Where pos sorts: its file's reading order, or after every file, its --set's order. */
static size_t err_group(const pctx_t *c, plan_pos_t pos)
{
    for (size_t k = 0; pos.file && k < c->n_set; k++)
        if (pos.file == c->set_names[k])
            return PC_MAX_FILES + k;
    for (size_t i = 0; pos.file && i < c->n_files; i++)
        if (strcmp(pos.file, c->files[i]) == 0)
            return i;
    return SIZE_MAX;
}

static void verror(pctx_t *c, plan_pos_t pos, const char *fmt, va_list ap)
{
    char msg[1024], line[1400];
    vsnprintf(msg, sizeof msg, fmt, ap);
    c->errors++;
    if (pos.line > 0)
        snprintf(line, sizeof line, "%s:%d:%d: error: %s", pos.file, pos.line, pos.col, msg);
    else
        snprintf(line, sizeof line, "%s: error: %s", pos.file, msg);
    if (c->n_errs == c->cap_errs) {
        size_t cap = c->cap_errs ? 2 * c->cap_errs : 16;
        struct pc_err *e = realloc(c->errs, cap * sizeof(*e));
        if (e)
            c->errs = e, c->cap_errs = cap;
    }
    char *text = c->n_errs < c->cap_errs ? strdup(line) : NULL;
    if (!text) { /* out of memory: print it now, unsorted, rather than lose it */
        out_raw(c->o, OUT_ERROR, "%s", line);
        return;
    }
    c->errs[c->n_errs] = (struct pc_err){err_group(c, pos), pos.line, pos.col, c->n_errs, text};
    c->n_errs++;
}

static int err_cmp(const void *a, const void *b)
{
    const struct pc_err *x = a, *y = b;
    if (x->group != y->group)
        return x->group < y->group ? -1 : 1;
    if (x->line != y->line)
        return x->line < y->line ? -1 : 1;
    if (x->col != y->col)
        return x->col < y->col ? -1 : 1;
    return x->seq < y->seq ? -1 : x->seq > y->seq;
}

void pc_flush_errors(pctx_t *c)
{
    if (c->n_errs)
        qsort(c->errs, c->n_errs, sizeof(*c->errs), err_cmp);
    for (size_t i = 0; i < c->n_errs; i++) {
        out_raw(c->o, OUT_ERROR, "%s", c->errs[i].text);
        free(c->errs[i].text);
    }
    free(c->errs);
    c->errs = NULL;
    c->n_errs = c->cap_errs = 0;
}

void pc_error(pctx_t *c, const yaml_node_t *n, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    verror(c, pc_pos(c, n), fmt, ap);
    va_end(ap);
}

void pc_error_at(pctx_t *c, plan_pos_t pos, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    verror(c, pos, fmt, ap);
    va_end(ap);
}

yaml_node_t *pc_node(pctx_t *c, int id)
{
    return yaml_document_get_node(c->doc, id);
}

const char *pc_text(const yaml_node_t *n)
{
    if (!n || n->type != YAML_SCALAR_NODE || n->data.scalar.length == 0)
        return NULL;
    return (const char *)n->data.scalar.value;
}

void pc_describe(const yaml_node_t *n, char *buf, size_t len)
{
    if (!n)
        snprintf(buf, len, "nothing");
    else if (n->type == YAML_MAPPING_NODE)
        snprintf(buf, len, "a mapping");
    else if (n->type == YAML_SEQUENCE_NODE)
        snprintf(buf, len, "a list");
    else if (n->data.scalar.length == 0)
        snprintf(buf, len, "nothing");
    else if (n->data.scalar.length > 40)
        snprintf(buf, len, "'%.37s...'", (const char *)n->data.scalar.value);
    else
        snprintf(buf, len, "'%s'", (const char *)n->data.scalar.value);
}

static bool expect_type(pctx_t *c, yaml_node_t *n, const char *where, yaml_node_type_t t,
                        const char *what)
{
    if (n && n->type == t)
        return true;
    char got[64];
    pc_describe(n, got, sizeof got);
    pc_error(c, n, "%s: wrong type (expected %s, got %s)", where, what, got);
    return false;
}

bool pc_expect_map(pctx_t *c, yaml_node_t *n, const char *where)
{
    return expect_type(c, n, where, YAML_MAPPING_NODE, "a mapping");
}

bool pc_expect_seq(pctx_t *c, yaml_node_t *n, const char *where)
{
    return expect_type(c, n, where, YAML_SEQUENCE_NODE, "a list");
}

/* An unknown key: the likely one, and every valid key when the key came from a --set (the
 * user has no file open to look at) or nothing is close. */
static void unknown_key(pctx_t *c, yaml_node_t *k, const char *where, const char *const *keys)
{
    const char *near = suggest_closest((const char *)k->data.scalar.value, keys);
    char list[512];
    size_t off = 0;
    for (int i = 0; keys[i] && off < sizeof list; i++)
        off += (size_t)snprintf(list + off, sizeof list - off, "%s%s", i ? ", " : "", keys[i]);
    bool from_set = pc_pos(c, k).line == 0;
    if (near && !from_set)
        pc_error(c, k, "%s: unknown key '%s' (did you mean '%s'?)", where,
                 (const char *)k->data.scalar.value, near);
    else if (near)
        pc_error(c, k, "%s: unknown key '%s' (did you mean '%s'? expected one of: %s)", where,
                 (const char *)k->data.scalar.value, near, list);
    else
        pc_error(c, k, "%s: unknown key '%s' (expected one of: %s)", where,
                 (const char *)k->data.scalar.value, list);
}

void pc_check_keys(pctx_t *c, yaml_node_t *map, const char *where, const char *const *keys)
{
    yaml_node_pair_t *first = map->data.mapping.pairs.start;
    for (yaml_node_pair_t *pr = first; pr < map->data.mapping.pairs.top; pr++) {
        yaml_node_t *k = pc_node(c, pr->key);
        if (!pc_text(k)) {
            char got[64];
            pc_describe(k, got, sizeof got);
            pc_error(c, k, "%s: wrong type of key (expected a name, got %s)", where, got);
            continue;
        }
        const char *name = pc_text(k);
        bool dup = false;
        for (yaml_node_pair_t *q = first; q < pr && !dup; q++) {
            const char *other = pc_text(pc_node(c, q->key));
            if (other && strcmp(other, name) == 0) {
                yaml_node_t *fk = pc_node(c, q->key);
                pc_error(c, k, "%s: duplicate key '%s' (first given at line %d, column %d)", where,
                         name, (int)fk->start_mark.line + 1, (int)fk->start_mark.column + 1);
                dup = true;
            }
        }
        if (dup || !keys)
            continue;
        bool known = false;
        for (int i = 0; keys[i] && !known; i++)
            known = strcmp(keys[i], name) == 0;
        if (!known)
            unknown_key(c, k, where, keys);
    }
}

static yaml_node_pair_t *find_pair(pctx_t *c, yaml_node_t *map, const char *key)
{
    if (!map || map->type != YAML_MAPPING_NODE)
        return NULL;
    for (yaml_node_pair_t *pr = map->data.mapping.pairs.start; pr < map->data.mapping.pairs.top;
         pr++) {
        const char *k = pc_text(pc_node(c, pr->key));
        if (k && strcmp(k, key) == 0)
            return pr;
    }
    return NULL;
}

yaml_node_t *pc_get(pctx_t *c, yaml_node_t *map, const char *key)
{
    yaml_node_pair_t *pr = find_pair(c, map, key);
    return pr ? pc_node(c, pr->value) : NULL;
}

yaml_node_t *pc_get_key(pctx_t *c, yaml_node_t *map, const char *key)
{
    yaml_node_pair_t *pr = find_pair(c, map, key);
    return pr ? pc_node(c, pr->key) : NULL;
}

/* The scalar value of `key`, NULL if absent, or NULL after an error when it is not a scalar.
 * *vn is the value node for positions. */
static const char *scalar_of(pctx_t *c, yaml_node_t *map, const char *key, const char *where,
                             const char *expects, yaml_node_t **vn)
{
    yaml_node_pair_t *pr = find_pair(c, map, key);
    if (!pr)
        return NULL;
    *vn = pc_node(c, pr->value);
    const char *t = pc_text(*vn);
    if (!t) {
        char got[64];
        pc_describe(*vn, got, sizeof got);
        pc_error(c, *vn, "%s.%s: wrong type (expected %s, got %s)", where, key, expects, got);
    }
    return t;
}

/* Reports a value parser's failure with the expected form and the text given. */
static bool bad_value(pctx_t *c, yaml_node_t *vn, const char *where, const char *key, int rc,
                      const char *expects)
{
    pc_error(c, vn, "%s%s%s: %s (expected %s, got '%s')", where, key ? "." : "", key ? key : "",
             rc == SQ_ERANGE ? "out of range" : "malformed value", expects, pc_text(vn));
    return false;
}

bool pc_str(pctx_t *c, yaml_node_t *map, const char *key, const char *where, const char **out)
{
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, "text", &vn);
    if (!t)
        return false;
    *out = pmem_strdup(c, t);
    return true;
}

bool pc_int(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min,
            int64_t max, int *out)
{
    char exp[96];
    snprintf(exp, sizeof exp, "an integer from %lld to %lld", (long long)min, (long long)max);
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, exp, &vn);
    if (!t)
        return false;
    int64_t v;
    int rc = value_parse_int(t, min, max, &v);
    if (rc)
        return bad_value(c, vn, where, key, rc, exp);
    *out = (int)v;
    return true;
}

static bool dur_value(pctx_t *c, yaml_node_t *vn, const char *where, const char *key,
                      int64_t min_ns, int64_t *out)
{
    const char *exp = min_ns > 0 ? VALUE_DURATION_EXPECTS " above 0" : VALUE_DURATION_EXPECTS;
    int64_t v;
    int rc = value_parse_duration(pc_text(vn), &v);
    if (!rc && v < min_ns)
        rc = SQ_ERANGE;
    if (rc)
        return bad_value(c, vn, where, key, rc, exp);
    *out = v;
    return true;
}

bool pc_dur(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min_ns,
            int64_t *out)
{
    yaml_node_t *vn;
    if (!scalar_of(c, map, key, where, VALUE_DURATION_EXPECTS, &vn))
        return false;
    return dur_value(c, vn, where, key, min_ns, out);
}

bool pc_node_dur(pctx_t *c, yaml_node_t *n, const char *where, int64_t min_ns, int64_t *out)
{
    if (!pc_text(n)) {
        char got[64];
        pc_describe(n, got, sizeof got);
        pc_error(c, n, "%s: wrong type (expected %s, got %s)", where, VALUE_DURATION_EXPECTS, got);
        return false;
    }
    return dur_value(c, n, where, NULL, min_ns, out);
}

bool pc_node_rate(pctx_t *c, yaml_node_t *n, const char *where, double *out)
{
    if (!pc_text(n)) {
        char got[64];
        pc_describe(n, got, sizeof got);
        pc_error(c, n, "%s: wrong type (expected %s, got %s)", where, VALUE_RATE_EXPECTS, got);
        return false;
    }
    int rc = value_parse_rate(pc_text(n), out);
    return rc ? bad_value(c, n, where, NULL, rc, VALUE_RATE_EXPECTS) : true;
}

bool pc_rate(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double *out)
{
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, VALUE_RATE_EXPECTS, &vn);
    if (!t)
        return false;
    int rc = value_parse_rate(t, out);
    return rc ? bad_value(c, vn, where, key, rc, VALUE_RATE_EXPECTS) : true;
}

bool pc_pct(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double *out)
{
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, VALUE_PERCENT_EXPECTS, &vn);
    if (!t)
        return false;
    int rc = value_parse_percent(t, out);
    return rc ? bad_value(c, vn, where, key, rc, VALUE_PERCENT_EXPECTS) : true;
}

bool pc_num(pctx_t *c, yaml_node_t *map, const char *key, const char *where, double min, double max,
            double *out)
{
    char exp[96];
    snprintf(exp, sizeof exp, "a number from %g to %g", min, max);
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, exp, &vn);
    if (!t)
        return false;
    int rc = value_parse_number(t, min, max, out);
    return rc ? bad_value(c, vn, where, key, rc, exp) : true;
}

bool pc_bytes(pctx_t *c, yaml_node_t *map, const char *key, const char *where, int64_t min,
              int64_t max, int64_t *out)
{
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, VALUE_BYTES_EXPECTS, &vn);
    if (!t)
        return false;
    int64_t v;
    int rc = value_parse_bytes(t, &v);
    if (rc == 0 && (v < min || v > max))
        rc = SQ_ERANGE;
    if (rc == 0)
        *out = v;
    return rc ? bad_value(c, vn, where, key, rc, VALUE_BYTES_EXPECTS) : true;
}

bool pc_bool(pctx_t *c, yaml_node_t *map, const char *key, const char *where, bool *out)
{
    static const char *const names[] = {"false", "true", NULL};
    int v;
    if (!pc_enum(c, map, key, where, names, &v))
        return false;
    *out = v == 1;
    return true;
}

bool pc_enum(pctx_t *c, yaml_node_t *map, const char *key, const char *where,
             const char *const *names, int *out)
{
    char exp[256];
    size_t off = (size_t)snprintf(exp, sizeof exp, "one of");
    for (int i = 0; names[i] && off < sizeof exp; i++)
        off += (size_t)snprintf(exp + off, sizeof exp - off, "%s %s", i ? "," : "", names[i]);
    yaml_node_t *vn;
    const char *t = scalar_of(c, map, key, where, exp, &vn);
    if (!t)
        return false;
    for (int i = 0; names[i]; i++) {
        if (strcmp(names[i], t) == 0) {
            *out = i;
            return true;
        }
    }
    pc_error(c, vn, "%s.%s: unknown value (expected %s, got '%s')", where, key, exp, t);
    return false;
}

bool pc_name_ok(pctx_t *c, yaml_node_t *n, const char *where, const char *what)
{
    const char *t = pc_text(n);
    bool ok = t != NULL && strlen(t) <= 64;
    for (const char *s = t; ok && *s; s++)
        ok = (*s >= 'a' && *s <= 'z') || (*s >= 'A' && *s <= 'Z') || (*s >= '0' && *s <= '9') ||
             *s == '_' || *s == '-';
    if (!ok) {
        char got[64];
        pc_describe(n, got, sizeof got);
        pc_error(c, n, "%s: bad %s name (expected letters, digits, '-' or '_', at most 64, got %s)",
                 where, what, got);
    }
    return ok;
}

bool pc_ref(pctx_t *c, plan_ref_t *ref, yaml_node_t *n, const char *what)
{
    ref->index = -1;
    ref->pos = pc_pos(c, n);
    if (!pc_text(n)) {
        char got[64];
        pc_describe(n, got, sizeof got);
        pc_error(c, n, "%s: wrong type (expected a name, got %s)", what, got);
        return false;
    }
    ref->name = pmem_strdup(c, pc_text(n));
    return true;
}

bool pc_path(pctx_t *c, yaml_node_t *map, const char *key, const char *where, const char **out)
{
    const char *t;
    if (!pc_str(c, map, key, where, &t))
        return false;
    char dir[PATH_MAX], full[PATH_MAX * 2];
    snprintf(dir, sizeof dir, "%s", c->file);
    const char *d = dirname(dir);
    if (t[0] == '/' || strcmp(d, ".") == 0)
        *out = t;
    else {
        snprintf(full, sizeof full, "%s/%s", d, t);
        *out = pmem_strdup(c, full);
    }
    return true;
}
