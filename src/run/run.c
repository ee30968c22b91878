/* The conductor: the phases in order on one libuv loop, a wake-up at each source's next
 * intended start, a close of every second for the observers, signals, draining, the teardown,
 * and the order in which everything shuts down. */
#include <errno.h>
#include <math.h>
#include <signal.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "run_int.h"
#include "squall/clock.h"
#include "squall/err.h"

#define DRAIN_SLACK_NS INT64_C(500000000) /* after the grace, for cancellations to arrive */

static void phase_start(run_t *r, size_t i, int64_t base_ns);
static void finish(run_t *r);
static void signals_held(run_t *r, bool hold);
static void on_wake(void *data);
static void on_second(uv_timer_t *t);

/* The one setter of the run's state. */
static void set_state(run_t *r, enum run_state to)
{
    r->state = to;
}

static run_phase_t *current(run_t *r)
{
    return &r->phases[r->cur];
}

/* The current phase stops starting requests: its sources stop (watch streams close). */
static void phase_end(run_t *r, int64_t now)
{
    run_phase_t *ph = current(r);
    if (!ph->started || ph->ended_ns)
        return;
    ph->ended_ns = now;
    for (size_t k = 0; k < ph->n_src; k++)
        if (ph->src[k].ops->stop)
            ph->src[k].ops->stop(ph->src[k].self);
    if (r->cur < r->plan->n_phases)
        act_moment(r->act, ACT_PHASE_END, r->cur, now);
}

void run_stop(run_t *r, enum run_end why, const char *fmt, ...)
{
    if (r->end == RUN_END_DONE) {
        r->end = why;
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(r->why, sizeof r->why, fmt, ap);
        va_end(ap);
        out_live_end(r->o);
        out_warn(r->o, "stopping: %s", r->why);
    }
    int64_t now = clock_mono_ns();
    if (r->state == RUN_TEARDOWN) {
        phase_end(r, now); /* what the teardown has not deleted yet is left, and reported */
        return;
    }
    if (r->state != RUN_LOADING && r->state != RUN_DRAINING)
        return;
    int64_t grace_ms = why == RUN_END_UNREACHABLE ? 0 : r->opts->grace_ns / 1000000;
    if (r->state == RUN_LOADING)
        r->load_end_ns = now;
    phase_end(r, now);
    src_issuer_paging(r->issuer, false);
    set_state(r, RUN_DRAINING);
    r->drain_deadline_ns = now + grace_ms * 1000000 + DRAIN_SLACK_NS;
    eng_stop(r->eng, grace_ms);
}

/* ---- the phases -------------------------------------------------------------------------- */

static void phase_failed(run_t *r, size_t i, int rc)
{
    out_error(r->o, "phase '%s' could not start: %s", r->phases[i].name, sq_strerror(rc));
    run_stop(r, RUN_END_FAILED, "phase '%s' could not start", r->phases[i].name);
}

/* A phase's t = 0 at base_ns on the monotonic clock, and the wall clock's time then. */
static void phase_at(run_phase_t *ph, int64_t base_ns)
{
    ph->base_ns = base_ns;
    ph->realtime0_ns = clock_real_ns() - (clock_mono_ns() - base_ns);
}

/* Builds and starts phase i's sources for its t = 0 (which may be ahead: no source sends before
 * its first intended start). Returns 0 or the first error. */
static int phase_build(run_t *r, size_t i)
{
    run_phase_t *ph = &r->phases[i];
    src_ctx_t ctx = run_src_ctx(r, i);
    ctx.alive = 0; /* the models of a running phase count what its sources see */
    int rc = src_phase_new(&ctx, ph->src, &ph->n_src);
    for (size_t k = 0; rc == 0 && k < ph->n_src; k++)
        rc = ph->src[k].ops->start ? ph->src[k].ops->start(ph->src[k].self, &ph->src[k]) : 0;
    return rc;
}

/* The first phase's sources, built ahead of its t = 0 at base_ns, so that its first request
 * leaves at its instant: building them can take milliseconds (a replay reads its whole log
 * once), which at the instant itself made the first request that late. A failure is told when
 * the phase starts. */
static void phase_ready(run_t *r, int64_t base_ns)
{
    run_phase_t *ph = &r->phases[0];
    ph->ready = true;
    phase_at(ph, base_ns);
    ph->ready_rc = phase_build(r, 0);
}

/* Whether the first phase's sources can be built ahead of the start: it is a timed phase (a
 * teardown first drains instead). */
static bool can_ready(const run_t *r)
{
    return r->n_phases > 0 && !r->phases[0].teardown;
}

/* How far ahead of the start they are built: three times what building them took in the
 * validation (built again, then started: a replay opens its log and reads ahead) and 1 ms. */
static int64_t ready_lead(const run_t *r)
{
    return 3 * r->build_ns + INT64_C(1000000);
}

/* Phase i begins at base_ns: its sources are built and started then, unless they were ready
 * ahead (start_instant begins the run at the instant they were built for). */
static void phase_start(run_t *r, size_t i, int64_t base_ns)
{
    run_phase_t *ph = &r->phases[i];
    r->cur = i;
    ph->planned_to_ns = base_ns;
    ph->started = true;
    eng_set_connections(r->eng, src_phase_connections(r->plan, i, r->shard));
    if (!ph->ready)
        phase_at(ph, base_ns);
    obs_phase(r->obs, i, base_ns, ph->realtime0_ns);
    if (i < r->plan->n_phases)
        act_moment(r->act, ACT_PHASE_START, i, base_ns);
    int rc = ph->ready ? ph->ready_rc : phase_build(r, i);
    if (rc)
        phase_failed(r, i, rc);
}

/* After the last plan phase: requests finish on their own timeouts (the longest class's). */
static void drain(run_t *r, int64_t now)
{
    int64_t longest = 0;
    for (size_t i = 0; i < r->plan->n_reqs; i++)
        longest = r->plan->reqs[i].timeout_ns > longest ? r->plan->reqs[i].timeout_ns : longest;
    phase_end(r, now);
    r->load_end_ns = now;
    set_state(r, RUN_DRAINING);
    r->drain_deadline_ns = now + longest + 1000000000;
}

/* The current timed phase reached its end: the next one starts where it ended, so the schedule
 * never slips; a teardown waits for everything before it to drain. */
static void next_phase(run_t *r, int64_t now)
{
    run_phase_t *ph = current(r);
    int64_t end = ph->base_ns + ph->duration_ns;
    size_t next = r->cur + 1;
    if (next >= r->n_phases || r->phases[next].teardown) {
        drain(r, now);
        return;
    }
    phase_end(r, end);
    phase_start(r, next, end);
}

/* The load and the teardown are over: the run-end collects are fetched (each bounded by its
 * timeout), then everything finishes. */
static void ending(run_t *r)
{
    if (r->state != RUN_ENDING) {
        set_state(r, RUN_ENDING);
        act_moment(r->act, ACT_RUN_END, 0, clock_mono_ns());
    }
    if (!act_busy(r->act))
        finish(r);
}

/* Draining is over: the teardown phase (if any) starts, else the run ends. */
static void drained(run_t *r, int64_t now)
{
    size_t next = r->cur + 1;
    while (next < r->n_phases && !r->phases[next].teardown)
        next++;
    if (next >= r->n_phases) {
        ending(r);
        return;
    }
    set_state(r, RUN_TEARDOWN);
    phase_start(r, next, now);
}

static bool sources_idle(const run_phase_t *ph)
{
    for (size_t k = 0; k < ph->n_src; k++)
        if (!ph->src[k].ops->idle || !ph->src[k].ops->idle(ph->src[k].self))
            return false;
    return true;
}

/* ---- the wake-up ------------------------------------------------------------------------- */

/* Asks every source of the current phase for what is due. */
static void due(run_t *r, int64_t now)
{
    run_phase_t *ph = current(r);
    for (size_t k = 0; k < ph->n_src && r->state == RUN_LOADING; k++) {
        int64_t at;
        src_t *s = &ph->src[k];
        if (!s->ops->next || !s->ops->next(s->self, &at) || at > now)
            continue;
        int rc = s->ops->due(s->self, now);
        if (rc)
            run_stop(r, RUN_END_FAILED, "the generator could not issue a request: %s",
                     sq_strerror(rc));
    }
    eng_flush(r->eng); /* on the wire now, not on the loop's next pass */
}

/* The next instant something must happen: a source's start, the phase's end, a deadline. */
static int64_t next_event(run_t *r)
{
    int64_t next = INT64_MAX, at;
    if (r->state == RUN_IDLE && r->start_at_mono) {
        next = r->start_at_mono - (can_ready(r) && !r->phases[0].ready ? ready_lead(r) : 0);
    } else if (r->state == RUN_LOADING) {
        run_phase_t *ph = current(r);
        if (ph->duration_ns)
            next = ph->base_ns + ph->duration_ns;
        for (size_t k = 0; k < ph->n_src; k++)
            if (ph->src[k].ops->next && ph->src[k].ops->next(ph->src[k].self, &at) && at < next)
                next = at;
    } else if (r->state == RUN_DRAINING) {
        next = r->drain_deadline_ns;
    }
    return next;
}

/* One wake-up hands out at most this many due instants before the loop polls again. */
#define WAKE_MAX_STEPS 256

/* Arms the wake-up for the next event, early by run_wake_early() (a timerfd: nanosecond expiry,
 * wake.c); a wake-up that comes early just spins or rearms. */
static void rearm(run_t *r, int64_t now)
{
    int64_t next = next_event(r);
    if (next == INT64_MAX || r->state == RUN_DONE) {
        run_wake_stop(&r->wake);
        r->wake_at_ns = INT64_MAX;
        return;
    }
    /* Deadlines of draining and the teardown need no spin. */
    int64_t at =
        r->state == RUN_LOADING || r->state == RUN_IDLE ? next - run_wake_early(&r->wake) : next;
    if (at < r->wake_floor_ns && r->wake_floor_ns > now)
        at = r->wake_floor_ns;
    r->wake_at_ns = at;
    run_wake_at(&r->wake, at);
}

/* The first phase begins at `at` (monotonic): the run's phase clock starts there. */
static void begin(run_t *r, int64_t at)
{
    r->start_ns = r->sec_start_ns = at;
    results_set_start(r->res, (clock_real_ns() - (clock_mono_ns() - at)) / 1000000);
    uv_timer_start(&r->second, on_second, 1000, 1000); /* seconds from the start */
    set_state(r, RUN_LOADING);
    act_moment(r->act, ACT_RUN_START, 0, at);
    if (r->n_phases == 0 || r->phases[0].teardown)
        drain(r, at);
    else
        phase_start(r, 0, at);
}

/* A run that begins later than this after --start-at says so and counts the late seconds as
 * generator-bound: the schedule lag threshold of the generator's health (health.c), so a start
 * the seconds' own judgement would pass is not counted twice as bad. */
#define LATE_NS INT64_C(10000000)

/* Waiting for the start (--start-at, or the lead the first phase's sources are built in): the
 * wall clock's instant of --start-at is taken to the monotonic clock again at each wake-up (the
 * wall clock may be slewed while we wait) until the first phase's sources are built for it, a
 * lead ahead; far from it, the wake-up is rearmed, else the run spins to it and begins. Returns
 * true when the run began. */
static bool start_instant(run_t *r, int64_t now)
{
    int64_t at =
        r->opts->start_at_ns ? now + (r->opts->start_at_ns - clock_real_ns()) : r->start_at_mono;
    if (can_ready(r) && !r->phases[0].ready && at - now <= ready_lead(r)) {
        phase_ready(r, at);
        now = clock_mono_ns();
    }
    if (r->phases[0].ready)
        at = r->phases[0].base_ns;
    r->start_at_mono = at;
    if (at > now + RUN_WAKE_EARLY_MAX_NS) {
        rearm(r, now);
        return false;
    }
    now = run_wake_spin(at);
    r->start_at_mono = 0;
    r->late_ns = now - at;
    begin(r, at);
    if (r->late_ns > LATE_NS) {
        char why[160];
        if (r->opts->start_at_ns)
            snprintf(why, sizeof why, "began %.3f s after --start-at (the process was not ready)",
                     (double)r->late_ns / 1e9);
        else
            snprintf(why, sizeof why,
                     "began %.3f s after its planned start (building the first phase's sources "
                     "took longer than the lead given to it)",
                     (double)r->late_ns / 1e9);
        out_warn(r->o, "%s: its first %lld s count as generator-bound", why,
                 (long long)((r->late_ns + 999999999) / 1000000000));
        obs_late_start(r->obs, r->late_ns, why);
    }
    return true;
}

/* Spins to the start the wake-up was armed for (at most RUN_WAKE_EARLY_MAX_NS ahead) and hands it
 * out with every start that is due by then. Later starts, however close, get their own wake-up (a
 * timerfd armed in the past fires at once): the loop polls in between, so answers are handled
 * and connections freed. Spinning from one start to the next instead starved the answers at
 * 20,000/s (every connection busy, send lag of seconds; tools/bench/run.sh). */
static void on_wake(void *data)
{
    run_t *r = data;
    int64_t now = clock_mono_ns();
    r->wake_at_ns = INT64_MAX;
    if (r->state == RUN_IDLE && r->start_at_mono) {
        if (!start_instant(r, now))
            return;
        now = clock_mono_ns();
    }
    for (int step = 0; step < WAKE_MAX_STEPS && r->state == RUN_LOADING; step++) {
        int64_t next = next_event(r);
        if (next > now && (step > 0 || next > now + RUN_WAKE_EARLY_MAX_NS))
            break;
        if (next > now)
            now = run_wake_spin(next);
        due(r, now);
        run_phase_t *ph = current(r);
        if (r->state == RUN_LOADING && ph->duration_ns && now >= ph->base_ns + ph->duration_ns) {
            next_phase(r, now);
            due(r, now); /* the next phase's first starts may be due already */
        }
        if (r->state == RUN_LOADING && next_event(r) <= now) {
            /* Due, but the source did not move on (it waits for something else): look again in
             * a millisecond rather than spin on it. */
            r->wake_floor_ns = now + 1000000;
            break;
        }
        now = clock_mono_ns();
    }
    if (r->state == RUN_DRAINING && now >= r->drain_deadline_ns)
        drained(r, now);
    if (r->state != RUN_DONE)
        rearm(r, now); /* the loop polls next: the wake-up must be armed before it blocks */
}

/* Before the engine handles an answer: what is due goes first (the engine's on_io). One poll
 * returns every ready socket at once and handling each answer takes some microseconds, so a
 * start that fell due meanwhile would otherwise wait behind all of them. */
static void on_io(void *data)
{
    run_t *r = data;
    if (r->state == RUN_LOADING && r->wake_at_ns != INT64_MAX && next_event(r) <= clock_mono_ns())
        on_wake(r);
}

/* Just before the loop polls (and computes how long it may sleep): the end of draining or of
 * the teardown, and the wake-up rearmed for what the pass changed (a closed-loop answer, a
 * watch that must reconnect), whichever phase of the loop pass the change came from: timers,
 * idle callbacks and I/O all run before the next poll. */
static void on_prepare(uv_prepare_t *c)
{
    run_t *r = c->data;
    int64_t now = clock_mono_ns();
    if (r->state == RUN_DRAINING && obs_in_flight(r->obs) == 0)
        drained(r, now);
    if ((r->state == RUN_TEARDOWN && sources_idle(current(r))) || r->state == RUN_ENDING)
        ending(r);
    /* An open-ended phase that is not a teardown (a replay) ends when its log is used up. */
    if (r->state == RUN_LOADING && !current(r)->duration_ns && !current(r)->teardown &&
        sources_idle(current(r))) {
        current(r)->duration_ns = now - current(r)->base_ns;
        next_phase(r, now);
    }
    if (r->state != RUN_DONE)
        rearm(r, now);
}

/* ---- seconds, signals, the target --------------------------------------------------------- */

/* The starts the sources planned up to `to`, for every phase that ran before it, each from
 * where its count stopped: a phase that began before the second closed but was started just
 * after it (the second's timer ran first in that loop pass) has its first instants counted in
 * the next second, where its first requests are also counted. */
static void planned(run_t *r, int64_t to)
{
    double pc[PLAN_MAX_REQS + 1];
    for (size_t i = 0; i <= r->cur && i < r->n_phases; i++) {
        run_phase_t *ph = &r->phases[i];
        if (!ph->started)
            continue;
        int64_t end = ph->ended_ns ? ph->ended_ns : to;
        if (ph->duration_ns && ph->base_ns + ph->duration_ns < end)
            end = ph->base_ns + ph->duration_ns;
        int64_t a = ph->planned_to_ns, b = to < end ? to : end;
        if (b <= a)
            continue;
        memset(pc, 0, (r->plan->n_reqs + 1) * sizeof(*pc));
        double e = src_expected(ph->src, ph->n_src, a - ph->base_ns, b - ph->base_ns, pc);
        obs_planned(r->obs, i, pc, e);
        ph->planned_to_ns = b;
    }
}

/* Closes a second for the observers; the last, partial one at the end of the run. */
static void second(run_t *r, bool final)
{
    int64_t now = clock_mono_ns();
    eng_stats_t st;
    if (r->eng) {
        eng_stats(r->eng, &st, true);
    } else {
        memset(&st, 0, sizeof st);
        st.window_ns = now - r->sec_start_ns;
    }
    planned(r, now);
    /* A second in which the load ended still counts as one of the load's. */
    bool loading = r->state == RUN_LOADING || r->load_end_ns > r->sec_start_ns;
    obs_second(r->obs, &st, loading, r->cur, final);
    r->sec_start_ns = now;
}

static void on_second(uv_timer_t *t)
{
    run_t *r = t->data;
    if (r->state != RUN_IDLE && r->state != RUN_DONE)
        second(r, false);
}

static void on_signal(uv_signal_t *s, int signum)
{
    run_t *r = s->data;
    if (r->state == RUN_IDLE) { /* waiting for --start-at: nothing was sent */
        run_stop(r, RUN_END_SIGNAL, "signal %s before --start-at: nothing was sent",
                 signum == SIGINT ? "SIGINT" : "SIGTERM");
        r->start_ns = r->sec_start_ns = clock_mono_ns();
        results_set_start(r->res, clock_real_ns() / 1000000);
        finish(r);
    } else if (++r->signals == 1) {
        /* The reason kept for the summary and results names the signal only: the hint to send
         * it again is for this moment, not for the run's last line. */
        run_stop(r, RUN_END_SIGNAL, "signal %s", signum == SIGINT ? "SIGINT" : "SIGTERM");
        if (r->state == RUN_DRAINING)
            out_warn(r->o, "letting in-flight requests finish: send the signal again to stop at "
                           "once");
    } else if (r->state == RUN_DRAINING) {
        eng_stop(r->eng, 0);
        r->drain_deadline_ns = 0;
    } else if (r->state == RUN_TEARDOWN) {
        phase_end(r, clock_mono_ns());
    } else if (r->state == RUN_ENDING) {
        finish(r); /* the run-end collects still running are cancelled */
    }
}

/* The engine saw connections refused (or a name not resolve) several times in a row. A target
 * that never answered is a wrong URL or a server not started: the run stops at once, unless
 * --no-brakes. One that answered before is restarting, perhaps on purpose: the unreachable
 * brake (brakes.c, with its window) decides, and watches reconnect by their policy. Any other
 * reason (HTTP/2 not spoken) cannot heal: the run stops. */
static void on_unreachable(void *user)
{
    run_t *r = user;
    eng_stats_t st;
    eng_stats(r->eng, &st, false);
    int64_t answered = st.by_outcome[ENG_OUT_S2XX] + st.by_outcome[ENG_OUT_S3XX] +
                       st.by_outcome[ENG_OUT_S4XX] + st.by_outcome[ENG_OUT_S5XX];
    bool transient =
        st.why && (!strcmp(st.why, ENG_WHY_REFUSED) || !strcmp(st.why, ENG_WHY_RESOLVE));
    if (transient && (answered > 0 || r->opts->no_brakes)) {
        out_warn(r->o, "the target %s %s: %s", r->plan->target.url, st.why,
                 r->opts->no_brakes ? "--no-brakes, the run goes on"
                                    : "the unreachable brake decides (brakes in results.json)");
        return;
    }
    run_stop(r, RUN_END_UNREACHABLE, "target unreachable: %s %s", r->plan->target.url,
             st.why ? st.why : "refuses connections or does not resolve");
}

/* ---- start and end ------------------------------------------------------------------------ */

static void close_handle(uv_handle_t *h)
{
    if (!uv_is_closing(h))
        uv_close(h, NULL);
}

/* Everything is done: the last partial second, every source stopped, the main engine freed,
 * our own handles closed, so uv_run returns and uv_loop_close succeeds. */
static void finish(run_t *r)
{
    if (r->state == RUN_DONE)
        return;
    r->end_ns = clock_mono_ns();
    phase_end(r, r->end_ns);
    second(r, true);
    set_state(r, RUN_DONE);
    for (size_t i = 0; i < r->n_phases; i++)
        for (size_t k = 0; r->phases[i].started && k < r->phases[i].n_src; k++)
            if (r->phases[i].src[k].ops->stop)
                r->phases[i].src[k].ops->stop(r->phases[i].src[k].self);
    if (r->eng)
        eng_clock(r->eng, &r->clock);
    eng_free(r->eng);
    r->eng = NULL;
    scrape_stop(r->scrape);
    act_stop(r->act);
    run_wake_close(&r->wake);
    uv_timer_stop(&r->second);
    uv_prepare_stop(&r->prepare);
    close_handle((uv_handle_t *)&r->second);
    close_handle((uv_handle_t *)&r->prepare);
    signals_held(r, true);
}

/* While the results are written, SIGINT and SIGTERM are ignored: a signal that comes late (a
 * supervisor such as timeout(1) sends its own to the whole process group after the one it
 * forwards) must not kill the process half-way through results.json. The handles are closed
 * with both signals blocked, so none arrives between libuv's default disposition and ours. */
static void signals_held(run_t *r, bool hold)
{
    sigset_t set, old;
    sigemptyset(&set);
    sigaddset(&set, SIGINT);
    sigaddset(&set, SIGTERM);
    if (hold) {
        pthread_sigmask(SIG_BLOCK, &set, &old);
        close_handle((uv_handle_t *)&r->sigint);
        close_handle((uv_handle_t *)&r->sigterm);
        signal(SIGINT, SIG_IGN); /* discards one that is pending */
        signal(SIGTERM, SIG_IGN);
        pthread_sigmask(SIG_SETMASK, &old, NULL);
    } else {
        signal(SIGINT, SIG_DFL);
        signal(SIGTERM, SIG_DFL);
    }
}

static int handles_start(run_t *r)
{
    int rc = run_wake_init(&r->loop, &r->wake, on_wake, r);
    if (rc)
        return rc;
    uv_timer_init(&r->loop, &r->second);
    uv_prepare_init(&r->loop, &r->prepare);
    uv_signal_init(&r->loop, &r->sigint);
    uv_signal_init(&r->loop, &r->sigterm);
    r->second.data = r->prepare.data = r->sigint.data = r->sigterm.data = r;
    r->wake_at_ns = INT64_MAX;
    rc = uv_signal_start(&r->sigint, on_signal, SIGINT);
    rc = rc ? rc : uv_signal_start(&r->sigterm, on_signal, SIGTERM);
    rc = rc ? rc : uv_prepare_start(&r->prepare, on_prepare);
    rc = rc ? rc : uv_timer_start(&r->second, on_second, 1000, 1000);
    return rc ? SQ_ELIBUV : 0;
}

/* An action or a collect fired: its second is marked in series.csv. */
static void on_mark(void *user, const char *name)
{
    obs_mark(((run_t *)user)->obs, name);
}

/* The main engine, the handles, the first phase: the loop then runs to the end. */
static void run_loop(run_t *r)
{
    eng_config_t cfg = r->target.eng;
    cfg.on_unreachable = on_unreachable;
    cfg.on_io = on_io;
    cfg.split = true; /* many short requests: cheaper on several multi handles */
    cfg.connections = src_fleet_connections(r->plan, r->shard); /* or one per agent */
    cfg.user = r;
    int rc = eng_new(&r->loop, &cfg, r->o, &r->eng);
    if (rc == 0) {
        src_issuer_attach(r->issuer, r->eng);
        rc = handles_start(r);
    }
    if (rc == 0)
        rc = scrape_new(&r->loop, r->plan, &r->target.eng, r->o, &r->scrape);
    if (rc == 0)
        rc = scrape_start(r->scrape, r->dir);
    act_cfg_t ac = {.loop = &r->loop,
                    .plan = r->plan,
                    .target = &r->target.eng,
                    .dir = r->dir,
                    .o = r->o,
                    .mark = on_mark,
                    .user = r};
    if (rc == 0)
        rc = act_new(&ac, &r->act);
    if (rc == 0 && r->opts->start_at_ns) {
        int64_t now = clock_mono_ns();
        r->start_at_mono = now + (r->opts->start_at_ns - clock_real_ns());
        rearm(r, now); /* on_wake begins the run (start_instant) */
    } else if (rc == 0 && can_ready(r)) {
        int64_t now = clock_mono_ns();
        r->start_at_mono = now + ready_lead(r);
        rearm(r, now); /* on_wake builds the first phase's sources, then begins (start_instant) */
    } else if (rc == 0) {
        begin(r, clock_mono_ns());
        if (r->state != RUN_DONE)
            rearm(r, r->start_ns);
    } else {
        out_error(r->o, "the run could not start: %s", sq_strerror(rc));
        r->end = RUN_END_FAILED;
        snprintf(r->why, sizeof r->why, "the run could not start");
        finish(r);
    }
    uv_run(&r->loop, UV_RUN_DEFAULT);
    out_live_end(r->o);
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

/* results/<UTC time>-<plan name> */
void run_default_dir(const plan_t *plan, char *dir, size_t cap)
{
    const char *base = strrchr(plan->path, '/');
    base = base ? base + 1 : plan->path;
    size_t n = strcspn(base, ".");
    time_t now = time(NULL);
    struct tm tm;
    gmtime_r(&now, &tm);
    char stamp[32];
    strftime(stamp, sizeof stamp, "%Y%m%dT%H%M%SZ", &tm);
    snprintf(dir, cap, "results/%s-%.*s", stamp, (int)n, base);
}

/* The results directory and what is written into it while the run goes. */
static int open_results(run_t *r)
{
    const run_opts_t *o = r->opts;
    if (o->results_dir)
        snprintf(r->dir, sizeof r->dir, "%s", o->results_dir);
    else
        run_default_dir(r->plan, r->dir, sizeof r->dir);
    if (make_dirs(r->dir)) {
        out_error(r->o, "cannot create results directory %s: %s", r->dir, strerror(errno));
        return SQ_EIO;
    }
    char old[4200];
    snprintf(old, sizeof old, "%s/%s", r->dir, RESULTS_FILE);
    if (!o->force && access(old, F_OK) == 0) {
        out_error(r->o,
                  "%s already holds the results of a run: choose another -o, or --force to "
                  "replace them",
                  r->dir);
        return SQ_EINVAL;
    }
    int rc = obs_open(r->obs, r->dir);
    rc = rc ? rc : results_set_plan(r->res, r->plan->path, NULL, 0, r->o);
    rc = rc ? rc : results_set_target(r->res, r->plan->target.url);
    rc = rc ? rc
            : results_set_shard(r->res, o->shard_index ? o->shard_index : 1,
                                o->shard_count ? o->shard_count : 1);
    return rc;
}

/* A brake fired (from the observers, once a second). */
static void on_brake(void *user, int kind, const char *why)
{
    run_stop(user, kind == PLAN_BRAKE_UNREACHABLE ? RUN_END_UNREACHABLE : RUN_END_BRAKE, "%s", why);
}

int run_plan(const plan_t *plan, const run_opts_t *opts, out_t *o, run_result_t *result)
{
    run_t r = {.plan = plan, .opts = opts, .o = o, .on_brake = on_brake};
    memset(result, 0, sizeof(*result));
    int rc = run_prepare(&r);
    if (rc == 0)
        rc = open_results(&r);
    if (rc == 0 && uv_loop_init(&r.loop))
        rc = SQ_ELIBUV;
    if (rc) {
        run_close(&r);
        return rc;
    }
    run_loop(&r);
    run_finish(&r, result);
    signals_held(&r, false);
    run_close(&r);
    if (uv_run(&r.loop, UV_RUN_DEFAULT), uv_loop_close(&r.loop) != 0)
        out_warn(o, "internal: event loop closed with handles still open");
    return 0;
}
