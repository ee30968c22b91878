/* Keys (one client's requests to one path with one method) and the fleets they form: keys of a
 * class that repeat at one period, their agent count, period, and Rayleigh test of phases. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "prof_int.h"
#include "squall/err.h"

#define NS INT64_C(1000000000)

int prof_keys_init(prof_t *p)
{
    p->cap_keys = 4096;
    p->keys = calloc(p->cap_keys, sizeof *p->keys);
    return p->keys ? 0 : SQ_ENOMEM;
}

static prof_key_t *slot(prof_key_t *keys, size_t cap, uint64_t h)
{
    size_t i = (size_t)h & (cap - 1);
    while (keys[i].hash && keys[i].hash != h)
        i = (i + 1) & (cap - 1);
    return &keys[i];
}

/* Doubles the table (open addressing, linear probing). -1 when it may not or cannot grow. */
static int grow(prof_t *p)
{
    if (p->n_keys >= PROF_MAX_KEYS)
        return -1;
    size_t cap = 2 * p->cap_keys;
    prof_key_t *k = calloc(cap, sizeof *k);
    if (!k)
        return -1;
    for (size_t i = 0; i < p->cap_keys; i++)
        if (p->keys[i].hash)
            *slot(k, cap, p->keys[i].hash) = p->keys[i];
    free(p->keys);
    p->keys = k;
    p->cap_keys = cap;
    return 0;
}

prof_key_t *prof_key_find(prof_t *p, uint64_t h, bool add)
{
    h = h ? h : 1; /* 0 marks an empty slot */
    prof_key_t *k = slot(p->keys, p->cap_keys, h);
    if (k->hash || !add)
        return k->hash ? k : NULL;
    if (2 * (p->n_keys + 1) > p->cap_keys) {
        if (grow(p))
            return NULL;
        k = slot(p->keys, p->cap_keys, h);
    }
    memset(k, 0, sizeof *k);
    k->hash = h;
    k->fleet = -1;
    p->n_keys++;
    return k;
}

/* ---- fleets ---------------------------------------------------------------------------- */

typedef struct {
    uint32_t cls;
    double mean, sd;
    prof_key_t *key;
} cand_t;

static int cmp_cand(const void *a, const void *b)
{
    const cand_t *x = a, *y = b;
    if (x->cls != y->cls)
        return x->cls < y->cls ? -1 : 1;
    return (x->mean > y->mean) - (x->mean < y->mean);
}

static int cmp_dbl(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* A key repeats regularly: at least 4 requests, gaps of at least 3 time resolutions (and
 * 100 ms) whose spread is within 10 % of their mean or within one resolution. */
static bool periodic(const prof_t *p, const prof_key_t *k, double *mean, double *sd)
{
    if (k->n < 4 || p->cls[k->cls].kind == PLAN_WATCH)
        return false;
    *mean = k->mean;
    *sd = sqrt(k->m2 / (k->n - 2));
    double res = (double)p->res;
    return *mean >= 3 * res && *mean >= 1e8 && *sd <= fmax(0.1 * *mean, res);
}

/* The period as a plan writes it: whole seconds when within 1 % (or one resolution) of them,
 * else milliseconds. */
static int64_t plan_period(double ns, int64_t res)
{
    double s = round(ns / 1e9);
    if (s >= 1 && fabs(ns - s * 1e9) <= fmax(0.01 * ns, (double)res))
        return (int64_t)s * NS;
    int64_t ms = (int64_t)llround(ns / 1e6);
    return (ms < 1 ? 1 : ms) * INT64_C(1000000);
}

static int add_fleet(prof_t *p, cand_t *c, size_t n)
{
    prof_fleet_t *g = realloc(p->fleets, (p->n_fleets + 1) * sizeof *g);
    double *v = malloc(n * sizeof *v);
    if (!g || !v) {
        if (g)
            p->fleets = g;
        free(v);
        return SQ_ENOMEM;
    }
    p->fleets = g;
    prof_fleet_t *f = &p->fleets[p->n_fleets];
    memset(f, 0, sizeof *f);
    f->cls = c[0].cls;
    f->agents = (uint32_t)n;
    f->agent_var = PROF_NONE;
    for (size_t i = 0; i < n; i++) {
        v[i] = c[i].mean;
        f->requests += c[i].key->n;
        c[i].key->fleet = (int32_t)p->n_fleets;
    }
    qsort(v, n, sizeof *v, cmp_dbl);
    f->period_ns = (int64_t)llround(v[n / 2]);
    for (size_t i = 0; i < n; i++)
        v[i] = c[i].sd;
    qsort(v, n, sizeof *v, cmp_dbl);
    f->gap_sd_ns = v[n / 2];
    f->every_ns = plan_period((double)f->period_ns, p->res);
    free(v);
    p->n_fleets++;
    return 0;
}

/* Periodic keys of one class, sorted by period, grouped while the period stays within 5 % (or
 * two resolutions) of the group's first. */
static void group(prof_t *p, cand_t *c, size_t n)
{
    for (size_t i = 0; i < n;) {
        size_t j = i + 1;
        double tol = fmax(0.05 * c[i].mean, 2.0 * (double)p->res);
        while (j < n && c[j].cls == c[i].cls && c[j].mean - c[i].mean <= tol)
            j++;
        if (j - i >= (size_t)p->cfg.min_agents && add_fleet(p, c + i, j - i))
            return;
        i = j;
    }
}

/* The numbered segment of the class's shape that tells its agents apart (gw-{n} for 300
 * agents): a number or prefixed number with at least as many values as agents, the closest. */
static uint32_t agent_segment(const prof_t *p, const prof_fleet_t *f)
{
    const prof_trie_t *t = &p->trie;
    uint32_t best = PROF_NONE;
    int64_t best_d = INT64_MAX;
    for (uint32_t n = p->cls[f->cls].node; n != 0 && n != PROF_NONE; n = t->nodes[n].parent) {
        const prof_node_t *k = &t->nodes[n];
        if (k->var == PROF_NONE || (k->lex != LEX_NUM && k->lex != LEX_PNUM))
            continue;
        const prof_var_t *v = &t->vars[k->var];
        int64_t range = v->max - v->min + 1;
        if ((v->n_values < f->agents && !v->more) || range < f->agents)
            continue;
        if (range - f->agents < best_d) {
            best_d = range - f->agents;
            best = n;
        }
    }
    return best;
}

/* One fleet per phase in a plan: the one with the most requests, plus fleets of other classes
 * with the same agents (within 2 %) as more actions of the same agents. */
static void choose(prof_t *p)
{
    size_t best = 0;
    for (size_t i = 1; i < p->n_fleets; i++)
        if (p->fleets[i].requests > p->fleets[best].requests)
            best = i;
    prof_fleet_t *b = &p->fleets[best];
    b->in_plan = true;
    for (size_t i = 0; i < p->n_fleets; i++) {
        prof_fleet_t *f = &p->fleets[i];
        double d = fabs((double)f->agents - (double)b->agents);
        bool taken = false;
        for (size_t k = 0; k < p->n_fleets; k++)
            taken = taken || (p->fleets[k].in_plan && p->fleets[k].cls == f->cls);
        if (!taken && d <= fmax(1, 0.02 * b->agents))
            f->in_plan = true;
    }
    for (size_t i = 0; i < p->n_fleets; i++)
        if (p->fleets[i].in_plan)
            p->fleets[i].agent_var = agent_segment(p, &p->fleets[i]);
}

void prof_fleets_find(prof_t *p)
{
    size_t n = 0;
    for (size_t i = 0; i < p->cap_keys; i++) {
        double m, sd;
        n += p->keys[i].hash && periodic(p, &p->keys[i], &m, &sd);
    }
    cand_t *c = n ? malloc(n * sizeof *c) : NULL;
    if (!c)
        return;
    n = 0;
    for (size_t i = 0; i < p->cap_keys; i++) {
        prof_key_t *k = &p->keys[i];
        double m, sd;
        if (k->hash && periodic(p, k, &m, &sd))
            c[n++] = (cand_t){.cls = k->cls, .mean = m, .sd = sd, .key = k};
    }
    qsort(c, n, sizeof *c, cmp_cand);
    group(p, c, n);
    free(c);
    if (p->n_fleets)
        choose(p);
}

/* Each agent's phase is the mean direction of its requests' times modulo the plan's period;
 * the fleet's agents go through the Rayleigh test. */
void prof_fleets_phases(prof_t *p)
{
    for (size_t f = 0; f < p->n_fleets; f++) {
        prof_fleet_t *fl = &p->fleets[f];
        if (!fl->in_plan)
            continue;
        double *th = malloc(fl->agents * sizeof *th);
        if (!th)
            continue;
        size_t n = 0;
        for (size_t i = 0; i < p->cap_keys && n < fl->agents; i++)
            if (p->keys[i].hash && p->keys[i].fleet == (int32_t)f)
                th[n++] = atan2(p->keys[i].s, p->keys[i].c);
        prof_rayleigh(th, n, &fl->ray);
        free(th);
        fl->aligned = fl->ray.p < p->cfg.alpha;
        double per_rad_ms = (double)fl->every_ns / 1e6 / (2 * M_PI);
        fl->offset_ms = fl->ray.mean * per_rad_ms;
        /* Circular standard deviation sqrt(-2 ln R̄) (Mardia & Jupp, ch. 2; from memory). */
        fl->spread_ms =
            fl->ray.r_bar > 0 ? sqrt(fmax(0, -2 * log(fl->ray.r_bar))) * per_rad_ms : INFINITY;
    }
}
