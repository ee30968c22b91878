/* The run's lifecycle: checks before any traffic, phases in order on one libuv loop, the 1 ms
 * wake-up that issues every start that is due, signals, draining, and writing the results. */
#include <errno.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include "run_int.h"
#include "squall/clock.h"
#include "squall/err.h"

#define DUE_BATCH 512

void run_request_stop(runner_t *r, enum run_stop why, const char *fmt, ...)
{
    if (r->stop == RUN_STOP_NONE) {
        r->stop = why;
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(r->stop_reason, sizeof r->stop_reason, fmt, ap);
        va_end(ap);
        out_live_end(r->o);
        out_warn(r->o, "stopping: %s", r->stop_reason);
    }
    if (r->state == RUN_ACTIVE || r->state == RUN_DRAINING) {
        int64_t grace_ms = why == RUN_STOP_UNREACHABLE ? 0 : r->opts->grace_ns / 1000000;
        r->state = RUN_DRAINING;
        r->drain_deadline_ns = (int64_t)uv_hrtime() + grace_ms * 1000000 + 500000000;
        eng_stop(r->eng, grace_ms);
    }
}

static uint64_t phase_seed(const runner_t *r, size_t i, uint64_t salt)
{
    return r->seed ^ ((uint64_t)(i + 1) * UINT64_C(0x9e3779b97f4a7c15)) ^ salt;
}

static int phase_open_init(runner_t *r, run_phase_t *ph, size_t i)
{
    const plan_phase_t *pp = ph->pp;
    sched_open_cfg_t *cfg = &ph->open_cfg;
    cfg->duration_ns = ph->duration_ns;
    cfg->arrivals = pp->arrivals == PLAN_ARRIVALS_POISSON ? SCHED_POISSON : SCHED_EVEN;
    cfg->seed = phase_seed(r, i, 1);
    if (pp->shape == PLAN_LOAD_CONSTANT) {
        cfg->shape = SCHED_CONSTANT;
        cfg->rate = pp->rate;
    } else if (pp->shape == PLAN_LOAD_RAMP) {
        cfg->shape = SCHED_RAMP;
        cfg->from = pp->ramp_from;
        cfg->to = pp->ramp_to;
    } else {
        cfg->shape = SCHED_STEPS;
        ph->steps = calloc(pp->n_steps, sizeof(*ph->steps));
        if (!ph->steps)
            return SQ_ENOMEM;
        for (size_t k = 0; k < pp->n_steps; k++)
            ph->steps[k] = (sched_step_t){.rate = pp->steps[k].rate, .for_ns = pp->steps[k].for_ns};
        cfg->steps = ph->steps;
        cfg->n_steps = pp->n_steps;
    }
    return sched_open_new(cfg, &ph->open);
}

static int phase_mix_init(runner_t *r, run_phase_t *ph, size_t i)
{
    const plan_phase_t *pp = ph->pp;
    double *w = calloc(pp->n_mix, sizeof(*w));
    ph->mix_cls = calloc(pp->n_mix, sizeof(*ph->mix_cls));
    if (!w || !ph->mix_cls) {
        free(w);
        return SQ_ENOMEM;
    }
    for (size_t k = 0; k < pp->n_mix; k++) {
        w[k] = pp->mix[k].weight;
        ph->mix_cls[k] = pp->mix[k].cls.index;
    }
    int rc = sched_mix_new(w, pp->n_mix, phase_seed(r, i, 2), &ph->mix);
    free(w);
    return rc;
}

static int phase_fleet_init(runner_t *r, run_phase_t *ph, size_t i)
{
    const plan_phase_t *pp = ph->pp;
    ph->fleet = calloc(pp->fleet.n_send, sizeof(*ph->fleet));
    if (!ph->fleet)
        return SQ_ENOMEM;
    int64_t realtime0 = clock_real_ns();
    static const enum sched_timing timing[] = {
        [PLAN_TIMING_SPREAD] = SCHED_SPREAD,
        [PLAN_TIMING_JITTER] = SCHED_JITTER,
        [PLAN_TIMING_ALIGNED] = SCHED_ALIGNED,
    };
    for (size_t k = 0; k < pp->fleet.n_send; k++) {
        sched_fleet_cfg_t cfg = {
            .agents = pp->fleet.agents,
            .period_ns = pp->fleet.send[k].every_ns,
            .timing = timing[pp->fleet.timing],
            .jitter = pp->fleet.jitter,
            .drift = pp->fleet.drift,
            .join_ns = pp->fleet.join_ns,
            .leave_ns = pp->fleet.leave_ns,
            .duration_ns = ph->duration_ns,
            .realtime0_ns = realtime0,
            .seed = phase_seed(r, i, 3 + k),
        };
        ph->fleet[k].cls = pp->fleet.send[k].cls.index;
        int rc = sched_fleet_new(&cfg, &ph->fleet[k].sched);
        if (rc)
            return rc;
        ph->n_fleet++;
    }
    return 0;
}

/* Builds phase i's schedules; its t = 0 is base_ns. */
static int phase_start(runner_t *r, size_t i, int64_t base_ns)
{
    run_phase_t *ph = &r->phases[i];
    const plan_phase_t *pp = ph->pp;
    ph->base_ns = base_ns;
    int rc = 0;
    if (pp->shape != PLAN_LOAD_NONE)
        rc = phase_open_init(r, ph, i);
    if (rc == 0 && pp->n_mix)
        rc = phase_mix_init(r, ph, i);
    if (rc == 0 && pp->clients.on) {
        sched_closed_cfg_t cfg = {
            .clients = pp->clients.count,
            .think_ns = pp->clients.think_ns,
            .think = SCHED_THINK_FIXED,
            .duration_ns = ph->duration_ns,
            .seed = phase_seed(r, i, 4),
        };
        rc = sched_closed_new(&cfg, &ph->closed);
    }
    if (rc == 0 && pp->fleet.on)
        rc = phase_fleet_init(r, ph, i);
    if (rc == 0 && pp->watches.n_sets)
        rc = run_watches_start(r, i); /* watch */
    if (rc == 0 && pp->fleet.on)
        rc = run_storm_start(r, i); /* watch: storm reporting */
    r->cur = i;
    if (rc)
        out_error(r->o, "phase '%s': cannot build its schedule: %s", pp->name, sq_strerror(rc));
    return rc;
}

static void phase_close(run_phase_t *ph)
{
    sched_open_free(ph->open);
    sched_mix_free(ph->mix);
    sched_closed_free(ph->closed);
    for (size_t k = 0; k < ph->n_fleet; k++)
        sched_fleet_free(ph->fleet[k].sched);
    free(ph->fleet);
    free(ph->mix_cls);
    free(ph->steps);
}

static void issue_failed(runner_t *r, int rc)
{
    run_request_stop(r, RUN_STOP_SIGNAL, "the generator could not issue a request: %s",
                     sq_strerror(rc));
}

int run_closed_due(runner_t *r, int64_t now_ns)
{
    run_phase_t *ph = &r->phases[r->cur];
    int client, rc = 0;
    int64_t t;
    while (rc == 0 && sched_closed_due(ph->closed, now_ns - ph->base_ns, &client, &t))
        rc = run_issue(r, (int)r->cur, ph->mix_cls[sched_mix_pick(ph->mix)], ph->base_ns + t,
                       client, client);
    return rc;
}

/* Issues every start of the current phase that is due at now_ns. */
static void issue_due(runner_t *r, int64_t now_ns)
{
    run_phase_t *ph = &r->phases[r->cur];
    size_t pi = r->cur;
    int64_t rel = now_ns - ph->base_ns;
    int64_t t[DUE_BATCH];
    int agent[DUE_BATCH];
    int rc = 0;
    if (ph->open) {
        size_t n;
        do {
            n = sched_open_due(ph->open, rel, t, DUE_BATCH);
            for (size_t k = 0; k < n && rc == 0; k++)
                rc = run_issue(r, (int)pi, ph->mix_cls[sched_mix_pick(ph->mix)], ph->base_ns + t[k],
                               0, -1);
        } while (n == DUE_BATCH && rc == 0);
    }
    if (rc == 0 && ph->closed)
        rc = run_closed_due(r, now_ns);
    if (rc == 0 && ph->pp->churn.on)
        rc = run_life_churn_due(r, now_ns); /* life */
    for (size_t f = 0; f < ph->n_fleet && rc == 0; f++) {
        size_t n;
        do {
            n = sched_fleet_due(ph->fleet[f].sched, rel, t, agent, DUE_BATCH);
            for (size_t k = 0; k < n && rc == 0; k++)
                rc = run_issue(r, (int)pi, ph->fleet[f].cls, ph->base_ns + t[k], agent[k], -1);
        } while (n == DUE_BATCH && rc == 0);
    }
    if (rc)
        issue_failed(r, rc);
}

static void finish(runner_t *r);

static void next_phase(runner_t *r, int64_t now_ns)
{
    run_phase_t *ph = &r->phases[r->cur];
    int64_t end = ph->base_ns + ph->duration_ns;
    run_watches_stop(r); /* watch: a phase's watches end with it */
    if (r->cur + 1 >= r->n_phases) {
        /* Every request has its timeout: draining ends by the longest one. */
        int64_t longest = 0;
        for (size_t i = 0; i < r->n_classes; i++)
            if (r->classes[i].pr->timeout_ns > longest)
                longest = r->classes[i].pr->timeout_ns;
        r->state = RUN_DRAINING;
        r->drain_deadline_ns = now_ns + longest + 1000000000;
        return;
    }
    /* The next phase's t = 0 is the previous phase's end, so the schedule never slips. */
    if (phase_start(r, r->cur + 1, end))
        run_request_stop(r, RUN_STOP_SIGNAL, "phase '%s' could not start",
                         r->plan->phases[r->cur + 1].name);
}

static void on_tick(uv_timer_t *t)
{
    runner_t *r = t->data;
    int64_t now = (int64_t)uv_hrtime();
    if (r->state == RUN_ACTIVE) {
        run_phase_t *ph = &r->phases[r->cur];
        int64_t rel = now - ph->base_ns;
        int64_t upto = rel < ph->duration_ns ? rel : ph->duration_ns;
        if (upto > ph->counted_to) {
            r->sec_target += run_phase_expected(ph, ph->counted_to, upto);
            ph->counted_to = upto;
        }
        issue_due(r, now);
        run_watches_tick(r, now); /* watch */
        if (r->state == RUN_ACTIVE && rel >= ph->duration_ns)
            next_phase(r, now);
    }
    if (r->state == RUN_DRAINING && (r->in_flight == 0 || now >= r->drain_deadline_ns))
        finish(r);
}

static void on_second(uv_timer_t *t)
{
    runner_t *r = t->data;
    if (r->state == RUN_ACTIVE || r->state == RUN_DRAINING)
        run_second(r, false);
    run_life_second(r); /* life: flush the journal */
}

static void on_signal(uv_signal_t *s, int signum)
{
    runner_t *r = s->data;
    r->signals++;
    if (r->signals == 1) {
        run_request_stop(r, RUN_STOP_SIGNAL,
                         "signal %s: letting in-flight requests finish "
                         "(send it again to stop at once)",
                         signum == SIGINT ? "SIGINT" : "SIGTERM");
        if (r->state == RUN_IDLE)
            r->state = RUN_DRAINING;
    } else if (r->state == RUN_DRAINING) {
        eng_stop(r->eng, 0);
        r->drain_deadline_ns = 0;
    }
}

static void on_unreachable(void *user)
{
    runner_t *r = user;
    eng_stats_t st;
    eng_stats(r->eng, &st, false);
    run_request_stop(r, RUN_STOP_UNREACHABLE, "target unreachable: %s %s", r->plan->target.url,
                     st.why ? st.why : "refuses connections or does not resolve");
}

static void close_handle(uv_handle_t *h)
{
    if (!uv_is_closing(h))
        uv_close(h, NULL);
}

/* Everything is done: the last partial second, the engine, and our own handles. */
static void finish(runner_t *r)
{
    if (r->state == RUN_DONE)
        return;
    r->run_end_ns = (int64_t)uv_hrtime();
    run_second(r, true);
    r->state = RUN_DONE;
    run_watches_stop(r); /* watch */
    eng_free(r->eng);
    r->eng = NULL;
    run_storm_finish(r); /* watch: every request has finished */
    uv_timer_stop(&r->tick);
    uv_timer_stop(&r->second);
    close_handle((uv_handle_t *)&r->tick);
    close_handle((uv_handle_t *)&r->second);
    close_handle((uv_handle_t *)&r->sigint);
    close_handle((uv_handle_t *)&r->sigterm);
}

/* ---- before any traffic ------------------------------------------------------------------ */

/* Sources this version of squall cannot run yet refuse the plan before anything is sent. */
static int check_supported(const runner_t *r)
{
    int bad = 0;
    for (size_t i = 0; i < r->plan->n_phases; i++) {
        const plan_phase_t *pp = &r->plan->phases[i];
        const char *what = pp->replay.on ? "replay" : NULL;
        if (!what)
            continue;
        out_raw(r->o, OUT_ERROR,
                "%s:%d:%d: error: phase '%s' uses %s, which this build of "
                "squall cannot run yet (check accepts it)",
                pp->pos.file, pp->pos.line, pp->pos.col, pp->name, what);
        bad = 1;
    }
    return bad ? SQ_EINVAL : 0;
}

/* The bearer token, from a file or the environment; never printed. *tok is malloc'd or NULL. */
static int read_token(const runner_t *r, char **tok)
{
    const plan_target_t *t = &r->plan->target;
    *tok = NULL;
    if (t->token.env) {
        const char *v = getenv(t->token.env);
        if (!v || !v[0]) {
            out_error(r->o, "target.token.env: environment variable %s is not set", t->token.env);
            return SQ_EINVAL;
        }
        *tok = strdup(v);
    } else if (t->token.file) {
        FILE *f = fopen(t->token.file, "r");
        char buf[8192];
        size_t n = f ? fread(buf, 1, sizeof buf - 1, f) : 0;
        if (f)
            fclose(f);
        if (!f || n == 0) {
            out_error(r->o, "target.token.file: cannot read a token from %s", t->token.file);
            return SQ_EIO;
        }
        while (n > 0 && (buf[n - 1] == '\n' || buf[n - 1] == '\r' || buf[n - 1] == ' '))
            n--;
        buf[n] = '\0';
        *tok = strdup(buf);
    } else {
        return 0;
    }
    return *tok ? 0 : SQ_ENOMEM;
}

static int make_dirs(const char *dir)
{
    char p[4096];
    snprintf(p, sizeof p, "%s", dir);
    for (char *s = p + 1; *s; s++) {
        if (*s != '/')
            continue;
        *s = '\0';
        if (mkdir(p, 0755) && errno != EEXIST)
            return -1;
        *s = '/';
    }
    return mkdir(p, 0755) && errno != EEXIST ? -1 : 0;
}

static void default_dir(const runner_t *r, char *dir, size_t cap)
{
    const char *base = strrchr(r->plan->path, '/');
    base = base ? base + 1 : r->plan->path;
    size_t n = strcspn(base, ".");
    time_t now = time(NULL);
    struct tm tm;
    gmtime_r(&now, &tm);
    char stamp[32];
    strftime(stamp, sizeof stamp, "%Y%m%dT%H%M%SZ", &tm);
    snprintf(dir, cap, "results/%s-%.*s", stamp, (int)n, base);
}

static int engine_start(runner_t *r, const char *token)
{
    const plan_target_t *t = &r->plan->target;
    bool insecure = t->tls.insecure || r->opts->insecure;
    if (insecure)
        out_warn(r->o, "TLS certificate verification is OFF: anyone on the path can read and "
                       "change this traffic");
    eng_config_t cfg = {
        .base_url = t->url,
        .http = t->http == PLAN_HTTP_2 ? ENG_HTTP_2 : ENG_HTTP_1_1,
        .connections = t->connections,
        .streams = t->streams,
        .timeout_ms = t->timeout_ns / 1000000,
        .ca_file = t->tls.ca,
        .cert_file = t->tls.cert,
        .key_file = t->tls.key,
        .insecure = insecure,
        .bearer_token = token,
        .on_unreachable = on_unreachable,
        .user = r,
    };
    return eng_new(&r->loop, &cfg, r->o, &r->eng);
}

/* Everything the run records into, allocated before the first request. */
static int state_init(runner_t *r)
{
    size_t slots = r->plan->n_phases * 2 * r->plan->n_reqs * ENG_OUT_COUNT;
    r->cells = calloc(slots ? slots : 1, sizeof(*r->cells));
    r->phases = calloc(r->plan->n_phases, sizeof(*r->phases));
    r->sec = calloc(r->plan->n_reqs ? r->plan->n_reqs : 1, sizeof(*r->sec));
    if (!r->cells || !r->phases || !r->sec)
        return SQ_ENOMEM;
    r->n_phases = r->plan->n_phases;
    for (size_t i = 0; i < r->n_phases; i++) {
        r->phases[i].pp = &r->plan->phases[i];
        r->phases[i].duration_ns = r->plan->phases[i].duration_ns;
        r->planned_ns += r->plan->phases[i].duration_ns;
    }
    int rc = hist_new_ns(&r->sec_all);
    if (rc == 0)
        rc = hist_new_ns(&r->sched_lag);
    if (rc == 0)
        rc = hist_new_ns(&r->sec_sched_lag);
    for (size_t i = 0; rc == 0 && i < r->plan->n_reqs; i++)
        rc = hist_new_ns(&r->sec[i].response);
    return rc;
}

static void state_close(runner_t *r)
{
    for (size_t i = 0; r->phases && i < r->n_phases; i++)
        phase_close(&r->phases[i]);
    free(r->phases);
    for (size_t i = 0; r->sec && i < r->plan->n_reqs; i++)
        hist_free(r->sec[i].response);
    free(r->sec);
    free(r->cells);
    hist_free(r->sec_all);
    hist_free(r->sched_lag);
    hist_free(r->sec_sched_lag);
}

static int handles_start(runner_t *r)
{
    uv_timer_init(&r->loop, &r->tick);
    uv_timer_init(&r->loop, &r->second);
    uv_signal_init(&r->loop, &r->sigint);
    uv_signal_init(&r->loop, &r->sigterm);
    r->tick.data = r->second.data = r->sigint.data = r->sigterm.data = r;
    int rc = uv_signal_start(&r->sigint, on_signal, SIGINT);
    if (rc == 0)
        rc = uv_signal_start(&r->sigterm, on_signal, SIGTERM);
    if (rc == 0)
        rc = uv_timer_start(&r->tick, on_tick, 1, 1);
    if (rc == 0)
        rc = uv_timer_start(&r->second, on_second, 1000, 1000);
    return rc ? SQ_ELIBUV : 0;
}

static int exit_code(const runner_t *r)
{
    switch (r->stop) {
    case RUN_STOP_SIGNAL:
        return SQ_EXIT_INTERRUPTED;
    case RUN_STOP_BRAKE:
        return SQ_EXIT_BRAKE;
    case RUN_STOP_UNREACHABLE:
        return SQ_EXIT_UNREACHABLE;
    default:
        return SQ_EXIT_OK;
    }
}

static int write_results(runner_t *r, const char *dir)
{
    results_set_duration(r->res, r->run_end_ns - r->run_start_ns);
    if (r->stop != RUN_STOP_NONE)
        results_set_stopped(r->res, r->stop_reason);
    json_t *g = run_health_json(r);
    json_object_set_new(g, "closed_loop", json_boolean(false));
    for (size_t i = 0; i < r->n_phases; i++)
        if (r->plan->phases[i].clients.on)
            json_object_set(g, "closed_loop", json_true());
    results_set_section(r->res, "generator", g);
    if (run_verdict_judge(r)) /* judge: the "objectives" section */
        return SQ_ENOMEM;
    return results_write_dir(r->res, dir, r->o);
}

/* Sets up, runs the loop to the end, and tears down; returns the exit code. */
static int run_loop(runner_t *r, const char *dir, const char *token)
{
    int rc = run_watches_init(r, token); /* watch: before any traffic */
    if (rc)
        return rc == SQ_ELIMIT ? SQ_EXIT_USAGE : SQ_EXIT_FAILURE;
    rc = engine_start(r, token);
    if (rc)
        return rc == SQ_EINVAL ? SQ_EXIT_USAGE : SQ_EXIT_FAILURE;
    rc = handles_start(r);
    if (rc == 0 && r->n_phases > 0) {
        r->run_start_ns = (int64_t)uv_hrtime();
        results_set_start(r->res, clock_real_ns() / 1000000);
        r->state = RUN_ACTIVE;
        rc = phase_start(r, 0, r->run_start_ns);
    }
    if (rc) {
        r->state = RUN_DRAINING;
        r->stop = RUN_STOP_SIGNAL;
        snprintf(r->stop_reason, sizeof r->stop_reason, "the run could not start");
    }
    uv_run(&r->loop, UV_RUN_DEFAULT);
    out_live_end(r->o);
    run_life_teardown(r, token); /* life: delete what this run created, unless --keep */
    int code = exit_code(r);
    if (write_results(r, dir) || run_storms_csv(r, dir))
        code = SQ_EXIT_FAILURE;
    else if (code == SQ_EXIT_OK && run_verdict_failed(r)) /* judge */
        code = SQ_EXIT_OBJECTIVES;
    if (run_verdict_report(r, dir)) /* judge: DIR/report.html */
        code = SQ_EXIT_FAILURE;
    if (!r->opts->quiet)
        run_summary(r, dir);
    return rc && code == SQ_EXIT_OK ? SQ_EXIT_FAILURE : code;
}

int run_plan(const plan_t *plan, const run_opts_t *opts, out_t *o)
{
    runner_t rs = {.plan = plan, .opts = opts, .o = o};
    runner_t *r = &rs;
    if (!plan->target.loopback && !opts->confirm_target) {
        out_error(o,
                  "target %s is not a loopback address: load can hurt a shared control "
                  "plane. Point squall at staging, tell its owners, start small, and pass "
                  "--confirm-target to go ahead",
                  plan->target.url);
        return SQ_EXIT_USAGE;
    }
    if (check_supported(r))
        return SQ_EXIT_USAGE;
    r->seed = opts->has_seed ? opts->seed : plan->has_seed ? plan->seed : (uint64_t)clock_real_ns();
    rng_seed(&r->rng, r->seed);

    char dir[4096];
    if (opts->results_dir)
        snprintf(dir, sizeof dir, "%s", opts->results_dir);
    else
        default_dir(r, dir, sizeof dir);

    char *token = NULL;
    int code = SQ_EXIT_USAGE;
    if (run_classes_init(r) || read_token(r, &token))
        goto out_classes;
    code = SQ_EXIT_FAILURE;
    if (make_dirs(dir)) {
        out_error(o, "cannot create results directory %s: %s", dir, strerror(errno));
        goto out_classes;
    }
    if (run_life_start(r, dir)) /* life: DIR/journal.ndjson */
        goto out_classes;
    if (state_init(r) || run_health_init(r) || results_new(&r->res) ||
        results_set_plan(r->res, plan->path, NULL, 0, o) ||
        results_set_target(r->res, plan->target.url) ||
        results_set_shard(r->res, opts->shard_index ? opts->shard_index : 1,
                          opts->shard_count ? opts->shard_count : 1) ||
        run_series_open(r, dir) || uv_loop_init(&r->loop))
        goto out_state;
    code = run_loop(r, dir, token);
    if (uv_loop_close(&r->loop) != 0)
        out_warn(o, "internal: event loop closed with handles still open");
out_state:
    run_series_close(r);
    run_verdict_close(r);
    results_free(r->res);
    run_health_close(r);
    run_watches_close(r); /* watch */
    run_storm_close(r);
    state_close(r);
out_classes:
    if (token) {
        memset(token, 0, strlen(token));
        free(token);
    }
    run_reqs_close(r);
    run_classes_close(r);
    run_life_close(r); /* life */
    return code;
}
