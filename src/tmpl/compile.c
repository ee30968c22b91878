/* Template compilation: text -> literal and reference segments, with the byte offset of any
 * mistake so the plan can point at FILE:LINE:COL. */
#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "tmpl_int.h"

#define PICK_BOUND 1000000000000000000LL /* keeps hi - lo + 1 inside int64 */

/* Where compilation stands; err may be NULL. */
typedef struct {
    tmpl_t *t;
    const tmpl_env_t *env;
    tmpl_error_t *err;
} cc_t;

static int fail(cc_t *c, size_t offset, const char *fmt, ...) __attribute__((format(printf, 3, 4)));
static int fail(cc_t *c, size_t offset, const char *fmt, ...)
{
    if (c->err) {
        va_list ap;
        va_start(ap, fmt);
        c->err->offset = offset;
        vsnprintf(c->err->msg, sizeof(c->err->msg), fmt, ap);
        va_end(ap);
    }
    return SQ_EPARSE;
}

static tmpl_seg_t *add_seg(cc_t *c, enum tmpl_seg_kind kind)
{
    tmpl_t *t = c->t;
    if (t->n_segs == t->cap_segs) {
        size_t cap = t->cap_segs ? 2 * t->cap_segs : 8;
        tmpl_seg_t *grown = realloc(t->segs, cap * sizeof(*grown));
        if (!grown)
            return NULL;
        t->segs = grown;
        t->cap_segs = cap;
    }
    tmpl_seg_t *s = &t->segs[t->n_segs++];
    memset(s, 0, sizeof(*s));
    s->kind = kind;
    return s;
}

static int add_lit(cc_t *c, size_t from, size_t to)
{
    if (to <= from)
        return 0;
    tmpl_seg_t *s = add_seg(c, TMPL_LIT);
    if (!s)
        return SQ_ENOMEM;
    s->str = (tmpl_str_t){c->t->text + from, to - from};
    return 0;
}

static int add_item(cc_t *c, size_t from, size_t to)
{
    tmpl_t *t = c->t;
    if (t->n_items == t->cap_items) {
        size_t cap = t->cap_items ? 2 * t->cap_items : 8;
        tmpl_str_t *grown = realloc(t->items, cap * sizeof(*grown));
        if (!grown)
            return SQ_ENOMEM;
        t->items = grown;
        t->cap_items = cap;
    }
    t->items[t->n_items++] = (tmpl_str_t){t->text + from, to - from};
    return 0;
}

static void trim(const char *s, size_t *from, size_t *to)
{
    while (*from < *to && s[*from] == ' ')
        (*from)++;
    while (*to > *from && s[*to - 1] == ' ')
        (*to)--;
}

/* `[a, b, c]` between from and to (the brackets included). */
static int parse_items(cc_t *c, tmpl_seg_t *s, size_t from, size_t to)
{
    const char *x = c->t->text;
    if (to - from < 2 || x[to - 1] != ']')
        return fail(c, to, "a pick list ends with ']'");
    s->kind = TMPL_PICK_ITEMS;
    s->first = c->t->n_items;
    for (size_t at = from + 1; at < to;) {
        size_t end = at;
        while (end < to - 1 && x[end] != ',')
            end++;
        size_t a = at, b = end;
        trim(x, &a, &b);
        if (b == a)
            return fail(c, at, "empty item in a pick list");
        if (memchr(x + a, ']', b - a))
            return fail(c, a + (size_t)((char *)memchr(x + a, ']', b - a) - (x + a)),
                        "']' inside a pick list item");
        int rc = add_item(c, a, b);
        if (rc < 0)
            return rc;
        s->n++;
        at = end + 1;
        if (end == to - 1)
            break;
    }
    return 0;
}

/* A decimal integer in [from, to), within ±PICK_BOUND. */
static bool parse_int(const char *x, size_t from, size_t to, int64_t *v)
{
    char buf[32];
    if (to <= from || to - from >= sizeof(buf))
        return false;
    memcpy(buf, x + from, to - from);
    buf[to - from] = '\0';
    char *end;
    errno = 0;
    long long n = strtoll(buf, &end, 10);
    if (errno || *end || buf[0] == ' ' || buf[0] == '+' || n > PICK_BOUND || n < -PICK_BOUND)
        return false;
    *v = n;
    return true;
}

/* `lo..hi` between from and to. */
static int parse_range(cc_t *c, tmpl_seg_t *s, size_t from, size_t to, const char *dots)
{
    const char *x = c->t->text;
    size_t mid = (size_t)(dots - x);
    if (!parse_int(x, from, mid, &s->lo))
        return fail(c, from, "a range bound is an integer within ±1e18");
    if (!parse_int(x, mid + 2, to, &s->hi))
        return fail(c, mid + 2, "a range bound is an integer within ±1e18");
    if (s->hi < s->lo)
        return fail(c, from, "a range's low bound is above its high bound");
    s->kind = TMPL_PICK_RANGE;
    return 0;
}

/* `:0N` after agent or seq: zero-padded to N digits. */
static int parse_width(cc_t *c, tmpl_seg_t *s, size_t from, size_t to)
{
    const char *x = c->t->text;
    int64_t w = 0;
    if (to - from < 2 || x[from] != '0' || !parse_int(x, from + 1, to, &w) || w < 1 || w > 20)
        return fail(c, from, "a width is written :0N with N from 1 to 20, e.g. :06");
    s->width = (int)w;
    return 0;
}

static int resolver_seg(cc_t *c, const tmpl_resolver_t *r, size_t from, size_t to)
{
    tmpl_seg_t *s = add_seg(c, TMPL_RESOLVER);
    if (!s)
        return SQ_ENOMEM;
    s->res = r;
    s->str = (tmpl_str_t){c->t->text + from, to - from};
    return 0;
}

static int pick_seg(cc_t *c, size_t name_at, bool has_arg, size_t from, size_t to)
{
    const char *x = c->t->text;
    const tmpl_resolver_t *r = tmpl_env_resolver(c->env, "pick", 4);
    const char *dots = has_arg ? memmem(x + from, to - from, "..", 2) : NULL;
    if (has_arg && (x[from] == '[' || dots)) {
        tmpl_seg_t *s = add_seg(c, TMPL_PICK_ITEMS);
        if (!s)
            return SQ_ENOMEM;
        c->t->uses_rng = true;
        return x[from] == '[' ? parse_items(c, s, from, to) : parse_range(c, s, from, to, dots);
    }
    if (r)
        return resolver_seg(c, r, has_arg ? from : to, to);
    if (has_arg)
        return fail(c, from, "pick takes a list [a,b,c] or a range lo..hi");
    return fail(c, name_at,
                "{{pick}} without a list or range needs a pool of existing objects, "
                "and none is registered");
}

/* The name's own segment: built-ins, then registered lists and resolvers. */
static int named_seg(cc_t *c, size_t a, size_t name_end, bool has_arg, size_t from, size_t to)
{
    const char *x = c->t->text, *name = x + a;
    size_t len = name_end - a;
    static const struct {
        const char *name;
        enum tmpl_seg_kind kind;
    } plain[] = {{"agent", TMPL_AGENT},
                 {"seq", TMPL_SEQ},
                 {"now_ns", TMPL_NOW_NS},
                 {"now_ms", TMPL_NOW_MS},
                 {"phase", TMPL_PHASE}};
    for (size_t i = 0; i < sizeof(plain) / sizeof(plain[0]); i++) {
        if (strlen(plain[i].name) != len || memcmp(plain[i].name, name, len) != 0)
            continue;
        tmpl_seg_t *s = add_seg(c, plain[i].kind);
        if (!s)
            return SQ_ENOMEM;
        c->t->uses_now |= plain[i].kind == TMPL_NOW_NS || plain[i].kind == TMPL_NOW_MS;
        if (!has_arg)
            return 0;
        if (plain[i].kind == TMPL_AGENT || plain[i].kind == TMPL_SEQ)
            return parse_width(c, s, from, to);
        return fail(c, name_end, "%s takes no argument", plain[i].name);
    }
    if (len == 4 && memcmp(name, "pick", 4) == 0)
        return pick_seg(c, a, has_arg, from, to);
    const tmpl_list_t *l = tmpl_env_list(c->env, name, len);
    if (l && !has_arg) {
        tmpl_seg_t *s = add_seg(c, TMPL_LIST);
        if (!s)
            return SQ_ENOMEM;
        s->list = l;
        c->t->uses_rng = true;
        return 0;
    }
    if (l)
        return fail(c, name_end, "the list '%.*s' takes no argument", (int)len, name);
    const tmpl_resolver_t *r = tmpl_env_resolver(c->env, name, len);
    if (r)
        return resolver_seg(c, r, has_arg ? from : to, to);
    return fail(c, a,
                "unknown variable '%.*s' (expected agent, seq, now_ns, now_ms, phase, pick or a "
                "name from vars)",
                (int)len, name);
}

/* The inside of one reference, text[from, to). */
static int parse_ref(cc_t *c, size_t from, size_t to)
{
    const char *x = c->t->text;
    size_t a = from, b = to;
    trim(x, &a, &b);
    if (a == b)
        return fail(c, from, "empty reference: write a variable name inside {{ }}");
    const char *colon = memchr(x + a, ':', b - a);
    size_t name_end = colon ? (size_t)(colon - x) : b;
    size_t n = a;
    while (n < name_end && tmpl_name_ok(x + a, n - a + 1))
        n++;
    if (n < name_end || name_end == a)
        return fail(c, n, "'%c' cannot be part of a variable name (write {{{{ for a literal {{)",
                    n < name_end ? x[n] : ':');
    size_t arg_a = name_end + 1, arg_b = b;
    if (colon) {
        trim(x, &arg_a, &arg_b);
        if (arg_a == arg_b)
            return fail(c, name_end, "nothing after ':'");
    }
    return named_seg(c, a, name_end, colon != NULL, arg_a, arg_b);
}

static int compile_all(cc_t *c)
{
    const char *x = c->t->text;
    size_t n = strlen(x), lit = 0, i = 0;
    while (i + 1 < n) {
        if (x[i] != '{' || x[i + 1] != '{') {
            i++;
            continue;
        }
        bool escape = i + 3 < n && x[i + 2] == '{' && x[i + 3] == '{';
        int rc = add_lit(c, lit, escape ? i + 2 : i); /* an escape keeps one "{{" */
        if (rc < 0)
            return rc;
        if (escape) {
            lit = i = i + 4;
            continue;
        }
        const char *close = strstr(x + i + 2, "}}");
        if (!close)
            return fail(c, i, "'{{' is not closed by '}}' (write {{{{ for a literal {{)");
        rc = parse_ref(c, i + 2, (size_t)(close - x));
        if (rc < 0)
            return rc;
        lit = i = (size_t)(close - x) + 2;
    }
    return add_lit(c, lit, n);
}

int tmpl_compile(const tmpl_env_t *env, const char *text, tmpl_t **out, tmpl_error_t *err)
{
    if (!text || !out)
        return SQ_EINVAL;
    tmpl_t *t = calloc(1, sizeof(*t));
    if (!t || !(t->text = strdup(text))) {
        free(t);
        return SQ_ENOMEM;
    }
    cc_t c = {.t = t, .env = env, .err = err};
    int rc = compile_all(&c);
    if (rc < 0) {
        if (rc == SQ_ENOMEM)
            fail(&c, 0, "out of memory");
        tmpl_free(t);
        return rc;
    }
    *out = t;
    return 0;
}

void tmpl_free(tmpl_t *t)
{
    if (!t)
        return;
    free(t->text);
    free(t->segs);
    free(t->items);
    free(t);
}

bool tmpl_is_constant(const tmpl_t *t)
{
    for (size_t i = 0; i < t->n_segs; i++)
        if (t->segs[i].kind != TMPL_LIT)
            return false;
    return true;
}

bool tmpl_uses_rng(const tmpl_t *t)
{
    return t->uses_rng;
}

const char *tmpl_text(const tmpl_t *t)
{
    return t->text;
}
