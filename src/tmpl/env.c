/* The template registry: named lists (the plan's vars) and resolvers other modules provide. */
#include <ctype.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "tmpl_int.h"

static const char *const builtins[] = {"agent", "seq", "now_ns", "now_ms", "phase", "pick"};

bool tmpl_name_ok(const char *s, size_t len)
{
    if (len == 0 || !(isalpha((unsigned char)s[0]) || s[0] == '_'))
        return false;
    for (size_t i = 1; i < len; i++)
        if (!(isalnum((unsigned char)s[i]) || s[i] == '_' || s[i] == '-'))
            return false;
    return true;
}

static bool same(const char *name, const char *s, size_t len)
{
    return strlen(name) == len && memcmp(name, s, len) == 0;
}

bool tmpl_name_builtin(const char *s, size_t len)
{
    for (size_t i = 0; i < sizeof(builtins) / sizeof(builtins[0]); i++)
        if (same(builtins[i], s, len))
            return true;
    return false;
}

int tmpl_env_new(tmpl_env_t **out)
{
    *out = calloc(1, sizeof(tmpl_env_t));
    return *out ? 0 : SQ_ENOMEM;
}

static void list_free(tmpl_list_t *l)
{
    if (!l)
        return;
    free(l->name);
    free(l->items);
    free(l->store);
    free(l);
}

void tmpl_env_free(tmpl_env_t *env)
{
    if (!env)
        return;
    for (size_t i = 0; i < env->n_lists; i++)
        list_free(env->lists[i]);
    for (size_t i = 0; i < env->n_resolvers; i++) {
        free(env->resolvers[i]->name);
        free(env->resolvers[i]);
    }
    free(env->lists);
    free(env->resolvers);
    free(env);
}

const tmpl_list_t *tmpl_env_list(const tmpl_env_t *env, const char *name, size_t len)
{
    for (size_t i = 0; env && i < env->n_lists; i++)
        if (same(env->lists[i]->name, name, len))
            return env->lists[i];
    return NULL;
}

const tmpl_resolver_t *tmpl_env_resolver(const tmpl_env_t *env, const char *name, size_t len)
{
    for (size_t i = 0; env && i < env->n_resolvers; i++)
        if (same(env->resolvers[i]->name, name, len))
            return env->resolvers[i];
    return NULL;
}

static int check_name(const tmpl_env_t *env, const char *name, bool builtin_ok)
{
    size_t len = name ? strlen(name) : 0;
    if (!env || !tmpl_name_ok(name, len))
        return SQ_EINVAL;
    if ((!builtin_ok && tmpl_name_builtin(name, len)) || tmpl_env_list(env, name, len) ||
        tmpl_env_resolver(env, name, len))
        return SQ_EEXISTS;
    return 0;
}

/* Copies the items into one block so a list is three allocations whatever its length. */
static tmpl_list_t *list_copy(const char *name, const char *const *items, size_t n)
{
    size_t total = 0;
    for (size_t i = 0; i < n; i++)
        total += strlen(items[i]);
    tmpl_list_t *l = calloc(1, sizeof(*l));
    if (!l || !(l->name = strdup(name)) || !(l->items = calloc(n, sizeof(tmpl_str_t))) ||
        !(l->store = malloc(total + 1))) {
        list_free(l);
        return NULL;
    }
    char *p = l->store;
    for (size_t i = 0; i < n; i++) {
        size_t len = strlen(items[i]);
        memcpy(p, items[i], len);
        l->items[i] = (tmpl_str_t){p, len};
        p += len;
    }
    l->n = n;
    return l;
}

int tmpl_env_add_list(tmpl_env_t *env, const char *name, const char *const *items, size_t n)
{
    int rc = check_name(env, name, false);
    if (rc < 0)
        return rc;
    if (!items || n == 0)
        return SQ_EINVAL;
    for (size_t i = 0; i < n; i++)
        if (!items[i])
            return SQ_EINVAL;
    tmpl_list_t **grown = realloc(env->lists, (env->n_lists + 1) * sizeof(*grown));
    if (!grown)
        return SQ_ENOMEM;
    env->lists = grown;
    if (!(env->lists[env->n_lists] = list_copy(name, items, n)))
        return SQ_ENOMEM;
    env->n_lists++;
    return 0;
}

int tmpl_env_add_resolver(tmpl_env_t *env, const char *name, tmpl_resolve_fn fn, void *user)
{
    /* "pick" may be served by a resolver: it handles what the built-in pick does not. */
    int rc = check_name(env, name, name && strcmp(name, "pick") == 0);
    if (rc < 0)
        return rc;
    if (!fn)
        return SQ_EINVAL;
    tmpl_resolver_t **grown = realloc(env->resolvers, (env->n_resolvers + 1) * sizeof(*grown));
    if (!grown)
        return SQ_ENOMEM;
    env->resolvers = grown;
    tmpl_resolver_t *r = calloc(1, sizeof(*r));
    if (!r || !(r->name = strdup(name))) {
        free(r);
        return SQ_ENOMEM;
    }
    r->fn = fn;
    r->user = user;
    env->resolvers[env->n_resolvers++] = r;
    return 0;
}
