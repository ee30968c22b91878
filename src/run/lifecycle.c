/* Object lifecycle in a run: pools of created (and listed) objects behind {{pick}}, the journal
 * of creates and deletes, churn phases that hold a population, and the teardown after the last
 * phase. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "run_int.h"
#include "squall/err.h"
#include "squall/journal.h"
#include "squall/pool.h"
#include "squall/value.h"

#define MAX_PICKS          8   /* pools one class may pick from */
#define TEARDOWN_RATE      100 /* deletes per second when the plan names no teardown rate */
#define TEARDOWN_ATTEMPTS  4
#define TEARDOWN_SLACK_NS  (10 * INT64_C(1000000000))
#define INTERRUPTED_MAX_NS (30 * INT64_C(1000000000)) /* teardown after a signal or brake */

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

struct run_life {
    pool_t **pools;     /* per class: the creating classes' pools, NULL for others */
    pool_t *held;       /* objects taken by deletes in flight (version = their class) */
    pool_t *uncertain;  /* creates with no clear answer (5xx, timeout, cancelled): may exist */
    int *creating;      /* per class: creates in flight */
    pick_need_t *needs; /* per class */
    bool *needed;       /* per class: some template picks from its pool */
    int default_cls;    /* the only creating class, for a bare {{pick}}; -1 if none or several */
    int cur_cls;        /* the class being rendered */
    journal_t *journal;
    char *journal_path;
    int64_t churn_done;           /* churn ops issued in the current phase */
    size_t churn_phase;           /* the phase churn_done counts for */
    bool churn_toggle;            /* at the population: alternate delete and create */
    int64_t churn_min, churn_max; /* population seen once the target was first reached */
    bool churn_reached;
    int64_t created, existed, create_failed, deleted, skipped;
    /* Signal guards (unreferenced, so they never keep the loop alive): libuv restores the
     * default action when the runner closes its own signal handles, and a signal between that
     * and the teardown's handles would kill us with objects left. They also count signals, so
     * one that arrives after the runner stopped listening stops the teardown. */
    uv_signal_t guard[2];
    bool guarded;
    int guard_seen;
};

static bool creating(const runner_t *r, size_t i)
{
    const plan_req_t *pr = &r->plan->reqs[i];
    return pr->kind == PLAN_WRITE && pr->write.creates;
}

/* ---- {{pick}} ---------------------------------------------------------------------------- */

static bool word_is(const char *s, size_t n, const char *w)
{
    return strlen(w) == n && memcmp(s, w, n) == 0;
}

/* Parses "CLASS,name,zipf=S" (every part optional, any order); 0 or SQ_EINVAL with why. */
static int parse_pick(const runner_t *r, const char *arg, size_t len, pick_spec_t *sp, char *why,
                      size_t cap)
{
    *sp = (pick_spec_t){.cls = r->life->default_cls};
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
        for (size_t i = 0; i < r->plan->n_reqs && k < 0; i++)
            if (r->life->pools[i] && word_is(w, n, r->plan->reqs[i].name))
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
    runner_t *r = user;
    struct run_life *L = r->life;
    pick_spec_t sp;
    char why[160];
    if (parse_pick(r, arg, arg_len, &sp, why, sizeof why))
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
    const plan_req_t *pr = &r->plan->reqs[L->cur_cls];
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
static int scan_picks(runner_t *r, size_t cls, const char *text, plan_pos_t pos)
{
    pick_need_t *need = &r->life->needs[cls];
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
        if (parse_pick(r, arg, n, &sp, why, sizeof why)) {
            out_raw(r->o, OUT_ERROR, "%s:%d:%d: error: class '%s': {{pick%s%.*s}}: %s", pos.file,
                    pos.line, pos.col, r->plan->reqs[cls].name, n ? ":" : "", (int)n, arg, why);
            return SQ_EINVAL;
        }
        int k = 0;
        while (k < need->n && need->cls[k] != sp.cls)
            k++;
        if (k == MAX_PICKS)
            return SQ_ELIMIT;
        need->cls[k] = sp.cls;
        need->count[k]++;
        r->life->needed[sp.cls] = true;
        need->n += k == need->n;
    }
    return 0;
}

/* ---- setup ------------------------------------------------------------------------------- */

/* Teardown runs after the last phase; a teardown phase anywhere else is refused. */
static int check_phases(runner_t *r)
{
    for (size_t i = 0; i + 1 < r->plan->n_phases; i++) {
        const plan_phase_t *pp = &r->plan->phases[i];
        if (!pp->teardown.on)
            continue;
        out_raw(r->o, OUT_ERROR,
                "%s:%d:%d: error: phase '%s': teardown must be the last phase (this build runs "
                "teardown after every other phase)",
                pp->pos.file, pp->pos.line, pp->pos.col, pp->name);
        return SQ_EINVAL;
    }
    return 0;
}

int run_life_init(runner_t *r)
{
    struct run_life *L = calloc(1, sizeof(*L));
    if (!L)
        return SQ_ENOMEM;
    r->life = L;
    size_t n = r->plan->n_reqs ? r->plan->n_reqs : 1;
    L->pools = calloc(n, sizeof(*L->pools));
    L->creating = calloc(n, sizeof(*L->creating));
    L->needs = calloc(n, sizeof(*L->needs));
    L->needed = calloc(n, sizeof(*L->needed));
    if (!L->pools || !L->creating || !L->needs || !L->needed || pool_new(&L->held) ||
        pool_new(&L->uncertain))
        return SQ_ENOMEM;
    int creators = 0, pools = 0;
    L->default_cls = -1;
    for (size_t i = 0; i < r->plan->n_reqs; i++) {
        const plan_req_t *pr = &r->plan->reqs[i];
        if (!creating(r, i) && pr->kind != PLAN_LIST)
            continue;
        if (pool_new(&L->pools[i]))
            return SQ_ENOMEM;
        pools++;
        if (creating(r, i))
            L->default_cls = creators++ ? -2 : (int)i;
    }
    if (L->default_cls == -2)
        L->default_cls = -1;
    int rc = check_phases(r);
    for (size_t i = 0; rc == 0 && pools && i < r->plan->n_reqs; i++) {
        const plan_req_t *pr = &r->plan->reqs[i];
        rc = scan_picks(r, i, pr->path, pr->path_pos);
        if (rc == 0 && pr->kind == PLAN_WRITE)
            rc = scan_picks(r, i, pr->write.body, pr->write.body_pos);
    }
    if (rc == 0 && pools)
        rc = tmpl_env_add_resolver(r->env, "pick", pick_resolve, r);
    return rc;
}

int run_life_start(runner_t *r, const char *dir)
{
    struct run_life *L = r->life;
    size_t n = strlen(dir) + sizeof("/" JOURNAL_FILE);
    L->journal_path = malloc(n);
    if (!L->journal_path)
        return SQ_ENOMEM;
    snprintf(L->journal_path, n, "%s/%s", dir, JOURNAL_FILE);
    bool creates = false;
    for (size_t i = 0; i < r->plan->n_reqs; i++)
        creates |= creating(r, i);
    if (!creates)
        return 0; /* nothing to journal: no file */
    return journal_open(L->journal_path, r->plan->target.url, r->o, &L->journal);
}

void run_life_close(runner_t *r)
{
    struct run_life *L = r->life;
    if (!L)
        return;
    journal_close(L->journal);
    for (size_t i = 0; L->pools && i < r->plan->n_reqs; i++)
        pool_free(L->pools[i]);
    free(L->pools);
    pool_free(L->held);
    pool_free(L->uncertain);
    free(L->creating);
    free(L->needs);
    free(L->needed);
    free(L->journal_path);
    free(L);
    r->life = NULL;
}

void run_life_second(runner_t *r)
{
    if (r->life)
        journal_flush(r->life->journal);
}

/* ---- requests ---------------------------------------------------------------------------- */

bool run_life_skip(runner_t *r, int cls)
{
    struct run_life *L = r->life;
    L->cur_cls = cls;
    const pick_need_t *need = &L->needs[cls];
    for (int k = 0; k < need->n; k++) {
        if (pool_count(L->pools[need->cls[k]]) < (size_t)need->count[k]) {
            L->skipped++;
            return true;
        }
    }
    return false;
}

/* The object path of a request: its rendered path without a query. */
static const char *object_path(const char *path, char *buf, size_t cap)
{
    size_t n = strcspn(path, "?");
    if (n >= cap)
        n = cap - 1;
    memcpy(buf, path, n);
    buf[n] = '\0';
    return buf;
}

static void on_guard(uv_signal_t *s, int signum)
{
    (void)signum;
    struct run_life *L = s->data;
    L->guard_seen++;
}

/* Started with the first create: from then on there is something to tear down. */
static void guards_start(runner_t *r)
{
    struct run_life *L = r->life;
    static const int sig[2] = {SIGINT, SIGTERM};
    for (int i = 0; i < 2; i++) {
        uv_signal_init(&r->loop, &L->guard[i]);
        L->guard[i].data = L;
        uv_signal_start(&L->guard[i], on_guard, sig[i]);
        uv_unref((uv_handle_t *)&L->guard[i]);
    }
    L->guarded = true;
}

static void guards_close(runner_t *r)
{
    struct run_life *L = r->life;
    if (!L->guarded)
        return;
    for (int i = 0; i < 2; i++)
        uv_close((uv_handle_t *)&L->guard[i], NULL);
    L->guarded = false;
    uv_run(&r->loop, UV_RUN_DEFAULT); /* runs the close callbacks */
}

void run_life_sending(runner_t *r, int cls, const char *path)
{
    struct run_life *L = r->life;
    if (!creating(r, (size_t)cls))
        return;
    if (!L->guarded)
        guards_start(r);
    char buf[4096];
    L->creating[cls]++;
    journal_add(L->journal, JOURNAL_PUT, object_path(path, buf, sizeof buf),
                r->plan->reqs[cls].name, 0);
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
static void create_done(runner_t *r, int cls, const char *path, const eng_result_t *res)
{
    struct run_life *L = r->life;
    const char *name = r->plan->reqs[cls].name;
    L->creating[cls]--;
    if (res->status == 201) {
        uint64_t ver = answer_version(res);
        if (pool_add(L->pools[cls], path, ver) == 0)
            L->created++;
        journal_add(L->journal, JOURNAL_CREATED, path, name, ver);
    } else if (res->outcome == ENG_OUT_S2XX || res->outcome == ENG_OUT_S3XX ||
               res->outcome == ENG_OUT_S4XX) {
        L->existed += res->outcome == ENG_OUT_S2XX;
        L->create_failed += res->outcome != ENG_OUT_S2XX;
        journal_add(L->journal, JOURNAL_FAILED, path, name, 0);
    } else {
        pool_add(L->uncertain, path, (uint64_t)cls);
    }
}

/* A delete's answer: 2xx, 404 or 410 = gone; otherwise a taken object goes back to its pool. */
static void delete_done(runner_t *r, int cls, const char *path, const eng_result_t *res)
{
    struct run_life *L = r->life;
    long held = pool_slot(L->held, path);
    int owner = held >= 0 ? (int)pool_version(L->held, (size_t)held) : -1;
    bool gone = res->outcome == ENG_OUT_S2XX || res->status == 404 || res->status == 410;
    if (held >= 0)
        pool_remove(L->held, path);
    if (!gone) {
        if (owner >= 0)
            pool_add(L->pools[owner], path, 0);
        return;
    }
    bool ours = owner >= 0 || pool_remove(L->uncertain, path) == 0;
    for (size_t i = 0; owner < 0 && i < r->plan->n_reqs; i++)
        if (L->pools[i] && pool_remove(L->pools[i], path) == 0)
            ours = true;
    if (ours) {
        L->deleted++;
        journal_add(L->journal, JOURNAL_DELETED, path, r->plan->reqs[cls].name, 0);
    }
}

/* A list page's items join its class's pool of discovered objects: objects that existed before
 * the run, or were made by others, to pick from, never to tear down. Items are found where the
 * embedded target puts them: {"items": [{"path": P, "version": V}, ...]}. */
static void list_done(runner_t *r, int cls, const eng_result_t *res)
{
    if (res->outcome != ENG_OUT_S2XX || !res->body || !r->life->needed[cls])
        return;
    json_t *doc = json_loadb(res->body, res->body_len, 0, NULL);
    json_t *items = json_is_object(doc) ? json_object_get(doc, "items") : NULL;
    size_t i;
    json_t *it;
    json_array_foreach(items, i, it)
    {
        json_t *path = json_object_get(it, "path"), *ver = json_object_get(it, "version");
        if (json_is_string(path) && json_string_value(path)[0] == '/' &&
            !pool_contains(r->life->held, json_string_value(path)))
            pool_add(r->life->pools[cls], json_string_value(path),
                     json_is_integer(ver) ? (uint64_t)json_integer_value(ver) : 0);
    }
    json_decref(doc);
}

void run_life_done(runner_t *r, const run_req_t *q, const eng_result_t *res)
{
    const plan_req_t *pr = &r->plan->reqs[q->cls];
    if (pr->kind == PLAN_LIST)
        list_done(r, q->cls, res);
    if (pr->kind != PLAN_WRITE || !q->base_path || (!pr->write.creates && !pr->write.deletes))
        return;
    char buf[4096];
    const char *path = object_path(q->base_path, buf, sizeof buf);
    if (pr->write.creates)
        create_done(r, q->cls, path, res);
    else
        delete_done(r, q->cls, path, res);
}

/* ---- churn ------------------------------------------------------------------------------- */

/* The next churn op: below the population create, above it delete, at it alternate. */
static int churn_choice(runner_t *r, const plan_phase_t *pp)
{
    struct run_life *L = r->life;
    int c = pp->churn.create.index;
    int64_t alive = (int64_t)pool_count(L->pools[c]) + L->creating[c];
    int64_t pop = pp->churn.population;
    if (alive == pop)
        L->churn_reached = true; /* the band is watched from the first time it is reached */
    if (L->churn_reached) {
        L->churn_min = alive < L->churn_min ? alive : L->churn_min;
        L->churn_max = alive > L->churn_max ? alive : L->churn_max;
    }
    if (alive != pop)
        return alive < pop ? c : pp->churn.del.index;
    L->churn_toggle = !L->churn_toggle;
    return L->churn_toggle ? pp->churn.del.index : c;
}

int run_life_churn_due(runner_t *r, int64_t now_ns)
{
    struct run_life *L = r->life;
    const run_phase_t *ph = &r->phases[r->cur];
    const plan_phase_t *pp = ph->pp;
    if (!pp->churn.on || pp->churn.rate <= 0)
        return 0;
    if (L->churn_phase != r->cur + 1) {
        L->churn_phase = r->cur + 1;
        L->churn_done = 0;
        L->churn_reached = false;
        L->churn_min = INT64_MAX;
        L->churn_max = 0;
    }
    int rc = 0;
    for (int k = 0; rc == 0 && k < 4096; k++) {
        int64_t t = (int64_t)((double)L->churn_done / pp->churn.rate * 1e9);
        if (t >= ph->duration_ns || ph->base_ns + t > now_ns)
            break;
        L->churn_done++;
        rc = run_issue(r, (int)r->cur, churn_choice(r, pp), ph->base_ns + t, 0, -1);
    }
    return rc;
}

/* ---- teardown ---------------------------------------------------------------------------- */

typedef struct {
    runner_t *r;
    const char **paths;
    int *cls; /* creating class of each object, -1 when unknown */
    size_t n;
    const char *phase; /* the teardown phase's name, for its cells; NULL when implicit */
    hist_t *response;  /* every answer's response time, for the lifecycle section */
} reap_ctx_t;

static void reap_result(void *user, size_t i, const eng_result_t *res, enum journal_fate f)
{
    reap_ctx_t *x = user;
    runner_t *r = x->r;
    hist_record(x->response, res->done_ns - res->intended_ns);
    /* Cells only for a teardown phase of the plan: objectives are judged per plan phase. */
    results_cell_t *cell =
        x->phase ? results_cell(r->res, x->phase, "teardown", eng_outcome_name(res->outcome))
                 : NULL;
    if (cell) {
        results_counters_t *k = results_cell_counters(cell);
        k->count++;
        k->bytes_in += res->bytes_in;
        k->bytes_out += res->bytes_out;
        hist_t *h = results_cell_hist(cell, RESULTS_M_RESPONSE);
        if (h)
            hist_record(h, res->done_ns - res->intended_ns);
        h = res->sent_ns ? results_cell_hist(cell, RESULTS_M_SERVICE) : NULL;
        if (h)
            hist_record(h, res->done_ns - res->sent_ns);
    }
    if (f == JOURNAL_DONE || f == JOURNAL_GONE)
        journal_add(r->life->journal, JOURNAL_DELETED, x->paths[i],
                    x->cls[i] >= 0 ? r->plan->reqs[x->cls[i]].name : "", 0);
}

/* Every object this run may have created: the pools, deletes' taken objects, uncertain ones. */
static int gather(runner_t *r, reap_ctx_t *x)
{
    struct run_life *L = r->life;
    size_t n = pool_count(L->held) + pool_count(L->uncertain);
    for (size_t i = 0; i < r->plan->n_reqs; i++)
        n += creating(r, i) ? pool_count(L->pools[i]) : 0;
    x->paths = calloc(n ? n : 1, sizeof(*x->paths));
    x->cls = calloc(n ? n : 1, sizeof(*x->cls));
    if (!x->paths || !x->cls)
        return SQ_ENOMEM;
    for (size_t i = 0; i < r->plan->n_reqs; i++) {
        for (size_t s = 0; creating(r, i) && s < pool_count(L->pools[i]); s++) {
            x->cls[x->n] = (int)i;
            x->paths[x->n++] = pool_path(L->pools[i], s);
        }
    }
    pool_t *extra[2] = {L->held, L->uncertain};
    for (int e = 0; e < 2; e++) {
        for (size_t s = 0; s < pool_count(extra[e]); s++) {
            x->cls[x->n] = (int)pool_version(extra[e], s);
            x->paths[x->n++] = pool_path(extra[e], s);
        }
    }
    return 0;
}

/* The main engine's settings (runner.c's engine_start), for the teardown's own engine. */
static void engine_config(const runner_t *r, const char *token, eng_config_t *cfg)
{
    const plan_target_t *t = &r->plan->target;
    *cfg = (eng_config_t){
        .base_url = t->url,
        .http = t->http == PLAN_HTTP_2 ? ENG_HTTP_2 : ENG_HTTP_1_1,
        .connections = t->connections,
        .timeout_ms = t->timeout_ns / 1000000,
        .ca_file = t->tls.ca,
        .cert_file = t->tls.cert,
        .key_file = t->tls.key,
        .insecure = t->tls.insecure || r->opts->insecure,
        .bearer_token = token,
    };
}

static void teardown_limits(const runner_t *r, size_t n, journal_reap_cfg_t *cfg)
{
    const plan_phase_t *last = r->plan->n_phases ? &r->plan->phases[r->plan->n_phases - 1] : NULL;
    cfg->rate = last && last->teardown.on ? last->teardown.rate : TEARDOWN_RATE;
    cfg->parallel = r->plan->target.connections;
    cfg->attempts = TEARDOWN_ATTEMPTS;
    double secs = cfg->rate > 0 ? (double)n / cfg->rate : (double)n / 1000;
    cfg->limit_ns = (int64_t)(secs * 2e9) + TEARDOWN_SLACK_NS;
    if (r->stop != RUN_STOP_NONE && cfg->limit_ns > INTERRUPTED_MAX_NS)
        cfg->limit_ns = INTERRUPTED_MAX_NS;
}

static json_t *teardown_json(const journal_reap_counts_t *c, size_t n, bool kept, const hist_t *h)
{
    json_t *t =
        json_pack("{s:I, s:b, s:I, s:I, s:I, s:I, s:f, s:s?}", "objects", (json_int_t)n, "kept",
                  kept, "deleted", (json_int_t)c->done, "already_gone", (json_int_t)c->gone,
                  "failed", (json_int_t)c->refused, "left", (json_int_t)(kept ? n : c->left),
                  "seconds", (double)c->elapsed_ns / 1e9, "stopped", c->why[0] ? c->why : NULL);
    if (t && h && hist_count(h)) {
        json_object_set_new(t, "response_p50_ms", json_real((double)hist_value_at(h, 50) / 1e6));
        json_object_set_new(t, "response_p99_ms", json_real((double)hist_value_at(h, 99) / 1e6));
    }
    return t;
}

static void life_section(runner_t *r, json_t *teardown)
{
    struct run_life *L = r->life;
    json_t *s = json_pack("{s:s, s:I, s:I, s:I, s:I, s:I, s:o}", "journal", JOURNAL_FILE, "created",
                          (json_int_t)L->created, "existed", (json_int_t)L->existed,
                          "create_failed", (json_int_t)L->create_failed, "deleted",
                          (json_int_t)L->deleted, "skipped_empty_pool", (json_int_t)L->skipped,
                          "teardown", teardown ? teardown : json_null());
    if (s && L->churn_phase) {
        json_object_set_new(s, "churn_population_min",
                            json_integer(L->churn_reached ? L->churn_min : 0));
        json_object_set_new(s, "churn_population_max", json_integer(L->churn_max));
    }
    if (s)
        results_set_section(r->res, "lifecycle", s);
}

static void teardown_report(runner_t *r, const journal_reap_counts_t *c, size_t n)
{
    if (n == 0)
        return;
    out_info(r->o,
             "teardown: %zu objects: %zu deleted, %zu already gone, %zu failed, %zu left "
             "(%.1f s)",
             n, c->done, c->gone, c->refused, c->left, (double)c->elapsed_ns / 1e9);
    if (c->refused || c->left)
        out_warn(r->o,
                 "teardown left %zu objects on the target%s%s; `squall cleanup %s` deletes "
                 "what the journal shows alive",
                 c->refused + c->left, c->why[0] ? ": " : "", c->why, r->life->journal_path);
}

void run_life_teardown(runner_t *r, const char *token)
{
    struct run_life *L = r->life;
    bool any = false;
    for (size_t i = 0; i < r->plan->n_reqs; i++)
        any |= creating(r, i);
    if (!any)
        return; /* no creating class: no journal, no section */
    journal_flush(L->journal);
    reap_ctx_t x = {.r = r};
    journal_reap_counts_t c = {0};
    enum journal_fate *fates = NULL;
    if (gather(r, &x) || !(fates = calloc(x.n ? x.n : 1, sizeof(*fates))) ||
        hist_new_ns(&x.response)) {
        out_error(r->o, "teardown: out of memory; `squall cleanup` can delete what is left");
    } else if (r->opts->keep) {
        out_info(r->o, "--keep: %zu objects left on the target; `squall cleanup %s` deletes them",
                 x.n, L->journal_path);
        life_section(r, teardown_json(&c, x.n, true, NULL));
    } else if (L->guard_seen > r->signals) {
        /* A signal after the runner had stopped listening: the user wants out now. */
        c.left = x.n;
        snprintf(c.why, sizeof c.why, "a signal arrived after the run had stopped");
        teardown_report(r, &c, x.n);
        life_section(r, teardown_json(&c, x.n, false, NULL));
    } else {
        const plan_phase_t *last = &r->plan->phases[r->plan->n_phases - 1];
        x.phase = last->teardown.on ? last->name : NULL;
        journal_reap_cfg_t cfg = {.on_result = reap_result, .user = &x};
        teardown_limits(r, x.n, &cfg);
        eng_config_t ecfg;
        engine_config(r, token, &ecfg);
        int rc = journal_reap(&r->loop, &ecfg, r->o, &cfg, x.paths, x.n, fates, &c);
        if (rc)
            out_error(r->o, "teardown could not start: %s", sq_strerror(rc));
        teardown_report(r, &c, x.n);
        life_section(r, teardown_json(&c, x.n, false, x.response));
    }
    journal_flush(L->journal);
    guards_close(r);
    free(fates);
    hist_free(x.response);
    free(x.paths);
    free(x.cls);
}
