/* Closed-loop clients: each issues, waits for its completion, thinks, and issues again; the
 * next intended start is completion + think, so response time counts from there. */
#include "squall/sched.h"

#include <math.h>
#include <stdlib.h>

#include "sched_int.h"
#include "squall/err.h"
#include "squall/rng.h"

typedef struct {
    enum sched_client_state state;
    int64_t next_ns;
    uint64_t issued;
} client_t;

struct sched_closed {
    sched_closed_cfg_t cfg;
    client_t *clients;
    sched_heap_t waiting; /* WAITING clients by intended start */
    rng_t rng;
    uint64_t total;
    int done, owned; /* clients DONE, and clients this shard owns */
};

/* The one place a client changes state. */
static void set_state(sched_closed_t *c, int i, enum sched_client_state st)
{
    if (st == SCHED_CLIENT_DONE && c->clients[i].state != SCHED_CLIENT_DONE)
        c->done++;
    c->clients[i].state = st;
}

/* Makes client i wait for t, or retires it when t is past the end of the phase. */
static bool schedule(sched_closed_t *c, int i, int64_t t)
{
    if (t >= c->cfg.duration_ns) {
        set_state(c, i, SCHED_CLIENT_DONE);
        return false;
    }
    c->clients[i].next_ns = t;
    set_state(c, i, SCHED_CLIENT_WAITING);
    sched_heap_push(&c->waiting, t, i);
    return true;
}

static int validate(const sched_closed_cfg_t *cfg)
{
    if (!cfg || cfg->clients < 1 || !sched_shard_valid(cfg->shard) || cfg->think_ns < 0 ||
        cfg->spread_ns < 0 || cfg->duration_ns <= 0 ||
        (cfg->think != SCHED_THINK_FIXED && cfg->think != SCHED_THINK_EXP))
        return SQ_EINVAL;
    return 0;
}

static int64_t first_start(const sched_closed_cfg_t *cfg, int i)
{
    return (int64_t)((double)cfg->spread_ns * i / cfg->clients);
}

int sched_closed_new(const sched_closed_cfg_t *cfg, sched_closed_t **out)
{
    int rc = validate(cfg);
    if (rc < 0)
        return rc;
    sched_closed_t *c = calloc(1, sizeof(*c));
    if (!c || !(c->clients = calloc((size_t)cfg->clients, sizeof(client_t))) ||
        sched_heap_init(&c->waiting, (size_t)cfg->clients) < 0) {
        sched_closed_free(c);
        return SQ_ENOMEM;
    }
    c->cfg = *cfg;
    rng_seed(&c->rng, cfg->seed);
    /* Every client keeps its global id; only the shard's own are ever scheduled (the others
     * stay as calloc left them and are never due). */
    for (int i = 0; i < cfg->clients; i++) {
        if (!sched_shard_owns(cfg->shard, (uint64_t)i))
            continue;
        c->owned++;
        schedule(c, i, first_start(cfg, i));
    }
    *out = c;
    return 0;
}

void sched_closed_free(sched_closed_t *c)
{
    if (!c)
        return;
    sched_heap_close(&c->waiting);
    free(c->clients);
    free(c);
}

bool sched_closed_peek(const sched_closed_t *c, int64_t *t_ns)
{
    sched_ev_t ev;
    if (!sched_heap_top(&c->waiting, &ev))
        return false;
    *t_ns = ev.t;
    return true;
}

bool sched_closed_due(sched_closed_t *c, int64_t now_ns, int *client, int64_t *t_ns)
{
    sched_ev_t ev;
    if (!sched_heap_top(&c->waiting, &ev) || ev.t > now_ns)
        return false;
    sched_heap_pop(&c->waiting);
    set_state(c, ev.id, SCHED_CLIENT_BUSY);
    c->clients[ev.id].issued++;
    c->total++;
    *client = ev.id;
    *t_ns = ev.t;
    return true;
}

bool sched_closed_complete(sched_closed_t *c, int client, int64_t done_ns, int64_t *next_ns)
{
    if (client < 0 || client >= c->cfg.clients || c->clients[client].state != SCHED_CLIENT_BUSY)
        return false;
    double think = c->cfg.think == SCHED_THINK_EXP && c->cfg.think_ns > 0
                       ? rng_exp(&c->rng, 1.0) * (double)c->cfg.think_ns
                       : (double)c->cfg.think_ns;
    int64_t next = done_ns + (int64_t)llround(think);
    if (next_ns)
        *next_ns = next;
    return schedule(c, client, next);
}

enum sched_client_state sched_closed_state(const sched_closed_t *c, int client)
{
    return c->clients[client].state;
}

uint64_t sched_closed_issued(const sched_closed_t *c, int client)
{
    return c->clients[client].issued;
}

uint64_t sched_closed_total(const sched_closed_t *c)
{
    return c->total;
}

bool sched_closed_finished(const sched_closed_t *c)
{
    return c->done == c->owned;
}

double sched_closed_expected(const sched_closed_cfg_t *cfg, int64_t response_ns)
{
    if (validate(cfg) < 0 || response_ns < 0)
        return 0;
    int64_t cycle = response_ns + cfg->think_ns;
    double sum = 0;
    for (int i = 0; i < cfg->clients; i++) {
        int64_t first = first_start(cfg, i);
        if (first >= cfg->duration_ns || !sched_shard_owns(cfg->shard, (uint64_t)i))
            continue;
        /* Starts first + k·cycle < duration: k = 0 .. ceil((duration − first) / cycle) − 1. */
        sum += cycle > 0 ? (double)((cfg->duration_ns - first + cycle - 1) / cycle) : INFINITY;
    }
    return sum;
}
