/* Churn: creates and deletes at a rate, holding a population of objects: below it create,
 * above it delete, at it alternate delete and create.
 * Shards: op k (at k / rate) of the single run belongs to one shard: the first `population`
 * ops (the filling creates) round robin, k mod N; after them the ops come in (delete, create)
 * pairs, pair m to shard m mod min(N, population) (a shard with no objects never deletes).
 * Each shard holds its share of the population (its filling ops) over its own ledger, so N
 * shards starting empty make the single run's creates and deletes exactly. */
#include <math.h>
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"

#define MAX_PER_WAKE 4096 /* ops issued in one wake-up at most (the rest come next time) */

typedef struct {
    src_ctx_t ctx;
    const plan_phase_t *pp;
    src_t *me;
    int64_t done; /* the single run's ops passed (issued here or another shard's) */
    int64_t pop;  /* this shard's share of the population */
    bool toggle;  /* at the population: alternate delete and create */
    bool reached; /* the population was reached once: the band is watched from then on */
    int64_t min, max;
} churn_t;

static bool churn_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->churn.on;
}

static int churn_new(const src_ctx_t *ctx, void **self)
{
    churn_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->ctx = *ctx;
    s->pp = src_phase(ctx);
    s->min = INT64_MAX;
    int64_t p = s->pp->churn.population;
    s->pop = (int64_t)sched_shard_share(ctx->shard, 0, (uint64_t)(p > 0 ? p : 0));
    return 0;
}

/* Pairs after the filling ops are dealt over this many shards. */
static int64_t pair_shards(const churn_t *s)
{
    int64_t p = s->pp->churn.population;
    return s->ctx.shard.count < (p > 1 ? p : 1) ? s->ctx.shard.count : (p > 1 ? p : 1);
}

/* The first op at or after k that this shard owns (INT64_MAX: none). */
static int64_t next_owned(const churn_t *s, int64_t k)
{
    if (!sched_shard_split(s->ctx.shard))
        return k;
    int64_t n = s->ctx.shard.count, i = s->ctx.shard.index - 1, p = s->pp->churn.population;
    if (k < p) {
        int64_t r = k + ((i - k % n) % n + n) % n;
        if (r < p)
            return r;
        k = p;
    }
    int64_t m = pair_shards(s), pair = (k - p) / 2;
    if (i >= m)
        return INT64_MAX;
    if (pair % m == i)
        return k;
    return p + 2 * (pair + ((i - pair % m) % m + m) % m);
}

/* How many of the ops below k this shard owns: its rank among its own ops. */
static int64_t owned_below(const churn_t *s, int64_t k)
{
    if (!sched_shard_split(s->ctx.shard))
        return k;
    sched_shard_t sh = s->ctx.shard;
    int64_t p = s->pp->churn.population, n = 0;
    n += (int64_t)sched_shard_share(sh, 0, (uint64_t)(k < p ? k : p));
    if (k <= p)
        return n;
    int64_t m = pair_shards(s), i = sh.index - 1, full = (k - p) / 2;
    if (i < m) {
        n += 2 * (full > i ? (full - 1 - i) / m + 1 : 0);
        n += (k - p) % 2 && full % m == i;
    }
    return n;
}

static int churn_start(void *self, src_t *me)
{
    ((churn_t *)self)->me = me;
    return 0;
}

/* Op k's intended start, relative to the phase. */
static int64_t op_time(const churn_t *s, int64_t k)
{
    return (int64_t)((double)k / s->pp->churn.rate * 1e9);
}

static bool churn_next(const void *self, int64_t *at_ns)
{
    const churn_t *s = self;
    int64_t k = next_owned(s, s->done);
    if (s->pp->churn.rate <= 0 || k == INT64_MAX || op_time(s, k) >= s->pp->duration_ns)
        return false;
    *at_ns = s->ctx.base_ns + op_time(s, k);
    return true;
}

/* The next op's class: below the population create, above it delete, at it alternate. */
static int choice(churn_t *s)
{
    ledger_t *g = obs_ledger(s->ctx.obs);
    int c = s->pp->churn.create.index, d = s->pp->churn.del.index;
    int64_t alive = ledger_alive(g, c), pop = s->pop;
    if (alive == pop)
        s->reached = true;
    if (s->reached) {
        s->min = alive < s->min ? alive : s->min;
        s->max = alive > s->max ? alive : s->max;
    }
    if (alive != pop)
        return alive < pop ? c : d;
    s->toggle = !s->toggle;
    return s->toggle ? d : c;
}

static int churn_due(void *self, int64_t now_ns)
{
    churn_t *s = self;
    int rc = 0;
    for (int k = 0; rc == 0 && k < MAX_PER_WAKE; k++) {
        int64_t at;
        if (!churn_next(s, &at) || at > now_ns)
            break;
        s->done = next_owned(s, s->done) + 1;
        src_req_t req = {.cls = choice(s), .intended_ns = at, .client = -1};
        rc = src_issue(s->ctx.issuer, s->me, &req);
    }
    return rc;
}

/* The shard's own ops among [k0, k1) (its ranks j0..j1) split by the model: with `alive`
 * objects at the start, its first |pop - alive| ops move toward its population, then deletes
 * and creates alternate, a delete first. */
static double churn_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const churn_t *s = self;
    const plan_phase_t *pp = s->pp;
    int64_t end = pp->duration_ns;
    t0 = t0 < end ? t0 : end;
    t1 = t1 < end ? t1 : end;
    double r = pp->churn.rate / 1e9;
    double g0 = ceil((double)t0 * r - 1e-9), g1 = ceil((double)t1 * r - 1e-9);
    if (g1 <= g0)
        return 0;
    double k0 = (double)owned_below(s, (int64_t)g0), k1 = (double)owned_below(s, (int64_t)g1);
    if (k1 <= k0)
        return 0;
    double need = fabs((double)s->pop - floor(s->ctx.alive));
    double toward = fmax(0, fmin(k1, need) - k0);
    double a = fmax(k0, need) - need, b = k1 - need;
    double dels = b > a ? ceil(b / 2) - ceil(a / 2) : 0, creates = b > a ? (b - a) - dels : 0;
    bool grow = s->ctx.alive <= s->pop;
    if (per_class && pp->churn.create.index >= 0)
        per_class[pp->churn.create.index] += creates + (grow ? toward : 0);
    if (per_class && pp->churn.del.index >= 0)
        per_class[pp->churn.del.index] += dels + (grow ? 0 : toward);
    return k1 - k0;
}

static void churn_stop(void *self)
{
    churn_t *s = self;
    ledger_churn_band(obs_ledger(s->ctx.obs), s->ctx.phase, s->reached, s->min, s->max, s->pop,
                      s->pp->churn.tolerance);
}

const src_ops_t src_churn_ops = {
    .name = "churn",
    .used_by = churn_used_by,
    .new = churn_new,
    .start = churn_start,
    .next = churn_next,
    .due = churn_due,
    .expected = churn_expected,
    .stop = churn_stop,
    .free = free,
};
