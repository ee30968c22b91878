/* Open-loop arrivals: a piecewise-linear rate profile, its integral Λ and the exact inverse,
 * walked either evenly (the k-th start at Λ⁻¹(k)) or as a time-transformed Poisson process. */
#include "squall/sched.h"

#include <math.h>
#include <stdlib.h>

#include "squall/err.h"
#include "squall/rng.h"

/* One piece of the profile: r(t0 + u) = a + b·u for u in [0, t1 - t0), with Λ(t0) = l0. */
typedef struct {
    double t0, t1, a, b, l0, l1;
} seg_t;

struct sched_open {
    seg_t *segs;
    size_t n_segs, seg; /* seg only moves forward: starts come out in time order */
    int64_t duration_ns;
    enum sched_arrivals arrivals;
    double step; /* Λ between two of this shard's starts: N (1 for the whole run) */
    rng_t rng;
    double y;        /* the Λ value of the pending start */
    int64_t next_ns; /* the pending start, or -1 when the phase has none left */
    uint64_t count;
};

static bool rate_ok(double r)
{
    return isfinite(r) && r >= 0 && r <= SCHED_RATE_MAX;
}

static int validate(const sched_open_cfg_t *cfg)
{
    if (!cfg || cfg->duration_ns <= 0 || !sched_shard_valid(cfg->shard))
        return SQ_EINVAL;
    switch (cfg->shape) {
    case SCHED_CONSTANT:
        return rate_ok(cfg->rate) ? 0 : SQ_EINVAL;
    case SCHED_RAMP:
        return rate_ok(cfg->from) && rate_ok(cfg->to) ? 0 : SQ_EINVAL;
    case SCHED_STEPS:
        if (!cfg->steps || cfg->n_steps == 0)
            return SQ_EINVAL;
        for (size_t i = 0; i < cfg->n_steps; i++)
            if (!rate_ok(cfg->steps[i].rate) || (i + 1 < cfg->n_steps && cfg->steps[i].for_ns <= 0))
                return SQ_EINVAL;
        return 0;
    }
    return SQ_EINVAL;
}

static double seg_lambda(const seg_t *s, double u)
{
    return s->l0 + s->a * u + s->b * u * u / 2;
}

/* Fills segs (room for n_steps or 1) and returns how many; times in seconds. */
static size_t build_segs(const sched_open_cfg_t *cfg, seg_t *segs)
{
    double dur = cfg->duration_ns / 1e9;
    if (cfg->shape != SCHED_STEPS) {
        double a = cfg->shape == SCHED_CONSTANT ? cfg->rate : cfg->from;
        double b = cfg->shape == SCHED_CONSTANT ? 0 : (cfg->to - cfg->from) / dur;
        segs[0] = (seg_t){.t0 = 0, .t1 = dur, .a = a, .b = b, .l0 = 0};
        segs[0].l1 = seg_lambda(&segs[0], dur);
        return 1;
    }
    size_t n = 0;
    int64_t at = 0;
    for (size_t i = 0; i < cfg->n_steps && at < cfg->duration_ns; i++) {
        bool last = i + 1 == cfg->n_steps;
        int64_t end = last || cfg->steps[i].for_ns > cfg->duration_ns - at
                          ? cfg->duration_ns
                          : at + cfg->steps[i].for_ns;
        seg_t *s = &segs[n++];
        *s = (seg_t){.t0 = at / 1e9, .t1 = end / 1e9, .a = cfg->steps[i].rate, .b = 0};
        s->l0 = n > 1 ? segs[n - 2].l1 : 0;
        s->l1 = seg_lambda(s, s->t1 - s->t0);
        at = end;
    }
    return n;
}

/* The u in [0, t1 - t0] with Λ(t0 + u) = y, for l0 <= y <= l1. Uses the cancellation-free
 * root 2·dy / (a + sqrt(a² + 2·b·dy)) of b/2·u² + a·u − dy = 0, valid for b of either sign
 * and b = 0. */
static double seg_inverse(const seg_t *s, double y)
{
    double dy = y - s->l0;
    if (dy <= 0)
        return 0;
    double disc = s->a * s->a + 2 * s->b * dy;
    double den = s->a + sqrt(disc > 0 ? disc : 0);
    double u = den > 0 ? 2 * dy / den : 0;
    double len = s->t1 - s->t0;
    return u < len ? u : len;
}

/* Moves the pending start to Λ⁻¹(s->y), or marks the phase exhausted. */
static void settle(sched_open_t *s)
{
    while (s->seg < s->n_segs && !(s->y < s->segs[s->seg].l1))
        s->seg++;
    if (s->seg == s->n_segs) {
        s->next_ns = -1;
        return;
    }
    const seg_t *g = &s->segs[s->seg];
    double t = g->t0 + seg_inverse(g, s->y);
    int64_t ns = (int64_t)llround(t * 1e9);
    s->next_ns = ns < s->duration_ns ? ns : -1;
}

static void advance(sched_open_t *s)
{
    /* Even: the shard's next integer of Λ (every N-th). Poisson: an exponential gap of mean N
     * in Λ's time scale, i.e. a process of rate r(t)/N. */
    s->y += s->arrivals == SCHED_EVEN ? s->step : s->step * rng_exp(&s->rng, 1.0);
    settle(s);
}

int sched_open_new(const sched_open_cfg_t *cfg, sched_open_t **out)
{
    int rc = validate(cfg);
    if (rc < 0)
        return rc;
    sched_open_t *s = calloc(1, sizeof(*s));
    size_t room = cfg->shape == SCHED_STEPS ? cfg->n_steps : 1;
    if (!s || !(s->segs = calloc(room, sizeof(seg_t)))) {
        free(s);
        return SQ_ENOMEM;
    }
    s->n_segs = build_segs(cfg, s->segs);
    s->duration_ns = cfg->duration_ns;
    s->arrivals = cfg->arrivals;
    s->step = sched_shard_split(cfg->shard) ? cfg->shard.count : 1;
    rng_seed(&s->rng, cfg->seed);
    if (s->arrivals == SCHED_EVEN) {
        /* The first even start is at Λ⁻¹(0); a shard's at Λ⁻¹(index - 1). */
        s->y = sched_shard_split(cfg->shard) ? cfg->shard.index - 1 : 0;
        settle(s);
    } else {
        s->y = 0;
        advance(s); /* a Poisson process's first event comes after one exponential gap */
    }
    *out = s;
    return 0;
}

void sched_open_free(sched_open_t *s)
{
    if (!s)
        return;
    free(s->segs);
    free(s);
}

bool sched_open_peek(const sched_open_t *s, int64_t *t_ns)
{
    if (s->next_ns < 0)
        return false;
    *t_ns = s->next_ns;
    return true;
}

bool sched_open_next(sched_open_t *s, int64_t *t_ns)
{
    if (!sched_open_peek(s, t_ns))
        return false;
    s->count++;
    advance(s);
    return true;
}

size_t sched_open_due(sched_open_t *s, int64_t now_ns, int64_t *out, size_t max)
{
    size_t n = 0;
    while (n < max && s->next_ns >= 0 && s->next_ns <= now_ns)
        sched_open_next(s, &out[n++]);
    return n;
}

uint64_t sched_open_count(const sched_open_t *s)
{
    return s->count;
}

double sched_open_lambda(const sched_open_cfg_t *cfg, int64_t t_ns)
{
    if (validate(cfg) < 0)
        return 0;
    if (t_ns < 0)
        t_ns = 0;
    if (t_ns > cfg->duration_ns)
        t_ns = cfg->duration_ns;
    double t = t_ns / 1e9;
    if (cfg->shape == SCHED_CONSTANT)
        return cfg->rate * t;
    if (cfg->shape == SCHED_RAMP)
        return cfg->from * t + (cfg->to - cfg->from) * t * t / (2 * (cfg->duration_ns / 1e9));
    double sum = 0;
    int64_t at = 0;
    for (size_t i = 0; i < cfg->n_steps && at < t_ns; i++) {
        bool last = i + 1 == cfg->n_steps;
        int64_t end = last || cfg->steps[i].for_ns > t_ns - at ? t_ns : at + cfg->steps[i].for_ns;
        sum += cfg->steps[i].rate * ((end - at) / 1e9);
        at = end;
    }
    return sum;
}

uint64_t sched_open_even_count(const sched_open_cfg_t *cfg)
{
    /* Starts at Λ⁻¹(k) for k = 0, 1, ... while Λ⁻¹(k) < duration: the ceil(Λ(T)) integers
     * below Λ(T). The last one is placed with the iterator's own inverse and ns rounding, so
     * the count agrees with the iterator exactly, in O(steps). */
    sched_open_cfg_t c = *cfg;
    c.arrivals = SCHED_EVEN;
    c.shard = (sched_shard_t){0, 0};
    sched_open_t *s;
    if (sched_open_new(&c, &s) < 0)
        return 0;
    double k = ceil(s->n_segs ? s->segs[s->n_segs - 1].l1 : 0);
    uint64_t n = 0;
    for (; k >= 1 && n == 0; k -= 1) {
        s->seg = 0;
        s->y = k - 1;
        settle(s);
        if (s->next_ns >= 0)
            n = (uint64_t)k;
    }
    sched_open_free(s);
    return sched_shard_share(cfg->shard, 0, n);
}

double sched_open_expected(const sched_open_cfg_t *cfg, int64_t t0_ns, int64_t t1_ns)
{
    double a = sched_open_lambda(cfg, t0_ns), b = sched_open_lambda(cfg, t1_ns);
    if (b <= a)
        return 0;
    if (cfg->arrivals == SCHED_POISSON)
        return (b - a) / (sched_shard_split(cfg->shard) ? cfg->shard.count : 1);
    /* Even starts are at Λ⁻¹(k): the integers k in [ceil(a), ceil(b)). Λ in floating point can
     * land a hair above an integer it should equal. */
    double ka = ceil(a - 1e-9), kb = ceil(b - 1e-9);
    ka = ka > 0 ? ka : 0;
    return kb > ka ? (double)sched_shard_share(cfg->shard, (uint64_t)ka, (uint64_t)kb) : 0;
}

double sched_open_rate(const sched_open_cfg_t *cfg, int64_t t_ns)
{
    if (validate(cfg) < 0 || t_ns < 0 || t_ns >= cfg->duration_ns)
        return 0;
    if (cfg->shape == SCHED_CONSTANT)
        return cfg->rate;
    if (cfg->shape == SCHED_RAMP)
        return cfg->from + (cfg->to - cfg->from) * ((double)t_ns / (double)cfg->duration_ns);
    int64_t at = 0;
    for (size_t i = 0; i + 1 < cfg->n_steps; i++) {
        if (t_ns < at + cfg->steps[i].for_ns)
            return cfg->steps[i].rate;
        at += cfg->steps[i].for_ns;
    }
    return cfg->steps[cfg->n_steps - 1].rate;
}
