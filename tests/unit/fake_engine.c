/* A fake request engine for the conductor's unit tests: the engine API of
 * include/squall/engine.h answered on the caller's libuv loop after a fixed delay, by a
 * function the test sets, with every request logged. Linked before libsquall, it takes the
 * place of the real engine (a link seam), so no socket is opened. */
#include <stdlib.h>
#include <string.h>

#include "fake_engine.h"
#include "squall/err.h"

fake_t fake;

typedef struct fx {
    struct fx *next;
    eng_req_t req;
    char *path, *method;
    int64_t due_ns;
    bool stream;
    eng_result_t res;
} fx_t;

struct eng {
    uv_loop_t *loop;
    eng_config_t cfg;
    uv_timer_t tick;
    fx_t *pending;
    fx_t *held; /* held requests (hold_until_ns), in hold order; path and method copied */
    int in_flight, max_in_flight, refused;
    uv_timer_cb on_tick;
    bool stopped, unreachable;
    int64_t window_start;
};

static const char *const names[] = {
    "2xx",     "3xx", "4xx",   "5xx",          "timeout",         "connect-refused",
    "resolve", "tls", "reset", "http-version", "transport-other", "body-too-large", "cancelled"};

const char *eng_outcome_name(enum eng_outcome o)
{
    return (unsigned)o < ENG_OUT_COUNT ? names[o] : "unknown";
}

static void finish(eng_t *e, fx_t *x, bool cancelled)
{
    x->res.done_ns = (int64_t)uv_hrtime();
    if (cancelled) {
        x->res.outcome = ENG_OUT_CANCELLED;
        x->res.status = 0;
        x->res.body = NULL;
        x->res.body_len = 0;
    }
    e->in_flight--;
    fake.completed++;
    if (x->stream && !cancelled && x->req.on_data)
        x->req.on_data(x->req.user, x->res.body, x->res.body_len);
    if (x->stream)
        x->res.body = NULL;
    x->req.on_done(x->req.user, &x->res);
    free(x->path);
    free(x->method);
    free(x);
}

/* The timer is one-shot, armed for the earliest answer due (a real engine wakes for its
 * sockets, not on a fixed tick: the conductor must not count on being woken every ms). */
static void arm(eng_t *e)
{
    int64_t due = INT64_MAX, now = (int64_t)uv_hrtime();
    for (fx_t *x = e->pending; x; x = x->next)
        due = x->due_ns < due ? x->due_ns : due;
    if (due == INT64_MAX || e->stopped) {
        uv_timer_stop(&e->tick);
        return;
    }
    uv_update_time(e->loop);
    uv_timer_start(&e->tick, e->on_tick, due > now ? (uint64_t)((due - now + 999999) / 1000000) : 1,
                   0);
}

/* Answers every request whose time has come, in submission order. */
static void on_tick(uv_timer_t *t)
{
    eng_t *e = t->data;
    int64_t now = (int64_t)uv_hrtime();
    fx_t **pp = &e->pending;
    while (*pp) {
        fx_t *x = *pp;
        if (x->due_ns > now) {
            pp = &x->next;
            continue;
        }
        *pp = x->next;
        bool refused = x->res.outcome == ENG_OUT_REFUSED;
        finish(e, x, false); /* may submit, stop or free: walk again from the head */
        if (refused && ++e->refused == 3 && !e->unreachable && e->cfg.on_unreachable) {
            e->unreachable = true;
            e->cfg.on_unreachable(e->cfg.user);
        }
        if (e->stopped && !e->pending)
            return;
        pp = &e->pending;
    }
    arm(e);
}

int eng_new(uv_loop_t *loop, const eng_config_t *cfg, out_t *o, eng_t **out)
{
    (void)o;
    eng_t *e = calloc(1, sizeof(*e));
    if (!e)
        return SQ_ENOMEM;
    e->loop = loop;
    e->cfg = *cfg;
    e->window_start = (int64_t)uv_hrtime();
    uv_timer_init(loop, &e->tick);
    e->tick.data = e;
    e->on_tick = on_tick;
    fake.engines++;
    if (cfg->n_headers)
        snprintf(fake.headers, sizeof fake.headers, "%s", cfg->headers[0]);
    *out = e;
    return 0;
}

void eng_set_connections(eng_t *e, int n)
{
    (void)e;
    fake.connections = n;
}

/* The fake answers on its own timer; there is nothing to write early. */
void eng_flush(eng_t *e)
{
    (void)e;
}

/* A held request: kept with its own copies of path and method (the body is not looked at). */
static int hold(eng_t *e, const eng_req_t *req)
{
    fx_t *x = calloc(1, sizeof(*x));
    if (!x || !(x->path = strdup(req->path)) ||
        !(x->method = strdup(req->method ? req->method : "GET"))) {
        if (x)
            free(x->path);
        free(x);
        return SQ_ENOMEM;
    }
    x->req = *req;
    x->req.path = x->path;
    x->req.method = x->method;
    x->req.body = NULL;
    x->due_ns = req->hold_until_ns;
    fx_t **pp = &e->held;
    while (*pp && (*pp)->due_ns <= x->due_ns)
        pp = &(*pp)->next;
    x->next = *pp;
    *pp = x;
    fake.held++;
    return 0;
}

int eng_release(eng_t *e, int64_t now_ns)
{
    int n = 0;
    while (e->held && e->held->due_ns <= now_ns) {
        fx_t *h = e->held;
        e->held = h->next;
        eng_req_t r = h->req;
        r.hold_until_ns = 0;
        if (eng_submit(e, &r) == 0 && r.on_release)
            r.on_release(r.user);
        free(h->path);
        free(h->method);
        free(h);
        n++;
    }
    return n;
}

bool eng_held_next(const eng_t *e, int64_t *at_ns)
{
    if (!e->held)
        return false;
    *at_ns = e->held->due_ns;
    return true;
}

int eng_submit(eng_t *e, const eng_req_t *req)
{
    if (e->stopped)
        return SQ_ESTOPPED;
    if (req->hold_until_ns > 0)
        return hold(e, req);
    fx_t *x = calloc(1, sizeof(*x));
    if (!x)
        return SQ_ENOMEM;
    x->req = *req;
    x->path = strdup(req->path);
    x->method = strdup(req->method ? req->method : "GET");
    int64_t now = (int64_t)uv_hrtime();
    x->res.intended_ns = req->intended_ns ? req->intended_ns : now;
    x->res.submitted_ns = x->res.admitted_ns = x->res.sent_ns = now;
    fake_answer_t a = {.status = 200, .body = ""};
    if (fake.answer)
        fake.answer(x->method, x->path, &a);
    x->res.status = a.status;
    x->res.outcome = a.refused         ? ENG_OUT_REFUSED
                     : a.status >= 500 ? ENG_OUT_S5XX
                     : a.status >= 400 ? ENG_OUT_S4XX
                     : a.status >= 300 ? ENG_OUT_S3XX
                                       : ENG_OUT_S2XX;
    if (a.refused)
        x->res.status = 0;
    x->res.body = req->keep_body ? a.body : NULL;
    x->res.body_len = req->keep_body ? strlen(a.body) : 0;
    x->due_ns = now + fake.delay_ns;
    if (a.stream && req->timeout_ms > 0) {
        x->stream = true;
        x->res.outcome = ENG_OUT_TIMEOUT;
        x->res.body = a.body;
        x->res.body_len = strlen(a.body);
        x->due_ns = now + req->timeout_ms * 1000000;
    }
    x->next = NULL;
    fx_t **pp = &e->pending;
    while (*pp)
        pp = &(*pp)->next;
    *pp = x;
    if (++e->in_flight > e->max_in_flight)
        e->max_in_flight = e->in_flight;
    arm(e);
    if (fake.n_log < FAKE_LOG)
        fake.log[fake.n_log++] = (fake_req_t){.intended_ns = x->res.intended_ns,
                                              .submitted_ns = now,
                                              .timeout_ms = req->timeout_ms,
                                              .engine = fake.engines};
    if (fake.n_log <= FAKE_LOG) {
        fake_req_t *l = &fake.log[fake.n_log - 1];
        snprintf(l->method, sizeof l->method, "%s", x->method);
        snprintf(l->path, sizeof l->path, "%s", x->path);
    }
    return 0;
}

static void cancel_all(eng_t *e)
{
    while (e->held) {
        fx_t *x = e->held;
        e->held = x->next;
        e->in_flight++; /* finish counts it out */
        x->res.intended_ns = x->req.intended_ns;
        finish(e, x, true);
    }
    while (e->pending) {
        fx_t *x = e->pending;
        e->pending = x->next;
        finish(e, x, true);
    }
}

void eng_stop(eng_t *e, int64_t grace_ms)
{
    e->stopped = true;
    if (grace_ms == 0)
        cancel_all(e);
}

void eng_stats(eng_t *e, eng_stats_t *st, bool reset_window)
{
    int64_t now = (int64_t)uv_hrtime();
    memset(st, 0, sizeof(*st));
    st->in_flight = e->in_flight;
    st->max_in_flight = e->max_in_flight;
    st->window_ns = now - e->window_start;
    st->unreachable = e->unreachable;
    st->why = e->unreachable ? "refuses connections" : NULL;
    if (reset_window) {
        e->window_start = now;
        e->max_in_flight = e->in_flight;
    }
}

static void on_closed(uv_handle_t *h)
{
    free(h->data);
}

void eng_free(eng_t *e)
{
    if (!e)
        return;
    e->stopped = true;
    cancel_all(e);
    uv_timer_stop(&e->tick);
    uv_close((uv_handle_t *)&e->tick, on_closed);
}

/* The fake target sends no Date header: no clock samples. */
void eng_clock(const eng_t *e, eng_clock_t *out)
{
    (void)e;
    memset(out, 0, sizeof *out);
}
