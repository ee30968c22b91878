/* plan_load: reads a plan file and its includes with libyaml, applies --set overrides to the
 * top file's document, and hands each top-level section to its parser in a fixed order. */
#include <errno.h>
#include <libgen.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "plan_int.h"
#include "squall/err.h"

#define MAX_INCLUDE_DEPTH 16
#define MAX_FILES         64

/* Every file of a plan, read before any is parsed so overrides can reach into includes. */
typedef struct {
    char *real[MAX_INCLUDE_DEPTH]; /* realpath of each file being read, for cycles */
    int depth;
    yaml_document_t docs[MAX_FILES]; /* in parse order: includes before their includer */
    const char *files[MAX_FILES];
    size_t n;
} chain_t;

static int load_file(pctx_t *c, const char *path, plan_pos_t from, chain_t *ch);

/* libyaml's error, at its position: a reader error (invalid UTF-8, a NUL) has only a byte
 * offset; a scanner or parser error a mark. After either, an unclosed bracket or quote is named
 * where it started, since libyaml reports only where it gave up. */
static void yaml_syntax_error(pctx_t *c, yaml_parser_t *ps, const char *text, size_t len)
{
    plan_pos_t pos = {c->file, (int)ps->problem_mark.line + 1, (int)ps->problem_mark.column + 1};
    if (ps->error == YAML_READER_ERROR)
        pos = plan_text_pos(c->file, text, len, ps->problem_offset);
    plan_text_scan_t sc;
    plan_text_scan(text, len, &sc);
    char hint[96] = "";
    if (sc.unclosed) {
        plan_pos_t at = plan_text_pos(c->file, text, len, sc.at);
        snprintf(hint, sizeof hint, "; the %c opened at line %d, column %d is never closed",
                 sc.unclosed, at.line, at.col);
    }
    if (ps->context)
        pc_error_at(c, pos,
                    "YAML syntax: %s %s (expected valid YAML, got a syntax error at "
                    "line %d, column %d%s)",
                    ps->problem, ps->context, pos.line, pos.col, hint);
    else
        pc_error_at(c, pos, "YAML syntax: %s (expected valid YAML, got a syntax error%s)",
                    ps->problem ? ps->problem : "unreadable", hint);
}

/* A --set whose value may be a secret: a token, a credential header, a URL with user info. Its
 * value is never echoed in messages (they end up in CI logs). */
static bool secret_set(const char *key, const char *value)
{
    const char *last = strrchr(key, '.');
    last = last ? last + 1 : key;
    return strstr(key, "token") || strchr(value, '@') || !strcasecmp(last, "authorization") ||
           !strcasecmp(last, "proxy-authorization") || !strcasecmp(last, "cookie");
}

/* The whole file, at most PLAN_MAX_BYTES; an error (reported at `from` for an include). */
static int read_text(pctx_t *c, const char *path, plan_pos_t from, char **text, size_t *len)
{
    /* The top file is named by the error's position already; an include by its own path. */
    char what[PATH_MAX + 32];
    if (from.file)
        snprintf(what, sizeof what, "include: cannot read '%s'", path);
    else
        snprintf(what, sizeof what, "cannot read plan");
    FILE *fp = fopen(path, "rb");
    char *buf = fp ? malloc(PLAN_MAX_BYTES + 1) : NULL;
    size_t n = buf ? fread(buf, 1, PLAN_MAX_BYTES + 1, fp) : 0;
    int err = !fp ? errno : !buf ? ENOMEM : ferror(fp) ? errno : 0;
    if (fp)
        fclose(fp);
    plan_pos_t at = from.file ? from : (plan_pos_t){c->file, 0, 0};
    if (err || n > PLAN_MAX_BYTES) {
        free(buf);
        if (err == ENOMEM)
            return SQ_ENOMEM;
        if (err)
            pc_error_at(c, at, "%s (expected a readable file, got %s)", what, strerror(err));
        else
            pc_error_at(c, at, "%s (expected a plan file of at most %d MiB, got a larger one)",
                        what, PLAN_MAX_BYTES >> 20);
        return SQ_EIO;
    }
    buf[n] = '\0';
    *text = buf;
    *len = n;
    return 0;
}

/* include: PATH or [PATH, ...], relative to the including file's directory. */
static int do_includes(pctx_t *c, yaml_node_t *n, const char *path, chain_t *ch)
{
    bool seq = n->type == YAML_SEQUENCE_NODE;
    size_t count = seq ? (size_t)(n->data.sequence.items.top - n->data.sequence.items.start) : 1;
    yaml_document_t *doc = c->doc;
    const char *file = c->file;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = seq ? yaml_document_get_node(doc, n->data.sequence.items.start[i]) : n;
        if (!pc_text(it)) {
            char got[64];
            pc_describe(it, got, sizeof got);
            pc_error(c, it,
                     "include: wrong type (expected a file path or a list of them, got "
                     "%s)",
                     got);
            continue;
        }
        char dir[PATH_MAX], full[PATH_MAX * 2];
        snprintf(dir, sizeof dir, "%s", path);
        const char *inc = pc_text(it);
        const char *d = dirname(dir);
        if (inc[0] == '/' || strcmp(d, ".") == 0)
            snprintf(full, sizeof full, "%s", inc);
        else
            snprintf(full, sizeof full, "%s/%s", d, inc);
        /* An include that fails has printed its errors; they make the load fail later. */
        int r = load_file(c, full, pc_pos(c, it), ch);
        c->doc = doc; /* back to this file */
        c->file = file;
        if (r == SQ_ENOMEM)
            return r;
    }
    return 0;
}

static void parse_seed(pctx_t *c, yaml_node_t *root)
{
    yaml_node_t *n = pc_get(c, root, "seed");
    if (!n)
        return;
    int64_t v;
    const char *t = pc_text(n);
    if (!t || value_parse_int(t, 0, INT64_MAX, &v) != 0) {
        char got[64];
        pc_describe(n, got, sizeof got);
        pc_error(c, n, "seed: malformed value (expected an integer from 0 to %lld, got %s)",
                 (long long)INT64_MAX, got);
        return;
    }
    c->p->seed = (uint64_t)v;
    c->p->has_seed = true;
}

/* The sections of one document, in an order that does not depend on the file's. */
static void parse_root(pctx_t *c, yaml_node_t *root)
{
    pc_check_keys(c, root, "plan", plan_keys(PLAN_KEYS_ROOT));
    parse_seed(c, root);
    static const struct {
        const char *key;
        void (*parse)(pctx_t *, yaml_node_t *);
    } parsers[] = {{"target", plan_parse_target},         {"vars", plan_parse_vars},
                   {"requests", plan_parse_requests},     {"phases", plan_parse_phases},
                   {"objectives", plan_parse_objectives}, {"brakes", plan_parse_brakes},
                   {"accept", plan_parse_accept},         {"observe", plan_parse_observe}};
    for (size_t i = 0; i < sizeof parsers / sizeof parsers[0]; i++) {
        yaml_node_t *n = pc_get(c, root, parsers[i].key);
        if (n)
            parsers[i].parse(c, n);
    }
}

/* Reads one file: cycle check, YAML, overrides (top file only), includes, then sections. */
static int read_doc(pctx_t *c, const char *path, plan_pos_t from, yaml_document_t *doc)
{
    char *text;
    size_t len;
    int rc = read_text(c, path, from, &text, &len);
    if (rc)
        return rc;
    plan_text_scan_t sc;
    plan_text_scan(text, len, &sc);
    if (sc.too_deep) {
        pc_error_at(c, plan_text_pos(c->file, text, len, sc.at),
                    "plan: brackets nested too deep (expected at most %d levels of [ and {, got "
                    "more here)",
                    PLAN_MAX_NESTING);
        free(text);
        return SQ_EPARSE;
    }
    yaml_parser_t ps;
    if (!yaml_parser_initialize(&ps)) {
        free(text);
        return SQ_ENOMEM;
    }
    yaml_parser_set_input_string(&ps, (const unsigned char *)text, len);
    int ok = yaml_parser_load(&ps, doc);
    if (!ok)
        yaml_syntax_error(c, &ps, text, len);
    yaml_document_t extra;
    if (ok && yaml_parser_load(&ps, &extra)) {
        /* libyaml loads one document per call; a second one would be silently ignored. */
        yaml_node_t *root = yaml_document_get_root_node(&extra);
        if (root)
            pc_error_at(c,
                        (plan_pos_t){c->file, (int)root->start_mark.line + 1,
                                     (int)root->start_mark.column + 1},
                        "plan: a second YAML document (expected one document per file, got "
                        "another after '---')");
        yaml_document_delete(&extra);
    }
    yaml_parser_delete(&ps);
    free(text);
    return ok ? 0 : SQ_EPARSE;
}

/* Refuses a file already being read (a cycle) or nested too deep. */
static bool may_enter(pctx_t *c, const char *real, plan_pos_t from, chain_t *ch, const char *path)
{
    for (int i = 0; real && i < ch->depth; i++)
        if (strcmp(ch->real[i], real) == 0) {
            pc_error_at(c, from,
                        "include: cycle through '%s' (expected a file not already "
                        "being read, got one of its includers)",
                        path);
            return false;
        }
    if (ch->depth >= MAX_INCLUDE_DEPTH || ch->n >= MAX_FILES) {
        pc_error_at(c, from, "include: too many files (expected at most %d levels and %d files)",
                    MAX_INCLUDE_DEPTH, MAX_FILES);
        return false;
    }
    return true;
}

/* Reads one file and, first, the files it includes; appends them all to ch->docs. */
static int load_file(pctx_t *c, const char *path, plan_pos_t from, chain_t *ch)
{
    c->file = pmem_strdup(c, path);
    if (c->file && c->n_files < PC_MAX_FILES)
        c->files[c->n_files++] = c->file;
    char *real = realpath(path, NULL);
    yaml_document_t doc;
    int rc = may_enter(c, real, from, ch, path) ? read_doc(c, path, from, &doc) : SQ_EPARSE;
    if (rc) {
        free(real);
        return rc;
    }
    ch->real[ch->depth++] = real ? real : strdup(path);
    const char *file = c->file;
    c->doc = &doc;
    yaml_node_t *root = yaml_document_get_root_node(&doc);
    if (!root)
        pc_error_at(c, (plan_pos_t){c->file, 1, 1},
                    "plan: empty document (expected a mapping with target, requests and "
                    "phases, got nothing)");
    else if (pc_expect_map(c, root, "plan") && pc_get(c, root, "include"))
        rc = do_includes(c, pc_get(c, root, "include"), path, ch);
    free(ch->real[--ch->depth]);
    if (ch->n >= MAX_FILES) { /* an include filled the table */
        yaml_document_delete(&doc);
        return rc;
    }
    ch->docs[ch->n] = doc;
    ch->files[ch->n++] = file;
    return rc;
}

/* Each override goes to the last file (the includer wins) whose document already holds the
 * path's parent, so phases.steady.rate reaches a phase defined in an included file; failing
 * that, to the top file, where missing mapping keys are created. */
static void apply_overrides(pctx_t *c, chain_t *ch, const plan_override_t *ov, size_t n)
{
    for (size_t k = 0; k < n && ch->n > 0; k++) {
        size_t d = ch->n - 1;
        for (size_t i = ch->n; i-- > 0;) {
            c->doc = &ch->docs[i];
            if (plan_override_fits(c, &ov[k])) {
                d = i;
                break;
            }
        }
        c->doc = &ch->docs[d];
        c->file = ch->files[d];
        plan_apply_override(c, k, &ov[k]);
    }
}

/* Parses every document in order, then releases them. */
static void parse_all(pctx_t *c, chain_t *ch)
{
    for (size_t i = 0; i < ch->n; i++) {
        c->doc = &ch->docs[i];
        c->file = ch->files[i];
        yaml_node_t *root = yaml_document_get_root_node(c->doc);
        if (root && root->type == YAML_MAPPING_NODE && !c->nomem)
            parse_root(c, root);
        yaml_document_delete(&ch->docs[i]);
    }
    ch->n = 0;
}

static void set_defaults(plan_t *p)
{
    p->target.http = PLAN_HTTP_1_1;
    p->target.connections = 16;
    p->target.timeout_ns = INT64_C(10000000000);
    p->target.max_body = INT64_C(16) << 20;
    p->target.pos = (plan_pos_t){p->path, 1, 1};
}

int plan_load(const char *path, const plan_override_t *overrides, size_t n, plan_t **out, out_t *o)
{
    *out = NULL;
    plan_t *p = calloc(1, sizeof(*p));
    if (!p)
        return SQ_ENOMEM;
    pctx_t c = {.p = p, .o = o};
    p->path = pmem_strdup(&c, path);
    set_defaults(p);
    c.set_names = calloc(n + 1, sizeof(*c.set_names));
    for (size_t k = 0; c.set_names && k < n; k++) {
        char buf[512];
        snprintf(buf, sizeof buf, "--set #%zu %s=%s", k + 1, overrides[k].key,
                 secret_set(overrides[k].key, overrides[k].value) ? "(not shown)"
                                                                  : overrides[k].value);
        c.set_names[k] = pmem_strdup(&c, buf);
    }
    c.n_set = c.set_names ? n : 0;
    chain_t *ch = calloc(1, sizeof(*ch));
    int rc = c.set_names && ch ? load_file(&c, path, (plan_pos_t){NULL, 0, 0}, ch) : SQ_ENOMEM;
    if (ch) {
        apply_overrides(&c, ch, overrides, c.n_set);
        parse_all(&c, ch);
        free(ch);
    }
    c.file = p->path;
    /* Whole-plan checks on a file that did not parse would only repeat its syntax error. */
    if (rc == 0 && !c.nomem)
        plan_check_whole(&c);
    pc_flush_errors(&c);
    free(c.set_names);
    if (c.nomem || rc == SQ_ENOMEM) {
        out_error(o, "out of memory while reading %s", path);
        rc = SQ_ENOMEM;
    } else if (!rc && c.errors)
        rc = SQ_EPARSE;
    if (rc) {
        plan_free(p);
        return rc;
    }
    *out = p;
    return 0;
}

void plan_free(plan_t *p)
{
    if (!p)
        return;
    pmem_free(p->mem);
    free(p);
}
