/* The plan's `observe` section: what squall watches on the target's side while it loads it.
 * `metrics` lists endpoints in a metrics text format, scraped every `every` (src/scrape/). A
 * section read from an included file adds its endpoints to the includer's. */
#include <stdio.h>
#include <string.h>

#include "plan_int.h"

#define SCRAPE_MIN_NS (INT64_C(250) * 1000000) /* a shorter interval is refused */

/* keep: a pattern or a list of them: metric-name characters and '*'. */
static void parse_keep(pctx_t *c, yaml_node_t *n, const char *where, plan_scrape_t *s)
{
    bool seq = n->type == YAML_SEQUENCE_NODE;
    size_t count = seq ? (size_t)(n->data.sequence.items.top - n->data.sequence.items.start) : 1;
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = seq ? pc_node(c, n->data.sequence.items.start[i]) : n;
        const char *t = pc_text(it);
        size_t len = t ? strlen(t) : 0;
        if (len == 0 || strspn(t, "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
                                  "0123456789_:*") != len) {
            char got[64];
            pc_describe(it, got, sizeof got);
            pc_error(c, it,
                     "%s.keep: bad pattern (expected metric names with '*' for any run of "
                     "characters, e.g. gateway_requests_*, got %s)",
                     where, got);
            continue;
        }
        s->keep = pc_grow(c, s->keep, &s->n_keep, 1, sizeof(*s->keep));
        if (c->nomem)
            return;
        s->keep[s->n_keep - 1] = pmem_strdup(c, t);
    }
}

static void parse_scrape(pctx_t *c, yaml_node_t *n, const char *where, plan_scrape_t *s)
{
    static const char *const keys[] = {"url", "every", "keep", NULL};
    s->pos = pc_pos(c, n);
    s->every_ns = INT64_C(5000000000);
    pc_check_keys(c, n, where, keys);
    yaml_node_t *u = pc_get(c, n, "url");
    if (!u) {
        pc_error(c, n,
                 "%s: no url (expected the endpoint to scrape, e.g. url: "
                 "http://127.0.0.1:7070/metrics)",
                 where);
    } else {
        char host[256], w[96];
        const char *path;
        snprintf(w, sizeof w, "%s.url", where);
        if (plan_split_url(c, u, w, &s->https, host, sizeof host, &s->port, &path, &s->loopback)) {
            s->url = pmem_strdup(c, pc_text(u));
            s->host = pmem_strdup(c, host);
            s->path = pmem_strdup(c, *path ? path : "/");
        }
    }
    pc_dur(c, n, "every", where, SCRAPE_MIN_NS, &s->every_ns);
    if (pc_get(c, n, "keep"))
        parse_keep(c, pc_get(c, n, "keep"), where, s);
}

void plan_parse_observe(pctx_t *c, yaml_node_t *n)
{
    static const char *const keys[] = {"metrics", NULL};
    if (!pc_expect_map(c, n, "observe"))
        return;
    pc_check_keys(c, n, "observe", keys);
    yaml_node_t *m = pc_get(c, n, "metrics");
    if (!m || !pc_expect_seq(c, m, "observe.metrics"))
        return;
    plan_t *p = c->p;
    size_t count = (size_t)(m->data.sequence.items.top - m->data.sequence.items.start);
    for (size_t i = 0; i < count; i++) {
        yaml_node_t *it = pc_node(c, m->data.sequence.items.start[i]);
        char where[64];
        snprintf(where, sizeof where, "observe.metrics[%zu]", i);
        if (!pc_expect_map(c, it, where))
            continue;
        p->scrapes = pc_grow(c, p->scrapes, &p->n_scrapes, 1, sizeof(*p->scrapes));
        if (c->nomem)
            return;
        parse_scrape(c, it, where, &p->scrapes[p->n_scrapes - 1]);
    }
}
