/* Names and templates for a derived plan: class and variable names from the path's words, and
 * each class's path template with its variables as picks, word lists or the fleet's agent. */
#include <stdio.h>
#include <string.h>

#include "prof_int.h"

/* Letters, digits and '-' only, lower case, at most 40 characters; "" when nothing is left. */
static void sanitize(char *d, size_t len, const char *s)
{
    size_t o = 0;
    for (; *s && o + 1 < len && o < 40; s++) {
        char c = *s;
        if (c >= 'A' && c <= 'Z')
            c = (char)(c - 'A' + 'a');
        if (!((c >= 'a' && c <= 'z') || (c >= '0' && c <= '9')))
            c = '-';
        if (c == '-' && (o == 0 || d[o - 1] == '-'))
            continue;
        d[o++] = c;
    }
    while (o > 0 && d[o - 1] == '-')
        o--;
    d[o] = '\0';
}

/* "gateways" -> "gateway", "policies" -> "policy"; short words and "...ss" stay. */
static void singular(char *w)
{
    size_t n = strlen(w);
    if (n > 4 && strcmp(w + n - 3, "ies") == 0)
        strcpy(w + n - 3, "y");
    else if (n > 3 && w[n - 1] == 's' && w[n - 2] != 's')
        w[n - 1] = '\0';
}

/* The nearest literal word at or above node, sanitised, or "". */
static void last_word(const prof_trie_t *t, uint32_t node, char *d, size_t len)
{
    d[0] = '\0';
    for (uint32_t n = node; n != 0 && n != PROF_NONE && !d[0]; n = t->nodes[n].parent)
        if (t->nodes[n].var == PROF_NONE && t->nodes[n].lex == LEX_WORD)
            sanitize(d, len, t->nodes[n].text);
}

static bool taken(const prof_t *p, const char *name, size_t upto_cls, size_t upto_var)
{
    static const char *const builtin[] = {"agent", "seq", "now_ns", "now_ms", "phase", "pick"};
    for (size_t i = 0; i < sizeof builtin / sizeof builtin[0]; i++)
        if (strcmp(name, builtin[i]) == 0)
            return true;
    for (size_t i = 0; i < upto_cls; i++)
        if (strcmp(p->cls[i].name, name) == 0)
            return true;
    for (size_t i = 0; i < upto_var; i++)
        if (strcmp(p->trie.vars[i].name, name) == 0)
            return true;
    return false;
}

/* Appends -2, -3, ... to name (room for at least 48 bytes) until no other thing has it. */
static void unique(const prof_t *p, char *name, size_t upto_cls, size_t upto_var)
{
    size_t bl = strlen(name) > 36 ? 36 : strlen(name);
    for (int k = 2; taken(p, name, upto_cls, upto_var) && k < 1000000; k++) {
        char suffix[12];
        snprintf(suffix, sizeof suffix, "-%d", k);
        memcpy(name + bl, suffix, strlen(suffix) + 1);
    }
}

/* A variable's values go into a word list (vars:) unless they are plain numbers a range can
 * produce. */
static bool needs_list(const prof_node_t *k, const prof_var_t *v)
{
    if (k->lex != LEX_NUM && k->lex != LEX_PNUM)
        return true;
    return v->lead0 && v->wmin == v->wmax && !v->more;
}

void prof_name_things(prof_t *p)
{
    prof_trie_t *t = &p->trie;
    for (size_t i = 0; i < t->n_vars; i++)
        t->vars[i].name[0] = '\0';
    size_t named = 0;
    for (size_t n = 1; n < t->n; n++) {
        const prof_node_t *k = &t->nodes[n];
        if (k->dead || k->var == PROF_NONE || !needs_list(k, &t->vars[k->var]))
            continue;
        prof_var_t *v = &t->vars[k->var];
        last_word(t, k->parent, v->name, sizeof v->name);
        singular(v->name);
        if (!v->name[0])
            snprintf(v->name, sizeof v->name, "value");
        unique(p, v->name, 0, k->var);
        named++;
    }
    (void)named;
    for (size_t i = 0; i < p->n_cls; i++) {
        prof_class_t *c = &p->cls[i];
        char w[48], m[40];
        last_word(t, c->node, w, sizeof w);
        if (c->kind == PLAN_GET || c->kind == PLAN_WRITE)
            singular(w);
        sanitize(m, sizeof m, c->method);
        const char *verb = c->kind == PLAN_GET     ? "get"
                           : c->kind == PLAN_LIST  ? "list"
                           : c->kind == PLAN_WATCH ? "watch"
                                                   : m;
        snprintf(c->name, sizeof c->name, "%.10s-%.30s", verb, w[0] ? w : "root");
        unique(p, c->name, i, t->n_vars);
    }
}

/* Appends text to buf at *o, writing "{{" as the template's literal "{{{{". */
static void put_literal(char *buf, size_t len, size_t *o, const char *s)
{
    for (; *s && *o + 3 < len; s++) {
        if (s[0] == '{' && s[1] == '{') {
            memcpy(buf + *o, "{{{{", 4);
            *o += 4;
            s++;
            continue;
        }
        buf[(*o)++] = *s;
    }
    buf[*o] = '\0';
}

static void put_var(const prof_t *p, uint32_t n, bool agent, char *buf, size_t len, size_t *o)
{
    const prof_node_t *k = &p->trie.nodes[n];
    const prof_var_t *v = &p->trie.vars[k->var];
    if (k->lex == LEX_PNUM)
        put_literal(buf, len, o, k->text);
    int w;
    if (agent && v->lead0 && v->wmin == v->wmax)
        w = snprintf(buf + *o, len - *o, "{{agent:0%d}}", v->wmax);
    else if (agent)
        w = snprintf(buf + *o, len - *o, "{{agent}}");
    else if (needs_list(k, v))
        w = snprintf(buf + *o, len - *o, "{{%s}}", v->name);
    else
        w = snprintf(buf + *o, len - *o, "{{pick:%lld..%lld}}", (long long)v->min,
                     (long long)v->max);
    *o += w > 0 && (size_t)w < len - *o ? (size_t)w : 0;
}

int prof_render_path(const prof_t *p, const prof_class_t *c, const prof_fleet_t *f, char *buf,
                     size_t len)
{
    uint32_t chain[PROF_MAX_DEPTH + 1];
    size_t depth = 0, o = 0;
    for (uint32_t n = c->node; n != 0 && depth <= PROF_MAX_DEPTH; n = p->trie.nodes[n].parent)
        chain[depth++] = n;
    buf[0] = '\0';
    if (depth == 0)
        put_literal(buf, len, &o, "/");
    while (depth > 0) {
        uint32_t n = chain[--depth];
        put_literal(buf, len, &o, "/");
        if (p->trie.nodes[n].var == PROF_NONE)
            put_literal(buf, len, &o, p->trie.nodes[n].text);
        else
            put_var(p, n, f && f->agent_var == n, buf, len, &o);
    }
    if (c->kind == PLAN_WATCH) {
        put_literal(buf, len, &o, "?");
        put_literal(buf, len, &o, p->cfg.watch_param);
        put_literal(buf, len, &o, "=");
        put_literal(buf, len, &o, c->watch_value[0] ? c->watch_value : "1");
    }
    return o + 4 < len ? 0 : -1;
}
