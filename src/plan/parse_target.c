/* The plan's `target` and `vars` sections: where load goes and the word lists templates pick
 * from. A section read from an included file is overridden key by key by the including file. */
#include <ctype.h>
#include <arpa/inet.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "plan_int.h"
#include "squall/err.h"

/* RFC 9110 section 5.6.2: a header field name is a token of tchar. */
static bool header_name_ok(const char *s)
{
    if (!*s)
        return false;
    for (; *s; s++)
        if (!(strchr("!#$%&'*+-.^_`|~", *s) || (*s >= '0' && *s <= '9') ||
              (*s >= 'a' && *s <= 'z') || (*s >= 'A' && *s <= 'Z')))
            return false;
    return true;
}

/* headers: {Name: value, ...}; a later file's header of the same name replaces the earlier. */
void plan_parse_headers_into(pctx_t *c, yaml_node_t *n, const char *where, plan_kv_t **out,
                             size_t *count)
{
    if (!pc_expect_map(c, n, where))
        return;
    pc_check_keys(c, n, where, NULL);
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        yaml_node_t *k = pc_node(c, pr->key), *v = pc_node(c, pr->value);
        const char *name = pc_text(k);
        if (!name)
            continue; /* reported by pc_check_keys */
        if (!header_name_ok(name)) {
            pc_error(c, k, "%s: bad header name (expected an RFC 9110 token, got '%s')", where,
                     name);
            continue;
        }
        if (!strcasecmp(name, "authorization") || !strcasecmp(name, "proxy-authorization")) {
            pc_error(c, k,
                     "%s.%s: a literal credential header is never accepted (expected "
                     "target.token: {file: PATH} or {env: NAME}; the value is not shown)",
                     where, name);
            continue;
        }
        if (!v || v->type != YAML_SCALAR_NODE ||
            strpbrk((const char *)v->data.scalar.value, "\r\n")) {
            char got[64];
            pc_describe(v, got, sizeof got);
            pc_error(c, v, "%s.%s: wrong type (expected one line of text, got %s)", where, name,
                     got);
            continue;
        }
        size_t i = 0;
        while (i < *count && strcasecmp((*out)[i].name, name) != 0)
            i++;
        if (i == *count)
            *out = pc_grow(c, *out, count, 1, sizeof(**out));
        if (c->nomem)
            return;
        (*out)[i].name = pmem_strdup(c, name);
        (*out)[i].value = pmem_strdup(c, (const char *)v->data.scalar.value);
        (*out)[i].pos = pc_pos(c, k);
    }
}

/* Reads "host[:port]" (host may be a bracketed IPv6 address) at h into host and *port; *rest
 * is left at the path. False when malformed. User information is refused: it would leak into
 * logs, and target.token is the place for credentials. */
static bool split_authority(const char *h, char *host, size_t len, int *port, const char **rest)
{
    const char *end;
    if (*h == '[') {
        end = strchr(h, ']');
        if (!end || (size_t)(end - h - 1) >= len)
            return false;
        snprintf(host, len, "%.*s", (int)(end - h - 1), h + 1);
        end++;
    } else {
        end = h + strcspn(h, ":/?#");
        if (end == h || (size_t)(end - h) >= len || memchr(h, '@', (size_t)(end - h)))
            return false;
        for (const char *p = h; p < end; p++) /* a DNS name or an IPv4 address (RFC 3986 reg-name
                                                 without escapes): no space, no control byte */
            if (!isalnum((unsigned char)*p) && *p != '-' && *p != '.' && *p != '_')
                return false;
        snprintf(host, len, "%.*s", (int)(end - h), h);
    }
    if (*end == ':') {
        char *pe;
        long v = strtol(end + 1, &pe, 10);
        if (pe == end + 1 || v < 1 || v > 65535)
            return false;
        *port = (int)v;
        end = pe;
    }
    *rest = end;
    return *end == '\0' || *end == '/';
}

bool plan_split_url(pctx_t *c, yaml_node_t *vn, const char *where, bool *https, char *host,
                    size_t cap, int *port, const char **path, bool *loopback)
{
    const char *u = pc_text(vn);
    *https = u && strncmp(u, "https://", 8) == 0;
    *port = *https ? 443 : 80;
    if (!u || (!*https && strncmp(u, "http://", 7) != 0) ||
        !split_authority(u + (*https ? 8 : 7), host, cap, port, path)) {
        /* User information may hold a password: the URL is shown without it. */
        const char *at = u ? strchr(u, '@') : NULL, *sep = u ? strstr(u, "://") : NULL;
        int keep = !u ? 0 : at ? (sep && sep < at ? (int)(sep + 3 - u) : 0) : (int)strlen(u);
        pc_error(c, vn,
                 "%s: bad URL (expected an http:// or https:// URL like "
                 "http://127.0.0.1:7070, got '%s%.*s%s%s')",
                 where, u ? "" : "not text", keep, u ? u : "",
                 at ? "(user information not shown)@" : "", at ? at + 1 : "");
        return false;
    }
    unsigned char a[16];
    *loopback = strcmp(host, "localhost") == 0 ||
                (inet_pton(AF_INET, host, a) == 1 && a[0] == 127) ||
                (inet_pton(AF_INET6, host, a) == 1 && memcmp(a, &in6addr_loopback, 16) == 0);
    return true;
}

/* Splits http[s]://host[:port][/base] and decides whether host is loopback. */
static void parse_url(pctx_t *c, yaml_node_t *vn, plan_target_t *t)
{
    const char *u = pc_text(vn), *end;
    char host[256];
    if (!plan_split_url(c, vn, "target.url", &t->https, host, sizeof host, &t->port, &end,
                        &t->loopback))
        return;
    t->host = pmem_strdup(c, host);
    size_t len = strlen(u);
    while (len > 0 && u[len - 1] == '/' && u + len > end)
        len--; /* "http://h:1/" and "http://h:1" name the same base */
    char *copy = pmem_alloc(c, len + 1);
    if (copy)
        memcpy(copy, u, len);
    t->url = copy;
    t->pos = pc_pos(c, vn);
}

static void parse_tls(pctx_t *c, yaml_node_t *n, plan_target_t *t)
{
    const char *const *keys = plan_keys(PLAN_KEYS_TLS);
    if (!pc_expect_map(c, n, "target.tls"))
        return;
    pc_check_keys(c, n, "target.tls", keys);
    pc_path(c, n, "ca", "target.tls", &t->tls.ca);
    pc_path(c, n, "cert", "target.tls", &t->tls.cert);
    pc_path(c, n, "key", "target.tls", &t->tls.key);
    pc_bool(c, n, "insecure", "target.tls", &t->tls.insecure);
    if (!t->tls.cert != !t->tls.key)
        pc_error(c, n,
                 "target.tls: a client certificate needs both keys (expected cert and key, "
                 "got only %s)",
                 t->tls.cert ? "cert" : "key");
}

static void parse_token(pctx_t *c, yaml_node_t *n, plan_target_t *t)
{
    const char *const *keys = plan_keys(PLAN_KEYS_TOKEN);
    if (n && n->type == YAML_SCALAR_NODE) {
        pc_error(c, n,
                 "target.token: a literal token is never accepted (expected {file: PATH} "
                 "or {env: NAME}, got text)");
        return;
    }
    if (!pc_expect_map(c, n, "target.token"))
        return;
    pc_check_keys(c, n, "target.token", keys);
    t->token.file = t->token.env = NULL;
    pc_path(c, n, "file", "target.token", &t->token.file);
    pc_str(c, n, "env", "target.token", &t->token.env);
    if (!t->token.file == !t->token.env)
        pc_error(c, n, "target.token: exactly one source (expected file or env, got %s)",
                 t->token.file ? "both" : "neither");
}

void plan_parse_target(pctx_t *c, yaml_node_t *n)
{
    const char *const *keys = plan_keys(PLAN_KEYS_TARGET);
    static const char *const versions[] = {"1.1", "2", NULL};
    plan_target_t *t = &c->p->target;
    if (!pc_expect_map(c, n, "target"))
        return;
    if (!t->url)
        t->pos = pc_pos(c, n);
    pc_check_keys(c, n, "target", keys);
    const char *url;
    c->url_given = c->url_given || pc_get(c, n, "url");
    if (pc_str(c, n, "url", "target", &url))
        parse_url(c, pc_get(c, n, "url"), t);
    int http;
    if (pc_enum(c, n, "http", "target", versions, &http))
        t->http = http ? PLAN_HTTP_2 : PLAN_HTTP_1_1;
    pc_int(c, n, "connections", "target", 1, 100000, &t->connections);
    /* HTTP/2 streams in flight per connection; libcurl's own assumption is 100 until the
     * server's SETTINGS arrive. Ignored for HTTP/1.1. */
    pc_int(c, n, "streams", "target", 1, 10000, &t->streams);
    pc_dur(c, n, "timeout", "target", 1, &t->timeout_ns);
    pc_bytes(c, n, "max_body", "target", 1024, INT64_C(1) << 32, &t->max_body);
    if (pc_get(c, n, "headers"))
        plan_parse_headers_into(c, pc_get(c, n, "headers"), "target.headers", &t->headers,
                                &t->n_headers);
    if (pc_get(c, n, "tls"))
        parse_tls(c, pc_get(c, n, "tls"), t);
    if (pc_get(c, n, "token"))
        parse_token(c, pc_get(c, n, "token"), t);
}

static void parse_range(pctx_t *c, yaml_node_t *n, const char *where, plan_var_t *v)
{
    const char *const *keys = plan_keys(PLAN_KEYS_RANGE);
    pc_check_keys(c, n, where, keys);
    int from = 0, to = 0;
    bool ok = pc_int(c, n, "from", where, -1000000000, 1000000000, &from);
    ok = pc_int(c, n, "to", where, -1000000000, 1000000000, &to) && ok;
    if (!pc_get(c, n, "from") || !pc_get(c, n, "to")) {
        pc_error(c, n, "%s: incomplete range (expected from and to, got %s)", where,
                 pc_get(c, n, "from") ? "only from"
                 : pc_get(c, n, "to") ? "only to"
                                      : "neither");
        return;
    }
    if (ok && (to < from || (int64_t)to - from >= 10000000)) {
        pc_error(c, pc_get(c, n, "to"), "%s.to: out of range (expected from %d to %d, got '%d')",
                 where, from, from + 9999999, to);
        return;
    }
    v->is_range = true;
    v->from = from;
    v->to = to;
    v->n_values = (size_t)((int64_t)to - from + 1);
}

static void parse_list(pctx_t *c, yaml_node_t *n, const char *where, plan_var_t *v)
{
    size_t count = (size_t)(n->data.sequence.items.top - n->data.sequence.items.start);
    if (count == 0) {
        pc_error(c, n, "%s: empty list (expected at least one word, got [])", where);
        return;
    }
    v->values = pmem_alloc(c, count * sizeof(*v->values));
    if (!v->values)
        return;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = pc_node(c, n->data.sequence.items.start[i]);
        if (!pc_text(it)) {
            char got[64];
            pc_describe(it, got, sizeof got);
            pc_error(c, it, "%s[%zu]: wrong type (expected a word, got %s)", where, i, got);
            continue;
        }
        v->values[v->n_values++] = pmem_strdup(c, pc_text(it));
    }
}

void plan_parse_vars(pctx_t *c, yaml_node_t *n)
{
    if (!pc_expect_map(c, n, "vars"))
        return;
    pc_check_keys(c, n, "vars", NULL);
    for (yaml_node_pair_t *pr = n->data.mapping.pairs.start; pr < n->data.mapping.pairs.top; pr++) {
        yaml_node_t *k = pc_node(c, pr->key), *vn = pc_node(c, pr->value);
        if (!pc_text(k) || !pc_name_ok(c, k, "vars", "variable"))
            continue;
        char where[128];
        snprintf(where, sizeof where, "vars.%s", pc_text(k));
        plan_var_t v = {.name = pmem_strdup(c, pc_text(k)), .pos = pc_pos(c, k)};
        if (vn->type == YAML_MAPPING_NODE)
            parse_range(c, vn, where, &v);
        else if (vn->type == YAML_SEQUENCE_NODE)
            parse_list(c, vn, where, &v);
        else {
            char got[64];
            pc_describe(vn, got, sizeof got);
            pc_error(c, vn, "%s: wrong type (expected a list of words or {from, to}, got %s)",
                     where, got);
            continue;
        }
        bool dup = false;
        for (size_t i = 0; i < c->p->n_vars && !dup; i++) {
            const plan_var_t *f = &c->p->vars[i];
            dup = strcmp(f->name, v.name) == 0;
            if (dup && f->pos.file != c->file) /* same file: reported as a duplicate key */
                pc_error(c, k, "%s: defined twice (first at %s:%d:%d)", where, f->pos.file,
                         f->pos.line, f->pos.col);
        }
        if (dup)
            continue;
        c->p->vars = pc_grow(c, c->p->vars, &c->p->n_vars, 1, sizeof(v));
        if (!c->nomem)
            c->p->vars[c->p->n_vars - 1] = v;
    }
}
