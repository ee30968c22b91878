/* The ledger of the objects a run created: pools of created (and listed) objects behind
 * {{pick}}, and the journal of every create and delete, kept as completions arrive; its
 * "lifecycle" section at the end. */
#include <jansson.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"
#include "squall/journal.h"
#include "squall/pool.h"
#include "squall/value.h"

#define MAX_PICKS 8 /* pools one class may pick from */

/* What one {{pick:...}} reference asks for. */
typedef struct {
    int cls;     /* the creating class whose pool it picks from */
    bool path;   /* render the whole path without its leading '/', else the last segment */
    double zipf; /* > 0: Zipf(s) by rank, else uniform */
} pick_spec_t;

/* The pools a class's templates pick from, with how many references each. */
typedef struct {
    int cls[MAX_PICKS], count[MAX_PICKS];
    int n;
} pick_need_t;

struct ledger {
    const plan_t *plan;
    out_t *o;
    pool_t **pools;     /* per class: the creating and list classes' pools, NULL for others */
    pool_t *held;       /* objects taken by deletes in flight (version = their class) */
    pool_t *uncertain;  /* creates with no clear answer (5xx, timeout, cancelled): may exist */
    int *creating;      /* per class: creates in flight */
    pick_need_t *needs; /* per class */
    bool *needed;       /* per class: some template picks from its pool */
    int default_cls;    /* the only creating class, for a bare {{pick}}; -1 if none or several */
    int cur_cls;        /* the class being rendered */
    bool creates;       /* some class creates */
    journal_t *journal;
    char *journal_path;
    int64_t created, existed, create_failed, deleted, skipped;
    int64_t incidental; /* of created: by writes whose class did not say it creates */
    int64_t refused_items; /* list items whose path was not a plain request path */
    json_t *teardown; /* the teardown's figures, or NULL */
    bool churn;       /* a churn phase reported its band */
    bool churn_reached;
    int64_t churn_min, churn_max;
    int64_t churn_pop, churn_low, churn_high; /* the population and the band the plan allows */
    const char *churn_phase;
    const char **gathered; /* handed out by ledger_gather */
    int *gathered_cls;
};

static bool creating(const plan_t *p, size_t i)
{
    const plan_req_t *pr = &p->reqs[i];
    return pr->kind == PLAN_WRITE && pr->write.creates;
}

/* A write that may create an object: any but DELETE and a deletes class. Whatever its class
 * says, an object it answered 201 for is this run's: journaled, and torn down unless kept. */
static bool may_create(const plan_t *p, size_t i)
{
    return plan_req_may_create(&p->reqs[i]);
}

/* Objects of class i the teardown deletes: those it created, unless the class keeps them. */
static bool torn_down(const plan_t *p, size_t i)
{
    return may_create(p, i) && !p->reqs[i].write.keep;
}

/* ---- {{pick}} ---------------------------------------------------------------------------- */

static bool word_is(const char *s, size_t n, const char *w)
{
    return strlen(w) == n && memcmp(s, w, n) == 0;
}

/* Parses "CLASS,name,zipf=S" (every part optional, any order); 0 or SQ_EINVAL with why. */
static int parse_pick(const ledger_t *g, const char *arg, size_t len, pick_spec_t *sp, char *why,
                      size_t cap)
{
    *sp = (pick_spec_t){.cls = g->default_cls};
    for (size_t at = 0; at < len;) {
        const char *c = memchr(arg + at, ',', len - at);
        size_t end = c ? (size_t)(c - arg) : len, a = at, b = end;
        while (a < b && arg[a] == ' ')
            a++;
        while (b > a && arg[b - 1] == ' ')
            b--;
        const char *w = arg + a;
        size_t n = b - a;
        int k = -1;
        for (size_t i = 0; i < g->plan->n_reqs && k < 0; i++)
            if (g->pools[i] && word_is(w, n, g->plan->reqs[i].name))
                k = (int)i;
        if (k >= 0) {
            sp->cls = k;
        } else if (word_is(w, n, "path")) {
            sp->path = true;
        } else if (word_is(w, n, "name")) {
            sp->path = false;
        } else if (word_is(w, n, "zipf")) {
            sp->zipf = 1;
        } else if (n > 5 && memcmp(w, "zipf=", 5) == 0) {
            char num[32];
            snprintf(num, sizeof num, "%.*s", (int)(n - 5 < 31 ? n - 5 : 31), w + 5);
            if (value_parse_number(num, 0.01, 10, &sp->zipf)) {
                snprintf(why, cap, "zipf=S needs a number in [0.01, 10], got '%s'", num);
                return SQ_EINVAL;
            }
        } else if (n > 0) {
            snprintf(why, cap,
                     "unknown pick option '%.*s' (expected a creating or list class, name, path or "
                     "zipf=S)",
                     (int)n, w);
            return SQ_EINVAL;
        }
        at = end + 1;
    }
    if (sp->cls < 0) {
        snprintf(why, cap,
                 "a bare {{pick}} needs exactly one creating class in the plan: name "
                 "the pool, e.g. {{pick:CLASS}}");
        return SQ_EINVAL;
    }
    return 0;
}

/* Writes the picked object's path (or name) into dst; with `take` (a deletes class) the object
 * moves from its pool to `held`, so two deletes in flight never pick the same object. */
static int pick_resolve(void *user, const char *arg, size_t arg_len, const tmpl_ctx_t *ctx,
                        char *dst, size_t cap, size_t *len)
{
    ledger_t *L = user;
    pick_spec_t sp;
    char why[160];
    if (parse_pick(L, arg, arg_len, &sp, why, sizeof why))
        return SQ_EINVAL;
    pool_t *p = L->pools[sp.cls];
    if (pool_count(p) == 0)
        return SQ_ENOTFOUND;
    size_t slot = sp.zipf > 0 ? pool_pick_zipf(p, ctx->rng, sp.zipf) : pool_pick(p, ctx->rng);
    const char *path = pool_path(p, slot), *v = path + (path[0] == '/');
    if (!sp.path && strrchr(path, '/'))
        v = strrchr(path, '/') + 1;
    *len = strlen(v);
    if (*len > cap)
        return 0; /* the renderer grows its buffer and calls again with the same rng state */
    memcpy(dst, v, *len);
    const plan_req_t *pr = &L->plan->reqs[L->cur_cls];
    if (pr->kind == PLAN_WRITE && pr->write.deletes) {
        int rc = pool_add(L->held, path, (uint64_t)sp.cls);
        if (rc == 0)
            pool_remove(p, path);
        else if (rc != SQ_EEXISTS)
            return rc;
    }
    return 0;
}

/* Finds every {{pick...}} reference of a template text that is not a [list] or a range. */
static int scan_picks(ledger_t *g, size_t cls, const char *text, plan_pos_t pos)
{
    pick_need_t *need = &g->needs[cls];
    for (const char *s = text ? strstr(text, "{{") : NULL; s; s = strstr(s, "{{")) {
        if (s[2] == '{' && s[3] == '{') {
            s += 4;
            continue;
        }
        const char *a = s + 2, *end = strstr(a, "}}");
        if (!end)
            break;
        while (*a == ' ')
            a++;
        s = end + 2;
        if (strncmp(a, "pick", 4) || (a[4] != ':' && a[4] != ' ' && a + 4 != end))
            continue;
        const char *arg = a[4] == ':' ? a + 5 : end;
        size_t n = (size_t)(end - arg);
        while (n > 0 && arg[n - 1] == ' ')
            n--;
        if (n && (arg[0] == '[' || memmem(arg, n, "..", 2)))
            continue;
        pick_spec_t sp;
        char why[160];
        if (parse_pick(g, arg, n, &sp, why, sizeof why)) {
            out_raw(g->o, OUT_ERROR, "%s:%d:%d: error: class '%s': {{pick%s%.*s}}: %s", pos.file,
                    pos.line, pos.col, g->plan->reqs[cls].name, n ? ":" : "", (int)n, arg, why);
            return SQ_EINVAL;
        }
        int k = 0;
        while (k < need->n && need->cls[k] != sp.cls)
            k++;
        if (k == MAX_PICKS)
            return SQ_ELIMIT;
        need->cls[k] = sp.cls;
        need->count[k]++;
        g->needed[sp.cls] = true;
        need->n += k == need->n;
    }
    return 0;
}

/* ---- setup -------------------------------------------------------------------------------- */

static void ledger_free(void *self)
{
    ledger_t *g = self;
    journal_close(g->journal);
    for (size_t i = 0; g->pools && i < g->plan->n_reqs; i++)
        pool_free(g->pools[i]);
    free(g->pools);
    pool_free(g->held);
    pool_free(g->uncertain);
    free(g->creating);
    free(g->needs);
    free(g->needed);
    free(g->journal_path);
    free(g->gathered);
    free(g->gathered_cls);
    json_decref(g->teardown);
    free(g);
}

/* One pool per write that may create and per list class; the bare {{pick}} names the only
 * class with `creates: true`. */
static int pools_init(ledger_t *g)
{
    const plan_t *p = g->plan;
    int creators = 0;
    g->default_cls = -1;
    for (size_t i = 0; i < p->n_reqs; i++) {
        if (!may_create(p, i) && p->reqs[i].kind != PLAN_LIST)
            continue;
        if (pool_new(&g->pools[i]))
            return SQ_ENOMEM;
        g->creates |= may_create(p, i);
        if (creating(p, i))
            g->default_cls = creators++ ? -2 : (int)i;
    }
    if (g->default_cls == -2)
        g->default_cls = -1;
    return 0;
}

static int ledger_new(const obs_cfg_t *cfg, void **self)
{
    ledger_t *g = calloc(1, sizeof(*g));
    if (!g)
        return SQ_ENOMEM;
    *self = g;
    g->plan = cfg->plan;
    g->o = cfg->o;
    size_t n = cfg->plan->n_reqs ? cfg->plan->n_reqs : 1;
    g->pools = calloc(n, sizeof(*g->pools));
    g->creating = calloc(n, sizeof(*g->creating));
    g->needs = calloc(n, sizeof(*g->needs));
    g->needed = calloc(n, sizeof(*g->needed));
    if (!g->pools || !g->creating || !g->needs || !g->needed || pool_new(&g->held) ||
        pool_new(&g->uncertain) || pools_init(g))
        return SQ_ENOMEM;
    return 0;
}

/* DIR/journal.ndjson, when some class creates (else there is nothing to journal). */
static int ledger_open(void *self, const char *dir)
{
    ledger_t *g = self;
    if (!g->creates)
        return 0;
    size_t len = strlen(dir) + sizeof("/" JOURNAL_FILE);
    if (!(g->journal_path = malloc(len)))
        return SQ_ENOMEM;
    snprintf(g->journal_path, len, "%s/%s", dir, JOURNAL_FILE);
    return journal_open(g->journal_path, g->plan->target.url, g->o, &g->journal);
}

int ledger_prepare(ledger_t *g, tmpl_env_t *env)
{
    bool pools = false;
    for (size_t i = 0; i < g->plan->n_reqs; i++)
        pools |= g->pools[i] != NULL;
    if (!pools)
        return 0;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < g->plan->n_reqs; i++) {
        const plan_req_t *pr = &g->plan->reqs[i];
        rc = scan_picks(g, i, pr->path, pr->path_pos);
        if (rc == 0 && pr->kind == PLAN_WRITE)
            rc = scan_picks(g, i, pr->write.body, pr->write.body_pos);
    }
    return rc ? rc : tmpl_env_add_resolver(env, "pick", pick_resolve, g);
}

/* ---- requests ----------------------------------------------------------------------------- */

bool ledger_ready(ledger_t *g, int cls)
{
    g->cur_cls = cls;
    const pick_need_t *need = &g->needs[cls];
    for (int k = 0; k < need->n; k++) {
        if (pool_count(g->pools[need->cls[k]]) < (size_t)need->count[k]) {
            g->skipped++;
            return false;
        }
    }
    return true;
}

int64_t ledger_alive(const ledger_t *g, int cls)
{
    return g->pools[cls] ? (int64_t)pool_count(g->pools[cls]) + g->creating[cls] : 0;
}

/* A create is about to be sent: its journal line goes first (write-ahead). */
static void ledger_sent(void *self, const obs_sent_t *s)
{
    ledger_t *g = self;
    if (s->cls < 0 || s->page || !creating(g->plan, (size_t)s->cls) || !s->path)
        return;
    g->creating[s->cls]++;
    journal_add(g->journal, JOURNAL_PUT, s->path, g->plan->reqs[s->cls].name, 0);
}

static uint64_t answer_version(const eng_result_t *res)
{
    json_t *doc = res->body ? json_loadb(res->body, res->body_len, 0, NULL) : NULL;
    json_t *v = json_is_object(doc) ? json_object_get(doc, "version") : NULL;
    uint64_t ver =
        json_is_integer(v) && json_integer_value(v) > 0 ? (uint64_t)json_integer_value(v) : 0;
    json_decref(doc);
    return ver;
}

/* A create's answer: 201 = ours, other 2xx or 4xx = not created by us, else it may exist. */
static void create_done(ledger_t *g, int cls, const char *path, const eng_result_t *res)
{
    const char *name = g->plan->reqs[cls].name;
    g->creating[cls]--;
    if (res->status == 201) {
        uint64_t ver = answer_version(res);
        if (pool_add(g->pools[cls], path, ver) == 0)
            g->created++;
        journal_add(g->journal, JOURNAL_CREATED, path, name, ver);
    } else if (res->outcome == ENG_OUT_S2XX || res->outcome == ENG_OUT_S3XX ||
               res->outcome == ENG_OUT_S4XX) {
        g->existed += res->outcome == ENG_OUT_S2XX;
        g->create_failed += res->outcome != ENG_OUT_S2XX;
        journal_add(g->journal, JOURNAL_FAILED, path, name, 0);
    } else {
        pool_add(g->uncertain, path, (uint64_t)cls);
    }
}

/* A delete's answer: 2xx, 404 or 410 = gone; otherwise a taken object goes back to its pool. */
static void delete_done(ledger_t *g, int cls, const char *path, const eng_result_t *res)
{
    long held = pool_slot(g->held, path);
    int owner = held >= 0 ? (int)pool_version(g->held, (size_t)held) : -1;
    bool gone = res->outcome == ENG_OUT_S2XX || res->status == 404 || res->status == 410;
    if (held >= 0)
        pool_remove(g->held, path);
    if (!gone) {
        if (owner >= 0)
            pool_add(g->pools[owner], path, 0);
        return;
    }
    bool ours = owner >= 0 || pool_remove(g->uncertain, path) == 0;
    for (size_t i = 0; owner < 0 && i < g->plan->n_reqs; i++)
        if (g->pools[i] && pool_remove(g->pools[i], path) == 0)
            ours = true;
    if (ours) {
        g->deleted++;
        journal_add(g->journal, JOURNAL_DELETED, path, g->plan->reqs[cls].name, 0);
    }
}

/* A list page's items join its class's pool of discovered objects: objects that existed before
 * the run, or were made by others, to pick from, never to tear down. Items are found where the
 * embedded target puts them: {"items": [{"path": P, "version": V}, ...]}. */
static void list_done(ledger_t *g, int cls, const eng_result_t *res)
{
    if (res->outcome != ENG_OUT_S2XX || !res->body || !g->needed[cls])
        return;
    json_t *doc = json_loadb(res->body, res->body_len, 0, NULL);
    json_t *items = json_is_object(doc) ? json_object_get(doc, "items") : NULL;
    size_t i;
    json_t *it;
    json_array_foreach(items, i, it)
    {
        json_t *path = json_object_get(it, "path"), *ver = json_object_get(it, "version");
        const char *ps = json_is_string(path) ? json_string_value(path) : NULL;
        /* The target's text becomes a request path when picked: only a plain path is taken (no
         * control byte, space, query or fragment; NUL inside a JSON string ends it early, so the
         * lengths must agree). Others are counted, never sent. */
        if (ps && (value_path_problem(ps) || strchr(ps, '?') ||
                   strlen(ps) != json_string_length(path))) {
            g->refused_items++;
            continue;
        }
        if (ps && !pool_contains(g->held, ps))
            pool_add(g->pools[cls], json_string_value(path),
                     json_is_integer(ver) ? (uint64_t)json_integer_value(ver) : 0);
    }
    json_decref(doc);
}

/* Any other write: a 201 made an object of this run's (no line was written ahead, since the
 * class did not say it creates: the created line is the record). */
static void write_done(ledger_t *g, int cls, const char *path, const eng_result_t *res)
{
    if (res->status != 201)
        return;
    if (pool_add(g->pools[cls], path, answer_version(res)) == 0) {
        g->created++;
        g->incidental++;
    }
    journal_add(g->journal, JOURNAL_CREATED, path, g->plan->reqs[cls].name, 0);
}

static void ledger_done(void *self, const obs_done_t *d)
{
    ledger_t *g = self;
    if (d->whole || d->cls < 0)
        return;
    const plan_req_t *pr = &g->plan->reqs[d->cls];
    if (pr->kind == PLAN_LIST)
        list_done(g, d->cls, d->res);
    if (pr->kind != PLAN_WRITE || !d->path || !d->first)
        return;
    if (pr->write.creates)
        create_done(g, d->cls, d->path, d->res);
    else if (pr->write.deletes || !strcmp(pr->write.method, "DELETE"))
        delete_done(g, d->cls, d->path, d->res);
    else
        write_done(g, d->cls, d->path, d->res);
}

static void ledger_second(void *self, const obs_second_t *s)
{
    (void)s;
    ledger_t *g = self;
    journal_flush(g->journal);
}

/* ---- teardown ------------------------------------------------------------------------------ */

bool ledger_creates(const ledger_t *g)
{
    return g->creates;
}

const char *ledger_journal(const ledger_t *g)
{
    return g->journal_path ? g->journal_path : JOURNAL_FILE;
}

size_t ledger_gather(ledger_t *g, const char ***paths, const int **cls)
{
    size_t n = pool_count(g->held) + pool_count(g->uncertain);
    for (size_t i = 0; i < g->plan->n_reqs; i++)
        n += torn_down(g->plan, i) ? pool_count(g->pools[i]) : 0;
    free(g->gathered);
    free(g->gathered_cls);
    g->gathered = calloc(n ? n : 1, sizeof(*g->gathered));
    g->gathered_cls = calloc(n ? n : 1, sizeof(*g->gathered_cls));
    if (!g->gathered || !g->gathered_cls)
        return 0;
    size_t k = 0;
    for (size_t i = 0; i < g->plan->n_reqs; i++) {
        for (size_t s = 0; torn_down(g->plan, i) && s < pool_count(g->pools[i]); s++) {
            g->gathered_cls[k] = (int)i;
            g->gathered[k++] = pool_path(g->pools[i], s);
        }
    }
    pool_t *extra[2] = {g->held, g->uncertain};
    for (int e = 0; e < 2; e++) {
        for (size_t s = 0; s < pool_count(extra[e]); s++) {
            g->gathered_cls[k] = (int)pool_version(extra[e], s);
            g->gathered[k++] = pool_path(extra[e], s);
        }
    }
    *paths = g->gathered;
    *cls = g->gathered_cls;
    return k;
}

void ledger_torn(ledger_t *g, const char *path, int cls, bool gone)
{
    (void)gone;
    journal_add(g->journal, JOURNAL_DELETED, path, cls >= 0 ? g->plan->reqs[cls].name : "", 0);
}

void ledger_teardown_json(ledger_t *g, json_t *teardown)
{
    json_decref(g->teardown);
    g->teardown = teardown;
    journal_flush(g->journal);
}

/* The band a churn population may move in: population ± tolerance, widened to ±1 (at the
 * population deletes and creates alternate, so one object is always coming or going). */
void ledger_churn_band(ledger_t *g, size_t phase, bool reached, int64_t min, int64_t max,
                       int64_t pop, double tolerance)
{
    g->churn = true;
    g->churn_reached = reached;
    g->churn_min = min;
    g->churn_max = max;
    int64_t lo = (int64_t)floor((double)pop * (1 - tolerance)),
            hi = (int64_t)ceil((double)pop * (1 + tolerance));
    g->churn_low = lo < pop - 1 ? (lo > 0 ? lo : 0) : (pop > 0 ? pop - 1 : 0);
    g->churn_high = hi > pop + 1 ? hi : pop + 1;
    g->churn_pop = pop;
    g->churn_phase = obs_phase_name(g->plan, phase);
}

/* The classes that keep their objects: how many each left on the target, and the plan's why. */
static json_t *kept_json(const ledger_t *g)
{
    json_t *k = json_object();
    for (size_t i = 0; k && i < g->plan->n_reqs; i++) {
        const plan_req_t *pr = &g->plan->reqs[i];
        if (!may_create(g->plan, i) || !pr->write.keep)
            continue;
        json_object_set_new(k, pr->name,
                            json_pack("{s:I, s:s?}", "objects", (json_int_t)pool_count(g->pools[i]),
                                      "why", pr->write.keep_why));
    }
    return k;
}

size_t ledger_kept(const ledger_t *g, int cls)
{
    return may_create(g->plan, (size_t)cls) && g->plan->reqs[cls].write.keep
               ? pool_count(g->pools[cls])
               : 0;
}

/* The "lifecycle" section: only when some class may create (or a churn phase ran). */
static int ledger_finish(void *self, results_t *res, const char *dir)
{
    (void)dir;
    ledger_t *g = self;
    journal_flush(g->journal);
    if (g->refused_items)
        out_warn(g->o,
                 "%lld list items were never picked: their path is not a plain request path "
                 "(a control byte, a space, a query or a fragment)",
                 (long long)g->refused_items);
    if (!g->creates)
        return 0;
    json_t *s = json_pack("{s:s, s:I, s:I, s:I, s:I, s:I, s:I, s:O, s:o}", "journal", JOURNAL_FILE,
                          "created", (json_int_t)g->created, "created_by_other_writes",
                          (json_int_t)g->incidental, "existed", (json_int_t)g->existed,
                          "create_failed", (json_int_t)g->create_failed, "deleted",
                          (json_int_t)g->deleted, "skipped_empty_pool", (json_int_t)g->skipped,
                          "teardown", g->teardown ? g->teardown : json_null(), "kept",
                          kept_json(g));
    if (s && g->churn) {
        /* The band is watched from the first time the population is reached; a run that never
         * reached it has no band to show. */
        json_object_set_new(s, "churn_population_reached", json_boolean(g->churn_reached));
        json_object_set_new(s, "churn_population_min",
                            g->churn_reached ? json_integer(g->churn_min) : json_null());
        json_object_set_new(s, "churn_population_max",
                            g->churn_reached ? json_integer(g->churn_max) : json_null());
        json_object_set_new(s, "churn_population_low", json_integer(g->churn_low));
        json_object_set_new(s, "churn_population_high", json_integer(g->churn_high));
        bool held = g->churn_reached && g->churn_min >= g->churn_low &&
                    g->churn_max <= g->churn_high;
        json_object_set_new(s, "churn_population_held", json_boolean(held));
        if (!g->churn_reached)
            out_warn(g->o,
                     "phase %s: the churn never reached its population (%lld objects): its "
                     "creates failed or the phase was too short",
                     g->churn_phase, (long long)g->churn_pop);
        else if (!held)
            out_warn(g->o,
                     "phase %s: the churn's population left its band (%lld..%lld objects, "
                     "allowed %lld..%lld by its tolerance): creates or deletes failed",
                     g->churn_phase, (long long)g->churn_min, (long long)g->churn_max,
                     (long long)g->churn_low, (long long)g->churn_high);
    }
    return s ? results_set_section(res, "lifecycle", s) : SQ_ENOMEM;
}

static const obs_ops_t ops = {
    .name = "ledger",
    .open = ledger_open,
    .sent = ledger_sent,
    .done = ledger_done,
    .second = ledger_second,
    .finish = ledger_finish,
    .free = ledger_free,
};

const obs_entry_t obs_ledger_entry = {.ops = &ops, .new = ledger_new};
