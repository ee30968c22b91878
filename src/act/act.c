/* Actions and collects: requests sent, programs run and URLs fetched at planned moments of a
 * run, each recorded as a marked instant (see squall/act.h). */
#include <errno.h>
#include <fcntl.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "squall/act.h"
#include "squall/clock.h"
#include "squall/err.h"
#include "squall/scrape.h"

extern char **environ;

enum kind { K_HTTP, K_EXEC, K_COLLECT };
enum state { S_WAITING, S_RUNNING, S_DONE, S_SKIPPED };

typedef struct item {
    struct act *a;
    enum kind kind;
    enum state state;
    size_t index;
    const char *name;
    const plan_action_t *pa;  /* http and exec */
    const plan_collect_t *pc; /* collect */
    int phase;                /* the plan phase it belongs to, -1 for the run's moments */
    eng_t *eng;
    uv_timer_t timer; /* an action's `at`, then a program's timeout */
    bool timer_open;
    uv_process_t proc;
    bool proc_open;
    char **env;
    FILE *save;
    char saved[200]; /* relative to the results directory */
    int64_t limit, bytes;
    bool truncated, timed_out;
    int64_t fired_unix_ms, fired_ns, ended_ns;
    long status;
    const char *outcome;
    int64_t exit_code;
    int term_signal;
    char error[240];
} item_t;

struct act {
    act_cfg_t cfg;
    item_t *items;
    size_t n;
    bool ended; /* act_stop ran */
};

/* ---- firing ------------------------------------------------------------------------------ */

static void done(item_t *it)
{
    it->state = S_DONE;
    it->ended_ns = clock_mono_ns();
    if (it->save) {
        fclose(it->save);
        it->save = NULL;
    }
}

static int on_data(void *user, const char *data, size_t len)
{
    item_t *it = user;
    int64_t room = it->limit - it->bytes;
    size_t n = room <= 0 ? 0 : (size_t)room < len ? (size_t)room : len;
    if (n && it->save)
        fwrite(data, 1, n, it->save);
    it->bytes += (int64_t)n;
    if (n < len)
        it->truncated = true;
    /* A collect stops reading at its limit; an action's answer is read to its end. */
    return it->truncated && it->kind == K_COLLECT;
}

static void on_done(void *user, const eng_result_t *res)
{
    item_t *it = user;
    it->status = res->status;
    it->outcome = eng_outcome_name(res->outcome);
    if (it->a->ended && res->outcome == ENG_OUT_CANCELLED)
        snprintf(it->error, sizeof it->error, "cancelled: the run ended first");
    else if (res->outcome == ENG_OUT_CANCELLED && it->truncated)
        it->outcome = "2xx"; /* cut at its limit by us, as the plan asked */
    done(it);
}

static FILE *open_saved(item_t *it, const char *sub, const char *file)
{
    snprintf(it->saved, sizeof it->saved, "%s/%s", sub, file);
    char path[4400];
    snprintf(path, sizeof path, "%s/%s", it->a->cfg.dir, it->saved);
    FILE *f = fopen(path, "wb");
    if (f == NULL)
        snprintf(it->error, sizeof it->error, "cannot write %.160s: %.60s", it->saved,
                 strerror(errno));
    return f;
}

static void fire_fetch(item_t *it)
{
    char file[160];
    const char *method = "GET", *body = NULL, *path;
    if (it->kind == K_COLLECT) {
        it->save = open_saved(it, "collected", it->pc->save);
        it->limit = it->pc->max_bytes;
        path = it->pc->at.path;
    } else {
        snprintf(file, sizeof file, "%02zu-%s.body", it->index + 1, it->name);
        it->save = open_saved(it, "actions", file);
        it->limit = ACT_MAX_SAVED;
        method = it->pa->method;
        body = it->pa->body;
        path = it->pa->url.path;
    }
    int64_t timeout = it->kind == K_COLLECT ? it->pc->timeout_ns : it->pa->timeout_ns;
    eng_req_t rq = {.method = method,
                    .path = path,
                    .body = body,
                    .body_len = body ? strlen(body) : 0,
                    .timeout_ms = timeout / 1000000,
                    .on_data = on_data,
                    .on_done = on_done,
                    .user = it};
    it->state = S_RUNNING;
    if (eng_submit(it->eng, &rq) != 0) {
        snprintf(it->error, sizeof it->error, "the request could not be sent");
        done(it);
    }
}

static void on_close_proc(uv_handle_t *h)
{
    (void)h;
}

static void proc_exited(uv_process_t *p, int64_t status, int term_signal)
{
    item_t *it = p->data;
    it->exit_code = status;
    it->term_signal = term_signal;
    uv_timer_stop(&it->timer);
    uv_close((uv_handle_t *)p, on_close_proc);
    it->proc_open = false;
    done(it);
}

static void on_timeout(uv_timer_t *t)
{
    item_t *it = t->data;
    if (it->state == S_RUNNING && it->proc_open) {
        it->timed_out = true;
        uv_process_kill(&it->proc, SIGKILL); /* ours, by pid */
    }
}

/* The program's environment: squall's own plus where it is and what it is loading. */
static char **exec_env(item_t *it)
{
    size_t n = 0;
    while (environ[n])
        n++;
    char **env = calloc(n + 3, sizeof *env);
    if (env == NULL)
        return NULL;
    memcpy(env, environ, n * sizeof *env);
    const plan_t *p = it->a->cfg.plan;
    size_t lt = strlen(p->target.url ? p->target.url : "") + 16;
    const char *ph = it->phase >= 0 ? p->phases[it->phase].name : "";
    size_t lp = strlen(ph) + 16;
    env[n] = malloc(lt);
    env[n + 1] = malloc(lp);
    if (env[n] == NULL || env[n + 1] == NULL) {
        free(env[n]);
        free(env[n + 1]);
        free(env);
        return NULL;
    }
    snprintf(env[n], lt, "SQUALL_TARGET=%s", p->target.url ? p->target.url : "");
    snprintf(env[n + 1], lp, "SQUALL_PHASE=%s", ph);
    return env;
}

static void fire_exec(item_t *it)
{
    char file[160], path[4400];
    snprintf(file, sizeof file, "%02zu-%s.out", it->index + 1, it->name);
    snprintf(it->saved, sizeof it->saved, "actions/%s", file);
    snprintf(path, sizeof path, "%s/%s", it->a->cfg.dir, it->saved);
    int fd = open(path, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
    it->env = exec_env(it);
    if (fd < 0 || it->env == NULL) {
        snprintf(it->error, sizeof it->error, "cannot start: %s",
                 fd < 0 ? strerror(errno) : "out of memory");
        if (fd >= 0)
            close(fd);
        it->state = S_DONE;
        return;
    }
    uv_stdio_container_t stdio[3] = {{.flags = UV_IGNORE},
                                     {.flags = UV_INHERIT_FD, .data.fd = fd},
                                     {.flags = UV_INHERIT_FD, .data.fd = fd}};
    uv_process_options_t po = {.exit_cb = proc_exited,
                               .file = it->pa->argv[0],
                               .args = (char **)it->pa->argv,
                               .env = it->env,
                               .stdio = stdio,
                               .stdio_count = 3};
    it->proc.data = it;
    int rc = uv_spawn(it->a->cfg.loop, &it->proc, &po);
    close(fd); /* the child has its own copy */
    if (rc != 0) {
        /* uv_spawn's handle must still be closed (libuv docs, uv_spawn). */
        uv_close((uv_handle_t *)&it->proc, on_close_proc);
        snprintf(it->error, sizeof it->error, "cannot start %s: %s", it->pa->argv[0],
                 uv_strerror(rc));
        it->state = S_DONE;
        return;
    }
    it->proc_open = true;
    it->state = S_RUNNING;
    uv_timer_start(&it->timer, on_timeout, (uint64_t)(it->pa->timeout_ns / 1000000), 0);
}

static void fire(item_t *it)
{
    if (it->state != S_WAITING || it->a->ended)
        return;
    it->fired_unix_ms = clock_real_ns() / 1000000;
    it->fired_ns = clock_mono_ns();
    if (it->a->cfg.mark)
        it->a->cfg.mark(it->a->cfg.user, it->name);
    if (it->kind == K_EXEC)
        fire_exec(it);
    else
        fire_fetch(it);
}

static void on_at(uv_timer_t *t)
{
    fire(t->data);
}

void act_moment(act_t *a, enum act_moment m, size_t phase, int64_t base_ns)
{
    if (a == NULL)
        return;
    for (size_t i = 0; i < a->n; i++) {
        item_t *it = &a->items[i];
        if (it->kind == K_COLLECT) {
            const plan_collect_t *c = it->pc;
            bool now =
                (m == ACT_RUN_START && c->when == PLAN_AT_RUN_START) ||
                (m == ACT_RUN_END && c->when == PLAN_AT_RUN_END) ||
                (m == ACT_PHASE_START && c->when == PLAN_AT_PHASE_START &&
                 (size_t)c->phase == phase) ||
                (m == ACT_PHASE_END && c->when == PLAN_AT_PHASE_END && (size_t)c->phase == phase);
            if (now)
                fire(it);
        } else if ((size_t)it->phase == phase && m == ACT_PHASE_START && it->state == S_WAITING) {
            int64_t wait = base_ns + it->pa->at_ns - clock_mono_ns();
            uv_timer_start(&it->timer, on_at, wait > 0 ? (uint64_t)((wait + 999999) / 1000000) : 0,
                           0);
        } else if ((size_t)it->phase == phase && m == ACT_PHASE_END && it->state == S_WAITING) {
            uv_timer_stop(&it->timer);
            it->state = S_SKIPPED;
            snprintf(it->error, sizeof it->error, "not run: the phase ended before its time");
        }
    }
}

bool act_busy(const act_t *a)
{
    for (size_t i = 0; a && i < a->n; i++)
        if (a->items[i].state == S_RUNNING)
            return true;
    return false;
}

/* ---- lifecycle ---------------------------------------------------------------------------- */

static int item_init(act_t *a, item_t *it)
{
    const act_cfg_t *cfg = &a->cfg;
    it->a = a;
    if (it->kind != K_EXEC) {
        const plan_url_t *u = it->kind == K_COLLECT ? &it->pc->at : &it->pa->url;
        char origin[300];
        eng_config_t ec;
        scrape_engine_config(u, &cfg->plan->target, cfg->target, origin, sizeof origin, &ec);
        int rc = eng_new(cfg->loop, &ec, cfg->o, &it->eng);
        if (rc != 0)
            return rc;
    }
    if (uv_timer_init(cfg->loop, &it->timer) != 0)
        return SQ_ELIBUV;
    it->timer.data = it;
    it->timer_open = true;
    return 0;
}

static int make_dir(const act_cfg_t *cfg, const char *sub)
{
    char path[4200];
    snprintf(path, sizeof path, "%s/%s", cfg->dir, sub);
    if (mkdir(path, 0755) != 0 && errno != EEXIST) {
        out_error(cfg->o, "cannot create %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    return 0;
}

int act_new(const act_cfg_t *cfg, act_t **out)
{
    const plan_t *p = cfg->plan;
    size_t n = p->n_collects, n_actions = 0;
    for (size_t i = 0; i < p->n_phases; i++)
        n_actions += p->phases[i].n_actions;
    *out = NULL;
    if (n + n_actions == 0)
        return 0;
    act_t *a = calloc(1, sizeof *a);
    if (a == NULL || (a->items = calloc(n + n_actions, sizeof *a->items)) == NULL) {
        free(a);
        return SQ_ENOMEM;
    }
    a->cfg = *cfg;
    *out = a;
    int rc = (n_actions ? make_dir(cfg, "actions") : 0) || (n ? make_dir(cfg, "collected") : 0)
                 ? SQ_EIO
                 : 0;
    for (size_t i = 0; rc == 0 && i < p->n_phases; i++)
        for (size_t k = 0; rc == 0 && k < p->phases[i].n_actions; k++) {
            const plan_action_t *pa = &p->phases[i].actions[k];
            item_t *it = &a->items[a->n];
            *it = (item_t){.kind = pa->exec ? K_EXEC : K_HTTP,
                           .index = a->n,
                           .name = pa->name,
                           .pa = pa,
                           .phase = (int)i,
                           .exit_code = -1};
            a->n++;
            rc = item_init(a, it);
        }
    for (size_t i = 0; rc == 0 && i < n; i++) {
        const plan_collect_t *pc = &p->collects[i];
        item_t *it = &a->items[a->n];
        bool in_phase = pc->when == PLAN_AT_PHASE_START || pc->when == PLAN_AT_PHASE_END;
        *it = (item_t){.kind = K_COLLECT,
                       .index = a->n,
                       .name = pc->save,
                       .pc = pc,
                       .phase = in_phase ? pc->phase : -1,
                       .exit_code = -1};
        a->n++;
        rc = item_init(a, it);
    }
    return rc;
}

void act_stop(act_t *a)
{
    if (a == NULL)
        return;
    a->ended = true;
    for (size_t i = 0; i < a->n; i++) {
        item_t *it = &a->items[i];
        if (it->state == S_WAITING) {
            it->state = S_SKIPPED;
            snprintf(it->error, sizeof it->error, "not run: the run ended before its time");
        }
        if (it->proc_open) { /* still running at the end: ours, ended by pid */
            uv_process_kill(&it->proc, SIGKILL);
            uv_close((uv_handle_t *)&it->proc, on_close_proc);
            it->proc_open = false;
            snprintf(it->error, sizeof it->error, "killed: the run ended first");
            done(it);
        }
        if (it->timer_open) {
            uv_timer_stop(&it->timer);
            uv_close((uv_handle_t *)&it->timer, NULL);
            it->timer_open = false;
        }
        eng_free(it->eng); /* cancels a request in flight: its on_done says so */
        it->eng = NULL;
    }
}

void act_free(act_t *a)
{
    if (a == NULL)
        return;
    act_stop(a);
    for (size_t i = 0; i < a->n; i++) {
        item_t *it = &a->items[i];
        if (it->save)
            fclose(it->save);
        if (it->env) {
            size_t k = 0;
            while (it->env[k])
                k++;
            free(it->env[k - 2]);
            free(it->env[k - 1]);
            free(it->env);
        }
    }
    free(a->items);
    free(a);
}

/* ---- the section -------------------------------------------------------------------------- */

static const char *moment_text(const item_t *it, char *buf, size_t cap)
{
    const plan_t *p = it->a->cfg.plan;
    if (it->kind != K_COLLECT) {
        snprintf(buf, cap, "%.6gs", (double)it->pa->at_ns / 1e9);
        return buf;
    }
    static const char *const w[] = {"run-start", "run-end", "phase-start:", "phase-end:"};
    snprintf(buf, cap, "%s%s", w[it->pc->when], it->phase >= 0 ? p->phases[it->phase].name : "");
    return buf;
}

static json_t *item_json(const item_t *it)
{
    static const char *const kinds[] = {"http", "exec", "collect"};
    static const char *const states[] = {"not fired", "running", "done", "skipped"};
    char at[200];
    const plan_t *p = it->a->cfg.plan;
    json_t *o = json_pack("{s:s, s:s, s:s?, s:s, s:s}", "name", it->name, "kind", kinds[it->kind],
                          "phase", it->kind != K_COLLECT ? p->phases[it->phase].name : NULL, "at",
                          moment_text(it, at, 200), "state", states[it->state]);
    if (it->state == S_DONE || it->state == S_RUNNING) {
        json_object_set_new(o, "fired_unix_ms", json_integer(it->fired_unix_ms));
        if (it->ended_ns)
            json_object_set_new(o, "elapsed_ms",
                                json_real((double)(it->ended_ns - it->fired_ns) / 1e6));
    }
    if (it->kind == K_EXEC) {
        json_t *argv = json_array();
        for (size_t i = 0; it->pa->argv[i]; i++)
            json_array_append_new(argv, json_string(it->pa->argv[i]));
        json_object_set_new(o, "argv", argv);
        if (it->state == S_DONE && !it->error[0]) {
            json_object_set_new(o, "exit_code", json_integer(it->exit_code));
            json_object_set_new(o, "signal", json_integer(it->term_signal));
            json_object_set_new(o, "timed_out", json_boolean(it->timed_out));
        }
    } else {
        const plan_url_t *u = it->kind == K_COLLECT ? &it->pc->at : &it->pa->url;
        json_object_set_new(o, "url", json_string(u->url));
        if (it->kind == K_HTTP)
            json_object_set_new(o, "method", json_string(it->pa->method));
        if (it->outcome) {
            json_object_set_new(o, "status", json_integer(it->status));
            json_object_set_new(o, "outcome", json_string(it->outcome));
            json_object_set_new(o, "bytes", json_integer(it->bytes));
            json_object_set_new(o, "truncated", json_boolean(it->truncated));
        }
    }
    if (it->saved[0])
        json_object_set_new(o, "saved", json_string(it->saved));
    if (it->error[0])
        json_object_set_new(o, "error", json_string(it->error));
    return o;
}

json_t *act_section(const act_t *a)
{
    if (a == NULL)
        return NULL;
    json_t *list = json_array();
    for (size_t i = 0; i < a->n; i++)
        json_array_append_new(list, item_json(&a->items[i]));
    return json_pack("{s:o}", "items", list);
}
