/* squall's own live metrics (`squall run --metrics ADDR:PORT`): an observer that counts what
 * the run does and, once a second, renders it as an exposition that a small HTTP server
 * (libmicrohttpd, on its own thread) hands to scrapers. The loop's thread writes the counts and
 * renders; the server's thread only copies the last rendered text, under a mutex, so no count is
 * ever read while it changes. OpenMetrics 1.0 when the scraper asks for it (Accept:
 * application/openmetrics-text), else the Prometheus text format 0.0.4, which promtool checks.
 *
 * Families (every one documented in README.md, "squall's own metrics"):
 *   squall_requests_started_total{phase,class}            counter
 *   squall_requests_total{phase,class,outcome}            counter (finished requests)
 *   squall_response_seconds{phase,class}                  histogram, the bounds below
 *   squall_service_seconds{phase,class}                   histogram, the bounds below
 *   squall_schedule_lag_seconds, squall_send_lag_seconds  histograms, the bounds below
 *   squall_in_flight, squall_queued                       gauges (peaks of the last second)
 *   squall_generator_bound_seconds_total,
 *   squall_connection_bound_seconds_total                 counters
 *   squall_watch_streams_open{phase,class}                gauge
 *   squall_watch_drops_total, squall_watch_reconnects_total,
 *   squall_watch_events_total{phase,class}                counters
 *   squall_brakes_fired_total                             counter
 *   squall_phase{phase}                                   gauge: 1 for the current phase */
#include <math.h>
#include <microhttpd.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <arpa/inet.h>

#include "obs_int.h"
#include "squall/err.h"

/* Fixed bucket bounds in seconds: 100 µs to 10 s in 1-2.5-5 steps. */
static const double bounds[] = {0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025,
                                0.05,   0.1,     0.25,   0.5,   1,      2.5,   5,    10};
#define N_BOUNDS (sizeof bounds / sizeof bounds[0])

typedef struct {
    uint64_t n[N_BOUNDS + 1]; /* per bucket (not cumulative); the last is above every bound */
    double sum;
} buckets_t;

typedef struct {
    int64_t started, done[ENG_OUT_COUNT];
    buckets_t response, service;
    int64_t w_open, w_drops, w_reconnects;
    bool shown;
} pc_t; /* one phase x class */

typedef struct {
    const plan_t *plan;
    results_t *res;
    out_t *o;
    size_t n_phases, n_classes; /* with the teardown's */
    pc_t *pc;
    buckets_t lag, send_lag;
    int in_flight, queued;
    int64_t generator_s, connection_s, brakes;
    size_t phase;
    const char *host; /* where to listen (the run's options outlive the list) */
    int port;
    struct MHD_Daemon *mhd;
    pthread_mutex_t mu;
    char *text[2]; /* the last rendering: [0] Prometheus 0.0.4, [1] OpenMetrics */
    size_t len[2];
    char *buf; /* rendering scratch */
    size_t used, cap;
} export_t;

static pc_t *pc_of(export_t *x, size_t phase, int cls)
{
    size_t c = cls < 0 ? x->n_classes - 1 : (size_t)cls;
    if (phase >= x->n_phases || c >= x->n_classes)
        return NULL;
    return &x->pc[phase * x->n_classes + c];
}

static void bucket_add(buckets_t *b, int64_t ns)
{
    double s = (double)ns / 1e9;
    size_t i = 0;
    while (i < N_BOUNDS && s > bounds[i])
        i++;
    b->n[i]++;
    b->sum += s;
}

/* ---- rendering ---------------------------------------------------------------------------- */

static void put(export_t *x, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void put(export_t *x, const char *fmt, ...)
{
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int n = vsnprintf(x->buf + x->used, x->cap - x->used, fmt, ap);
        va_end(ap);
        if (n < 0)
            return;
        if ((size_t)n < x->cap - x->used) {
            x->used += (size_t)n;
            return;
        }
        size_t cap = (x->cap + (size_t)n + 1) * 2;
        char *b = realloc(x->buf, cap);
        if (b == NULL)
            return; /* the rendering is cut; the next second tries again */
        x->buf = b;
        x->cap = cap;
    }
}

/* `# TYPE` and `# HELP` of a family. OpenMetrics names a counter's family without `_total`;
 * the 0.0.4 format names the sample itself. */
static void family(export_t *x, bool om, const char *name, const char *type, const char *help)
{
    size_t n = strlen(name);
    bool counter = strcmp(type, "counter") == 0;
    int cut = om && counter && n > 6 ? 6 : 0;
    put(x, "# TYPE %.*s %s\n# HELP %.*s %s\n", (int)(n - (size_t)cut), name, type,
        (int)(n - (size_t)cut), name, help);
}

static void labels(export_t *x, size_t phase, size_t cls, const char *extra)
{
    put(x, "{phase=\"%s\",class=\"%s\"%s}", obs_phase_name(x->plan, phase),
        obs_class_name(x->plan, cls == x->n_classes - 1 ? OBS_TEARDOWN : (int)cls),
        extra ? extra : "");
}

static void histogram(export_t *x, const char *name, const buckets_t *b, size_t phase, size_t cls,
                      bool with_labels)
{
    uint64_t cum = 0;
    for (size_t i = 0; i <= N_BOUNDS; i++) {
        cum += b->n[i];
        char le[48];
        if (i < N_BOUNDS)
            snprintf(le, sizeof le, "%sle=\"%g\"", with_labels ? "," : "", bounds[i]);
        else
            snprintf(le, sizeof le, "%sle=\"+Inf\"", with_labels ? "," : "");
        put(x, "%s_bucket", name);
        if (with_labels)
            labels(x, phase, cls, le);
        else
            put(x, "{%s}", le);
        put(x, " %llu\n", (unsigned long long)cum);
    }
    put(x, "%s_sum", name);
    if (with_labels)
        labels(x, phase, cls, NULL);
    put(x, " %.9g\n%s_count", b->sum, name);
    if (with_labels)
        labels(x, phase, cls, NULL);
    put(x, " %llu\n", (unsigned long long)cum);
}

/* Which phase x class pairs have anything to show: once shown, a series stays (a scraper must
 * see its last value, not lose it when a phase's streams close). */
static bool active(pc_t *p)
{
    int64_t done = 0;
    for (int o = 0; o < ENG_OUT_COUNT; o++)
        done += p->done[o];
    p->shown = p->shown || p->started || done || p->w_open || p->w_drops || p->w_reconnects;
    return p->shown;
}

static bool is_watch(const export_t *x, size_t cls)
{
    return cls + 1 < x->n_classes && x->plan->reqs[cls].kind == PLAN_WATCH;
}

static void render_requests(export_t *x, bool om)
{
    family(x, om, "squall_requests_started_total", "counter", "Requests handed to the engine.");
    for (size_t i = 0; i < x->n_phases * x->n_classes; i++)
        if (active(&x->pc[i]) && !is_watch(x, i % x->n_classes)) {
            put(x, "squall_requests_started_total");
            labels(x, i / x->n_classes, i % x->n_classes, NULL);
            put(x, " %lld\n", (long long)x->pc[i].started);
        }
    family(x, om, "squall_requests_total", "counter", "Requests finished, by outcome.");
    for (size_t i = 0; i < x->n_phases * x->n_classes; i++)
        for (int o = 0; o < ENG_OUT_COUNT; o++)
            if (x->pc[i].done[o]) {
                char extra[64];
                snprintf(extra, sizeof extra, ",outcome=\"%s\"", eng_outcome_name(o));
                put(x, "squall_requests_total");
                labels(x, i / x->n_classes, i % x->n_classes, extra);
                put(x, " %lld\n", (long long)x->pc[i].done[o]);
            }
    const char *names[] = {"squall_response_seconds", "squall_service_seconds"};
    const char *helps[] = {"Response time from each request's intended start.",
                           "Service time from the request being written to its answer."};
    for (int h = 0; h < 2; h++) {
        family(x, om, names[h], "histogram", helps[h]);
        for (size_t i = 0; i < x->n_phases * x->n_classes; i++)
            if (active(&x->pc[i]) && !is_watch(x, i % x->n_classes))
                histogram(x, names[h], h ? &x->pc[i].service : &x->pc[i].response, i / x->n_classes,
                          i % x->n_classes, true);
    }
}

static void render_watches(export_t *x, bool om)
{
    static const char *const names[] = {"squall_watch_streams_open", "squall_watch_drops_total",
                                        "squall_watch_reconnects_total",
                                        "squall_watch_events_total"};
    static const char *const helps[] = {"Watch streams open now.", "Open streams the target ended.",
                                        "Watch streams opened again.", "Watch events received."};
    for (int k = 0; k < 4; k++) {
        family(x, om, names[k], k ? "counter" : "gauge", helps[k]);
        for (size_t i = 0; i < x->n_phases * x->n_classes; i++) {
            size_t ph = i / x->n_classes, c = i % x->n_classes;
            if (!is_watch(x, c) || !active(&x->pc[i]))
                continue;
            int64_t v = k == 0   ? x->pc[i].w_open
                        : k == 1 ? x->pc[i].w_drops
                        : k == 2 ? x->pc[i].w_reconnects
                                 : 0;
            if (k == 3) {
                const results_cell_t *cell = results_cell_find(
                    x->res, obs_phase_name(x->plan, ph), obs_class_name(x->plan, (int)c), "2xx");
                v = cell ? results_cell_counters((results_cell_t *)cell)->count : 0;
            }
            put(x, "%s", names[k]);
            labels(x, ph, c, NULL);
            put(x, " %lld\n", (long long)v);
        }
    }
}

static void render_run(export_t *x, bool om)
{
    family(x, om, "squall_schedule_lag_seconds", "histogram",
           "Time from a request's intended start to its being handed to the engine.");
    histogram(x, "squall_schedule_lag_seconds", &x->lag, 0, 0, false);
    family(x, om, "squall_send_lag_seconds", "histogram",
           "Time from a request's intended start to its being written on the wire.");
    histogram(x, "squall_send_lag_seconds", &x->send_lag, 0, 0, false);
    family(x, om, "squall_in_flight", "gauge", "Requests in flight, peak of the last second.");
    put(x, "squall_in_flight %d\n", x->in_flight);
    family(x, om, "squall_queued", "gauge",
           "Requests waiting for a connection, peak of the last second.");
    put(x, "squall_queued %d\n", x->queued);
    family(x, om, "squall_generator_bound_seconds_total", "counter",
           "Seconds in which squall itself fell behind its schedule.");
    put(x, "squall_generator_bound_seconds_total %lld\n", (long long)x->generator_s);
    family(x, om, "squall_connection_bound_seconds_total", "counter",
           "Seconds in which every connection was busy with slow answers.");
    put(x, "squall_connection_bound_seconds_total %lld\n", (long long)x->connection_s);
    family(x, om, "squall_brakes_fired_total", "counter", "Brakes that stopped the run.");
    put(x, "squall_brakes_fired_total %lld\n", (long long)x->brakes);
    family(x, om, "squall_phase", "gauge", "1 for the phase running now.");
    /* The plan's phases, and the teardown the run adds once it runs. */
    for (size_t p = 0; p < x->n_phases; p++)
        if (p + 1 < x->n_phases || x->phase == p)
            put(x, "squall_phase{phase=\"%s\"} %d\n", obs_phase_name(x->plan, p), p == x->phase);
}

/* Renders both formats and swaps them in for the server's thread. */
static void render(export_t *x)
{
    char *text[2];
    size_t len[2];
    for (int om = 0; om < 2; om++) {
        x->used = 0;
        render_requests(x, om);
        render_watches(x, om);
        render_run(x, om);
        if (om)
            put(x, "# EOF\n");
        text[om] = malloc(x->used + 1);
        if (text[om])
            memcpy(text[om], x->buf ? x->buf : "", x->used + 1);
        len[om] = x->used;
    }
    pthread_mutex_lock(&x->mu);
    for (int k = 0; k < 2; k++) {
        if (text[k] == NULL)
            continue; /* out of memory: the previous rendering stays */
        free(x->text[k]);
        x->text[k] = text[k];
        x->len[k] = len[k];
    }
    pthread_mutex_unlock(&x->mu);
}

/* ---- the server's thread ----------------------------------------------------------------- */

static enum MHD_Result answer(void *cls, struct MHD_Connection *c, const char *url,
                              const char *method, const char *version, const char *upload,
                              size_t *upload_size, void **con_cls)
{
    (void)version;
    (void)upload;
    (void)upload_size;
    (void)con_cls;
    export_t *x = cls;
    struct MHD_Response *r;
    unsigned status = MHD_HTTP_OK;
    if (strcmp(method, "GET") != 0 || strcmp(url, "/metrics") != 0) {
        static const char msg[] = "squall serves its metrics at GET /metrics\n";
        status = MHD_HTTP_NOT_FOUND;
        r = MHD_create_response_from_buffer(sizeof msg - 1, (void *)msg, MHD_RESPMEM_PERSISTENT);
    } else {
        const char *accept = MHD_lookup_connection_value(c, MHD_HEADER_KIND, "Accept");
        int om = accept && strstr(accept, "application/openmetrics-text") ? 1 : 0;
        pthread_mutex_lock(&x->mu);
        r = MHD_create_response_from_buffer(x->len[om], x->text[om] ? x->text[om] : (char *)"",
                                            MHD_RESPMEM_MUST_COPY);
        pthread_mutex_unlock(&x->mu);
        if (r)
            MHD_add_response_header(r, "Content-Type",
                                    om ? "application/openmetrics-text; version=1.0.0; "
                                         "charset=utf-8"
                                       : "text/plain; version=0.0.4; charset=utf-8");
    }
    if (r == NULL)
        return MHD_NO;
    enum MHD_Result rc = MHD_queue_response(c, status, r);
    MHD_destroy_response(r);
    return rc;
}

/* ---- the observer ------------------------------------------------------------------------- */

static void export_free(void *self)
{
    export_t *x = self;
    if (x == NULL)
        return;
    if (x->mhd)
        MHD_stop_daemon(x->mhd);
    pthread_mutex_destroy(&x->mu);
    free(x->text[0]);
    free(x->text[1]);
    free(x->buf);
    free(x->pc);
    free(x);
}

static int start_server(export_t *x)
{
    struct sockaddr_storage ss = {0};
    struct sockaddr_in *a4 = (struct sockaddr_in *)&ss;
    struct sockaddr_in6 *a6 = (struct sockaddr_in6 *)&ss;
    unsigned flags = MHD_USE_INTERNAL_POLLING_THREAD;
    if (inet_pton(AF_INET, x->host, &a4->sin_addr) == 1) {
        a4->sin_family = AF_INET;
        a4->sin_port = htons((uint16_t)x->port);
    } else if (inet_pton(AF_INET6, x->host, &a6->sin6_addr) == 1) {
        a6->sin6_family = AF_INET6;
        a6->sin6_port = htons((uint16_t)x->port);
        flags |= MHD_USE_IPv6;
    } else {
        out_error(x->o, "--metrics: '%s' is not an IP address", x->host);
        return SQ_EINVAL;
    }
    x->mhd = MHD_start_daemon(flags, 0, NULL, NULL, answer, x, MHD_OPTION_SOCK_ADDR,
                              (struct sockaddr *)&ss, MHD_OPTION_CONNECTION_LIMIT, (unsigned)64,
                              MHD_OPTION_CONNECTION_TIMEOUT, (unsigned)10, MHD_OPTION_END);
    if (x->mhd == NULL) {
        out_error(x->o, "--metrics: cannot listen on %s port %d (in use?)", x->host, x->port);
        return SQ_EIO;
    }
    return 0;
}

static int export_new(const obs_cfg_t *cfg, void **self)
{
    *self = NULL;
    if (cfg->metrics_host == NULL)
        return 0;
    export_t *x = calloc(1, sizeof *x);
    if (x == NULL)
        return SQ_ENOMEM;
    x->plan = cfg->plan;
    x->res = cfg->res;
    x->o = cfg->o;
    x->n_phases = cfg->plan->n_phases + 1;
    x->n_classes = cfg->plan->n_reqs + 1;
    x->host = cfg->metrics_host;
    x->port = cfg->metrics_port;
    pthread_mutex_init(&x->mu, NULL);
    x->pc = calloc(x->n_phases * x->n_classes, sizeof *x->pc);
    *self = x;
    if (x->pc == NULL)
        return SQ_ENOMEM;
    /* `check` builds the list too: only a run listens (it opens the results first). */
    return 0;
}

static int export_open(void *self, const char *dir)
{
    (void)dir;
    export_t *x = self;
    if (x == NULL)
        return 0;
    render(x);
    return start_server(x);
}

static void export_sent(void *self, const obs_sent_t *s)
{
    pc_t *p = self && !s->page ? pc_of(self, s->phase, s->cls) : NULL;
    if (p)
        p->started++;
}

static void export_done(void *self, const obs_done_t *d)
{
    export_t *x = self;
    pc_t *p = x ? pc_of(x, d->phase, d->cls) : NULL;
    if (p == NULL || (d->res->outcome >= 0 && d->res->outcome >= ENG_OUT_COUNT))
        return;
    p->done[d->res->outcome]++;
    if (d->res->outcome == ENG_OUT_CANCELLED)
        return;
    bucket_add(&p->response, d->res->done_ns - d->intended_ns);
    if (d->res->sent_ns)
        bucket_add(&p->service, d->res->done_ns - d->res->sent_ns);
    if (d->first && d->res->submitted_ns)
        bucket_add(&x->lag, d->res->submitted_ns - d->intended_ns);
    if (d->first && d->res->sent_ns)
        bucket_add(&x->send_lag, d->res->sent_ns - d->intended_ns);
}

static void export_second(void *self, const obs_second_t *s)
{
    export_t *x = self;
    if (x == NULL)
        return;
    x->in_flight = s->eng ? s->eng->max_in_flight : s->in_flight;
    x->queued = s->eng ? s->eng->max_queued : 0;
    x->phase = s->phase;
    if (s->loading && s->bound == OBS_BOUND_GENERATOR)
        x->generator_s++;
    if (s->loading && s->bound == OBS_BOUND_CONNECTIONS)
        x->connection_s++;
    if (s->brake_fired && s->brake_fired[0])
        x->brakes = 1;
    render(x);
}

static const obs_ops_t ops = {
    .name = "export",
    .open = export_open,
    .sent = export_sent,
    .done = export_done,
    .second = export_second,
    .free = export_free,
};

const obs_entry_t obs_export_entry = {.ops = &ops, .new = export_new};

void obs_export_watch(void *self, size_t phase, int cls, enum obs_watch_ev ev)
{
    pc_t *p = self ? pc_of(self, phase, cls) : NULL;
    if (p == NULL)
        return;
    if (ev == OBS_WATCH_OPENED)
        p->w_open++;
    else if (ev == OBS_WATCH_ENDED && p->w_open > 0)
        p->w_open--;
    else if (ev == OBS_WATCH_DROPPED)
        p->w_drops++;
    else if (ev == OBS_WATCH_RECONNECT)
        p->w_reconnects++;
}
