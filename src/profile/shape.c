/* Path shapes: a trie of path segments in which segments that vary become variables, by their
 * look (numbers, ids) or because many word siblings lead to the same sub-shapes. */
#include <stdlib.h>
#include <string.h>

#include "prof_int.h"

/* ---- how a segment looks --------------------------------------------------------------- */

static bool is_digit(char c)
{
    return c >= '0' && c <= '9';
}

static bool is_hex(char c)
{
    return is_digit(c) || (c >= 'a' && c <= 'f') || (c >= 'A' && c <= 'F');
}

static bool is_alpha(char c)
{
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z');
}

static bool uuid_like(const char *s, size_t n)
{
    if (n != 36)
        return false;
    for (size_t i = 0; i < n; i++)
        if ((i == 8 || i == 13 || i == 18 || i == 23) ? s[i] != '-' : !is_hex(s[i]))
            return false;
    return true;
}

/* Long runs of letters and digits mixed (random ids, hashes in base 16 or 62). */
static enum prof_lex token_like(const char *s, size_t n)
{
    bool hex = true, digit = false, alpha = false;
    for (size_t i = 0; i < n; i++) {
        char c = s[i];
        if (!is_digit(c) && !is_alpha(c) && c != '_' && c != '-')
            return LEX_WORD;
        hex = hex && is_hex(c);
        digit = digit || is_digit(c);
        alpha = alpha || is_alpha(c);
    }
    if (hex && digit && alpha && n >= 16)
        return LEX_HEX;
    return digit && alpha && n >= 20 ? LEX_TOKEN : LEX_WORD;
}

enum prof_lex prof_lex_of(const char *s, size_t n)
{
    size_t d = 0;
    while (d < n && is_digit(s[n - 1 - d]))
        d++;
    if (d == n && n > 0 && n <= 18)
        return LEX_NUM;
    if (uuid_like(s, n))
        return LEX_UUID;
    enum prof_lex t = token_like(s, n);
    if (t != LEX_WORD)
        return t;
    /* A word prefix then digits: gw-17, node7. */
    if (d > 0 && d <= 18 && is_alpha(s[0])) {
        for (size_t i = 1; i < n - d; i++)
            if (!is_alpha(s[i]) && s[i] != '-' && s[i] != '_' && s[i] != '.')
                return LEX_WORD;
        return LEX_PNUM;
    }
    return LEX_WORD;
}

/* ---- the trie -------------------------------------------------------------------------- */

int prof_trie_init(prof_trie_t *t)
{
    memset(t, 0, sizeof *t);
    t->cap = 1024;
    t->nodes = calloc(t->cap, sizeof *t->nodes);
    if (!t->nodes)
        return -1;
    t->n = 1; /* the root: "/" */
    t->nodes[0] = (prof_node_t){.parent = PROF_NONE,
                                .child = PROF_NONE,
                                .next = PROF_NONE,
                                .var = PROF_NONE,
                                .cls = PROF_NONE};
    return 0;
}

void prof_trie_close(prof_trie_t *t)
{
    for (size_t i = 0; i < t->n; i++)
        free(t->nodes[i].text);
    for (size_t i = 0; i < t->n_vars; i++)
        for (size_t k = 0; k < t->vars[i].n_values; k++)
            free(t->vars[i].values[k]);
    free(t->nodes);
    free(t->vars);
    memset(t, 0, sizeof *t);
}

static uint32_t new_node(prof_trie_t *t, uint32_t parent, const char *text, size_t n,
                         enum prof_lex lex, bool var)
{
    if (t->n >= PROF_MAX_NODES)
        return PROF_NONE;
    if (t->n == t->cap) {
        prof_node_t *g = realloc(t->nodes, 2 * t->cap * sizeof *g);
        if (!g)
            return PROF_NONE;
        t->nodes = g;
        t->cap *= 2;
    }
    if (var && t->n_vars == t->cap_vars) {
        size_t cap = t->cap_vars ? 2 * t->cap_vars : 64;
        prof_var_t *g = realloc(t->vars, cap * sizeof *g);
        if (!g)
            return PROF_NONE;
        t->vars = g;
        t->cap_vars = cap;
    }
    char *copy = malloc(n + 1);
    if (!copy)
        return PROF_NONE;
    memcpy(copy, text, n);
    copy[n] = '\0';
    uint32_t i = (uint32_t)t->n++;
    prof_node_t *p = &t->nodes[parent];
    t->nodes[i] = (prof_node_t){.text = copy,
                                .parent = parent,
                                .child = PROF_NONE,
                                .next = p->child,
                                .var = PROF_NONE,
                                .cls = PROF_NONE,
                                .lex = (uint8_t)lex};
    p->child = i;
    if (var) {
        t->vars[t->n_vars] = (prof_var_t){.min = INT64_MAX, .max = INT64_MIN, .wmin = 99};
        t->nodes[i].var = (uint32_t)t->n_vars++;
    }
    return i;
}

/* A child of `parent`: the literal `s`, or (var) the variable of this look and prefix. */
static uint32_t find_child(const prof_trie_t *t, uint32_t parent, const char *s, size_t n,
                           enum prof_lex lex, bool var)
{
    for (uint32_t c = t->nodes[parent].child; c != PROF_NONE; c = t->nodes[c].next) {
        const prof_node_t *k = &t->nodes[c];
        if ((k->var != PROF_NONE) != var || (var && k->lex != lex))
            continue;
        if (var && lex != LEX_PNUM)
            return c;
        if (strlen(k->text) == n && memcmp(k->text, s, n) == 0)
            return c;
    }
    return PROF_NONE;
}

static void var_add(prof_trie_t *t, uint32_t node, const char *s, size_t n)
{
    prof_node_t *k = &t->nodes[node];
    prof_var_t *v = &t->vars[k->var];
    if (k->lex == LEX_NUM || k->lex == LEX_PNUM) {
        size_t d = 0;
        while (d < n && is_digit(s[n - 1 - d]))
            d++;
        int64_t x = 0;
        for (size_t i = n - d; i < n; i++)
            x = x * 10 + (s[i] - '0');
        v->min = x < v->min ? x : v->min;
        v->max = x > v->max ? x : v->max;
        v->wmin = (int)d < v->wmin ? (int)d : v->wmin;
        v->wmax = (int)d > v->wmax ? (int)d : v->wmax;
        v->lead0 = v->lead0 || (d > 1 && s[n - d] == '0');
    }
    uint64_t h = prof_hash(s, n, 0);
    for (size_t i = 0; i < v->n_values; i++)
        if (v->vhash[i] == h && strlen(v->values[i]) == n && memcmp(v->values[i], s, n) == 0)
            return;
    if (v->n_values == PROF_VALUES || !(v->values[v->n_values] = malloc(n + 1))) {
        v->more = true;
        return;
    }
    memcpy(v->values[v->n_values], s, n);
    v->values[v->n_values][n] = '\0';
    v->vhash[v->n_values++] = h;
}

static void var_merge(prof_trie_t *t, prof_var_t *d, const prof_var_t *s)
{
    d->min = s->min < d->min ? s->min : d->min;
    d->max = s->max > d->max ? s->max : d->max;
    d->wmin = s->wmin < d->wmin ? s->wmin : d->wmin;
    d->wmax = s->wmax > d->wmax ? s->wmax : d->wmax;
    d->lead0 = d->lead0 || s->lead0;
    d->more = d->more || s->more;
    (void)t;
    for (size_t i = 0; i < s->n_values; i++) {
        bool seen = false;
        for (size_t k = 0; k < d->n_values && !seen; k++)
            seen = d->vhash[k] == s->vhash[i] && strcmp(d->values[k], s->values[i]) == 0;
        if (seen)
            continue;
        char *c = d->n_values < PROF_VALUES ? strdup(s->values[i]) : NULL;
        if (!c) {
            d->more = true;
            continue;
        }
        d->vhash[d->n_values] = s->vhash[i];
        d->values[d->n_values++] = c;
    }
}

/* Unlinks child c from its parent's list. */
static void unlink_child(prof_trie_t *t, uint32_t c)
{
    uint32_t *at = &t->nodes[t->nodes[c].parent].child;
    while (*at != c)
        at = &t->nodes[*at].next;
    *at = t->nodes[c].next;
    t->nodes[c].next = PROF_NONE;
}

/* Moves everything below (and the counts of) src into dst; src is left dead. */
static void merge_into(prof_trie_t *t, uint32_t dst, uint32_t src)
{
    prof_node_t *d = &t->nodes[dst], *s = &t->nodes[src];
    d->count += s->count;
    d->ends = d->ends || s->ends;
    if (d->var != PROF_NONE && s->var != PROF_NONE)
        var_merge(t, &t->vars[d->var], &t->vars[s->var]);
    s->dead = true;
    uint32_t c = s->child;
    s->child = PROF_NONE;
    while (c != PROF_NONE) {
        uint32_t next = t->nodes[c].next;
        prof_node_t *k = &t->nodes[c];
        bool var = k->var != PROF_NONE;
        uint32_t same = find_child(t, dst, k->text, strlen(k->text), (enum prof_lex)k->lex, var);
        if (same != PROF_NONE) {
            merge_into(t, same, c);
        } else { /* adopt it */
            k->parent = dst;
            k->next = t->nodes[dst].child;
            t->nodes[dst].child = c;
        }
        c = next;
    }
}

/* The word variable among parent's children, made when missing. */
static uint32_t word_var(prof_trie_t *t, uint32_t parent)
{
    uint32_t w = find_child(t, parent, "", 0, LEX_WORD, true);
    return w != PROF_NONE ? w : new_node(t, parent, "", 0, LEX_WORD, true);
}

/* Turns the literal children of `parent` for which pick() is true into one word variable. */
static void words_to_var(prof_trie_t *t, uint32_t parent,
                         bool (*pick)(const prof_trie_t *, uint32_t, uint64_t), uint64_t arg)
{
    uint32_t w = word_var(t, parent);
    if (w == PROF_NONE)
        return;
    uint32_t c = t->nodes[parent].child;
    while (c != PROF_NONE) {
        uint32_t next = t->nodes[c].next;
        if (c != w && t->nodes[c].var == PROF_NONE && pick(t, c, arg)) {
            var_add(t, w, t->nodes[c].text, strlen(t->nodes[c].text));
            unlink_child(t, c);
            merge_into(t, w, c);
        }
        c = next;
    }
}

static bool any_word(const prof_trie_t *t, uint32_t c, uint64_t arg)
{
    (void)arg;
    return t->nodes[c].lex == LEX_WORD;
}

static size_t literal_children(const prof_trie_t *t, uint32_t parent)
{
    size_t n = 0;
    for (uint32_t c = t->nodes[parent].child; c != PROF_NONE; c = t->nodes[c].next)
        n += t->nodes[c].var == PROF_NONE;
    return n;
}

/* One segment below `node`: the child it goes to, made when new. */
static uint32_t step(prof_trie_t *t, uint32_t node, const char *s, size_t n)
{
    enum prof_lex lex = prof_lex_of(s, n);
    bool var = lex != LEX_WORD;
    /* A variable's text is its PNUM prefix, else empty: the look alone names it. */
    size_t pn = var && lex != LEX_PNUM ? 0 : n;
    if (lex == LEX_PNUM)
        while (pn > 0 && is_digit(s[pn - 1]))
            pn--;
    uint32_t c = find_child(t, node, s, pn, lex, var);
    if (c == PROF_NONE && !var) {
        c = find_child(t, node, "", 0, LEX_WORD, true); /* words already collapsed here */
        if (c == PROF_NONE && literal_children(t, node) >= PROF_WORD_CAP) {
            words_to_var(t, node, any_word, 0);
            c = find_child(t, node, "", 0, LEX_WORD, true);
        }
        var = c != PROF_NONE;
    }
    if (c == PROF_NONE)
        c = new_node(t, node, s, pn, lex, var);
    if (c != PROF_NONE && var)
        var_add(t, c, s, n);
    return c;
}

/* Calls each() on every segment of a path's part before '?' ("/a/b/" has "a", "b", ""), until it
 * returns PROF_NONE; returns the last node, or PROF_NONE. */
static uint32_t walk(prof_trie_t *t, const char *path,
                     uint32_t (*each)(prof_trie_t *, uint32_t, const char *, size_t))
{
    const char *s = path + 1, *end = s + strcspn(s, "?");
    uint32_t node = 0;
    if (s == end)
        return node;
    for (int depth = 1;; depth++) {
        const char *slash = memchr(s, '/', (size_t)(end - s));
        const char *e = slash ? slash : end;
        if (depth > PROF_MAX_DEPTH || (node = each(t, node, s, (size_t)(e - s))) == PROF_NONE)
            return PROF_NONE;
        if (!slash)
            return node;
        s = slash + 1;
    }
}

static uint32_t add_step(prof_trie_t *t, uint32_t node, const char *s, size_t n)
{
    uint32_t c = step(t, node, s, n);
    if (c != PROF_NONE)
        t->nodes[c].count++;
    return c;
}

int prof_trie_add(prof_trie_t *t, const char *path)
{
    uint32_t node = walk(t, path, add_step);
    if (node == PROF_NONE) {
        t->left_out++;
        return -1;
    }
    t->nodes[0].count++;
    t->nodes[node].ends = true;
    return 0;
}

static uint32_t match_step(prof_trie_t *t, uint32_t node, const char *s, size_t n)
{
    uint32_t c = find_child(t, node, s, n, LEX_WORD, false);
    if (c != PROF_NONE)
        return c;
    enum prof_lex lex = prof_lex_of(s, n);
    size_t pn = n;
    if (lex == LEX_PNUM)
        while (pn > 0 && is_digit(s[pn - 1]))
            pn--;
    return find_child(t, node, s, pn, lex, true);
}

uint32_t prof_trie_match(const prof_trie_t *t, const char *path)
{
    return walk((prof_trie_t *)t, path, match_step); /* match_step does not modify */
}

bool prof_trie_collection(const prof_trie_t *t, uint32_t node)
{
    for (uint32_t c = t->nodes[node].child; c != PROF_NONE; c = t->nodes[c].next)
        if (t->nodes[c].var != PROF_NONE)
            return true;
    return false;
}

/* ---- finishing the shapes -------------------------------------------------------------- */

/* What lies below a node, as a bottom-k sketch of its descendants' relative paths (the SK
 * smallest hashes; exact for small sub-shapes), so siblings can be compared by Jaccard
 * similarity (Broder, "On the resemblance and containment of documents", 1997). Whether a
 * path ends at a node is left out: a site whose collection nobody listed is still a site. */
#define SK 32
typedef struct {
    uint64_t h[SK];
    size_t n;
} sketch_t;

static uint64_t mix64(uint64_t x)
{
    x ^= x >> 30;
    x *= UINT64_C(0xbf58476d1ce4e5b9);
    x ^= x >> 27;
    x *= UINT64_C(0x94d049bb133111eb);
    return x ^ (x >> 31);
}

static void sk_add(sketch_t *s, uint64_t h)
{
    size_t i = 0;
    while (i < s->n && s->h[i] < h)
        i++;
    if ((i < s->n && s->h[i] == h) || i == SK)
        return;
    size_t n = s->n < SK ? s->n : SK - 1;
    memmove(s->h + i + 1, s->h + i, (n - i) * sizeof s->h[0]);
    s->h[i] = h;
    s->n = n + 1;
}

static void sk_union(sketch_t *d, const sketch_t *s)
{
    for (size_t i = 0; i < s->n; i++)
        sk_add(d, s->h[i]);
}

/* |A ∩ B| / |A ∪ B| estimated on the bottom-SK of the union. */
static double sk_jaccard(const sketch_t *a, const sketch_t *b)
{
    sketch_t u = *a;
    sk_union(&u, b);
    if (u.n == 0)
        return 1;
    size_t both = 0;
    for (size_t i = 0; i < u.n; i++) {
        bool in_a = false, in_b = false;
        for (size_t k = 0; k < a->n && !in_a; k++)
            in_a = a->h[k] == u.h[i];
        for (size_t k = 0; k < b->n && !in_b; k++)
            in_b = b->h[k] == u.h[i];
        both += in_a && in_b;
    }
    return (double)both / (double)u.n;
}

static uint64_t child_key(const prof_trie_t *t, uint32_t c)
{
    const prof_node_t *k = &t->nodes[c];
    return prof_hash(k->text, strlen(k->text), k->var != PROF_NONE ? k->lex + 7u : 3u);
}

/* A variable that took one value only is that literal after all (an API version "v1"). */
static void single_values(prof_trie_t *t, uint32_t n)
{
    for (uint32_t c = t->nodes[n].child; c != PROF_NONE; c = t->nodes[c].next) {
        prof_node_t *k = &t->nodes[c];
        if (k->var == PROF_NONE)
            continue;
        prof_var_t *v = &t->vars[k->var];
        if (v->n_values != 1 || v->more)
            continue;
        char *text = strdup(v->values[0]);
        if (!text)
            continue;
        free(k->text);
        k->text = text;
        k->var = PROF_NONE;
    }
}

/* The children of a node with their sketches. */
typedef struct {
    uint32_t *id;
    sketch_t *sk;
    size_t n;
} kids_t;

static bool groupable(const prof_trie_t *t, uint32_t c)
{
    return !t->nodes[c].dead && t->nodes[c].var == PROF_NONE && t->nodes[c].lex == LEX_WORD &&
           t->nodes[c].child != PROF_NONE;
}

/* Literal word children with children of their own and similar sub-shapes (Jaccard >= 0.5 to
 * the first of them), 3 or more, become one word variable: sites/north/gateways/...,
 * sites/south/gateways/... */
static void group_words(prof_trie_t *t, uint32_t n, kids_t *k)
{
    for (size_t i = 0; i < k->n; i++) {
        if (!groupable(t, k->id[i]))
            continue;
        size_t same = 0;
        for (size_t j = i; j < k->n; j++)
            same += groupable(t, k->id[j]) && sk_jaccard(&k->sk[i], &k->sk[j]) >= 0.5;
        if (same < 3)
            continue;
        uint32_t w = word_var(t, n);
        if (w == PROF_NONE)
            return;
        size_t wi = 0;
        while (wi < k->n && k->id[wi] != w)
            wi++;
        if (wi == k->n) { /* new: k has room for one more */
            k->id[k->n] = w;
            k->sk[k->n++] = (sketch_t){.n = 0};
        }
        sketch_t first = k->sk[i];
        for (size_t j = i; j < k->n; j++) {
            uint32_t c = k->id[j];
            if (c == w || !groupable(t, c) || sk_jaccard(&first, &k->sk[j]) < 0.5)
                continue;
            var_add(t, w, t->nodes[c].text, strlen(t->nodes[c].text));
            sk_union(&k->sk[wi], &k->sk[j]);
            unlink_child(t, c);
            merge_into(t, w, c);
        }
    }
}

static void finalize_node(prof_trie_t *t, uint32_t n, sketch_t *out)
{
    kids_t k = {0};
    size_t cap = 1;
    for (uint32_t c = t->nodes[n].child; c != PROF_NONE; c = t->nodes[c].next)
        cap++;
    k.id = malloc(cap * sizeof *k.id);
    k.sk = malloc(cap * sizeof *k.sk);
    out->n = 0;
    if (!k.id || !k.sk) {
        free(k.id);
        free(k.sk);
        return;
    }
    for (uint32_t c = t->nodes[n].child; c != PROF_NONE; c = t->nodes[c].next) {
        k.id[k.n] = c;
        finalize_node(t, c, &k.sk[k.n++]);
    }
    single_values(t, n);
    group_words(t, n, &k);
    for (size_t i = 0; i < k.n; i++) {
        if (t->nodes[k.id[i]].dead)
            continue;
        uint64_t key = child_key(t, k.id[i]);
        sk_add(out, mix64(key));
        for (size_t j = 0; j < k.sk[i].n; j++)
            sk_add(out, mix64(key ^ mix64(k.sk[i].h[j])));
    }
    free(k.id);
    free(k.sk);
}

void prof_trie_finalize(prof_trie_t *t)
{
    sketch_t root;
    finalize_node(t, 0, &root);
}
