/* Scrapes the plan's metrics endpoints while the run goes: one engine and one timer per
 * endpoint, every answer parsed and its kept series stored and written (see squall/scrape.h). */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "squall/expo.h"
#include "squall/scrape.h"

#define SCRAPE_MAX_PLOTTED 64 /* derived series in results.json; the CSV holds every point */
/* What scrapers commonly ask for: OpenMetrics first, the Prometheus text format as fallback. */
#define ACCEPT                                                                                     \
    "Accept: application/openmetrics-text;version=1.0.0,text/plain;version=0.0.4;q=0.5,*/*;q=0.1"

typedef struct {
    char *name, *family, *suffix;
    char *labels; /* name="value",... escaped as in the exposition */
    char *group;  /* the labels without `le`: the histogram a bucket belongs to */
    double le;
    enum expo_type type;
    int endpoint;
    int64_t *t_ms;
    double *v;
    size_t n, cap;
} series_t;

typedef struct {
    struct scrape *s;
    int index;
    const plan_scrape_t *ps;
    eng_t *eng;
    uv_timer_t timer;
    bool busy, stopped, too_big, timer_on;
    size_t bytes;
    int64_t started_ms; /* wall clock of the scrape in flight: its points' time */
    int64_t ok, failed, skipped;
    const char *format;
    char last_error[300];
} endpoint_t;

struct scrape {
    const plan_t *plan;
    out_t *o;
    endpoint_t *ep;
    size_t n_ep;
    FILE *csv;
    series_t *series;
    size_t n_series, cap_series;
    size_t *slots; /* open addressing over series indices + 1 (0: empty), a power of two */
    size_t n_slots;
    int64_t dropped; /* samples of series beyond SCRAPE_MAX_SERIES */
    char *text;      /* scratch for a sample's labels */
    size_t text_cap;
};

/* ---- series ------------------------------------------------------------------------------- */

/* '*' matches any run of characters, everything else itself. */
static bool glob(const char *p, const char *s)
{
    const char *star = NULL, *back = NULL;
    while (*s) {
        if (*p == '*') {
            star = p++;
            back = s;
        } else if (*p == *s) {
            p++;
            s++;
        } else if (star) {
            p = star + 1;
            s = ++back;
        } else {
            return false;
        }
    }
    while (*p == '*')
        p++;
    return *p == '\0';
}

static bool kept(const plan_scrape_t *ps, const expo_sample_t *x)
{
    if (ps->n_keep == 0)
        return true;
    for (size_t i = 0; i < ps->n_keep; i++)
        if (glob(ps->keep[i], x->name) || glob(ps->keep[i], x->family))
            return true;
    return false;
}

/* Appends name="value" pairs (escaped as the formats escape them) to s->text; skips `le` when
 * asked. Returns the length or -1 when out of memory. */
static long labels_text(struct scrape *s, const expo_sample_t *x, bool skip_le)
{
    size_t need = 1;
    for (size_t i = 0; i < x->n_labels; i++)
        need += strlen(x->labels[i].name) + 2 * strlen(x->labels[i].value) + 5;
    if (need > s->text_cap) {
        char *t = realloc(s->text, need);
        if (t == NULL)
            return -1;
        s->text = t;
        s->text_cap = need;
    }
    char *d = s->text;
    for (size_t i = 0; i < x->n_labels; i++) {
        if (skip_le && strcmp(x->labels[i].name, "le") == 0)
            continue;
        d += sprintf(d, "%s%s=\"", d == s->text ? "" : ",", x->labels[i].name);
        for (const char *v = x->labels[i].value; *v; v++) {
            if (*v == '\\' || *v == '"')
                *d++ = '\\';
            if (*v == '\n') {
                *d++ = '\\';
                *d++ = 'n';
            } else {
                *d++ = *v;
            }
        }
        *d++ = '"';
    }
    *d = '\0';
    return d - s->text;
}

static size_t key_hash(int ep, const char *name, const char *labels)
{
    size_t h = 1469598103934665603u ^ (size_t)ep; /* FNV-1a, 64-bit offset basis */
    for (const char *p = name; *p; p++)
        h = (h ^ (unsigned char)*p) * 1099511628211u;
    h = (h ^ '{') * 1099511628211u;
    for (const char *p = labels; *p; p++)
        h = (h ^ (unsigned char)*p) * 1099511628211u;
    return h;
}

static int slots_grow(struct scrape *s)
{
    size_t n = s->n_slots ? s->n_slots * 2 : 256;
    size_t *t = calloc(n, sizeof *t);
    if (t == NULL)
        return SQ_ENOMEM;
    for (size_t i = 0; i < s->n_series; i++) {
        series_t *r = &s->series[i];
        size_t j = key_hash(r->endpoint, r->name, r->labels) & (n - 1);
        while (t[j])
            j = (j + 1) & (n - 1);
        t[j] = i + 1;
    }
    free(s->slots);
    s->slots = t;
    s->n_slots = n;
    return 0;
}

static void series_clear(series_t *r)
{
    free(r->name);
    free(r->family);
    free(r->suffix);
    free(r->labels);
    free(r->group);
    free(r->t_ms);
    free(r->v);
}

static series_t *series_new(struct scrape *s, int ep, const expo_sample_t *x)
{
    if (s->n_series == s->cap_series) {
        size_t cap = s->cap_series ? s->cap_series * 2 : 64;
        series_t *t = realloc(s->series, cap * sizeof *t);
        if (t == NULL)
            return NULL;
        s->series = t;
        s->cap_series = cap;
    }
    series_t *r = &s->series[s->n_series];
    *r = (series_t){.type = x->type, .endpoint = ep, .le = NAN};
    r->name = strdup(x->name);
    r->family = strdup(x->family);
    r->suffix = strdup(x->suffix);
    r->labels = strdup(s->text); /* before the scratch is reused for the group below */
    const char *le = expo_label(x, "le");
    if (le)
        r->le = strtod(le, NULL);
    r->group = labels_text(s, x, true) >= 0 ? strdup(s->text) : NULL;
    if (!r->name || !r->family || !r->suffix || !r->labels || !r->group) {
        series_clear(r);
        return NULL;
    }
    s->n_series++;
    return r;
}

/* The series of (endpoint, sample), created when new; NULL when out of room or memory. */
static series_t *series_of(struct scrape *s, int ep, const expo_sample_t *x)
{
    if (labels_text(s, x, false) < 0)
        return NULL;
    if (s->n_slots == 0 || (s->n_series + 1) * 2 > s->n_slots)
        if (slots_grow(s) != 0)
            return NULL;
    size_t j = key_hash(ep, x->name, s->text) & (s->n_slots - 1);
    for (; s->slots[j]; j = (j + 1) & (s->n_slots - 1)) {
        series_t *r = &s->series[s->slots[j] - 1];
        if (r->endpoint == ep && strcmp(r->name, x->name) == 0 && strcmp(r->labels, s->text) == 0)
            return r;
    }
    if (s->n_series >= SCRAPE_MAX_SERIES)
        return NULL;
    series_t *r = series_new(s, ep, x);
    if (r != NULL)
        s->slots[j] = s->n_series;
    return r;
}

static int point_add(series_t *r, int64_t t_ms, double v)
{
    if (r->n == r->cap) {
        size_t cap = r->cap ? r->cap * 2 : 16;
        int64_t *t = realloc(r->t_ms, cap * sizeof *t);
        if (t == NULL)
            return SQ_ENOMEM;
        r->t_ms = t;
        double *nv = realloc(r->v, cap * sizeof *nv);
        if (nv == NULL)
            return SQ_ENOMEM;
        r->v = nv;
        r->cap = cap;
    }
    r->t_ms[r->n] = t_ms;
    r->v[r->n++] = v;
    return 0;
}

/* ---- one scrape --------------------------------------------------------------------------- */

static void csv_value(FILE *f, double v)
{
    if (isnan(v))
        fputs("NaN", f);
    else if (isinf(v))
        fputs(v > 0 ? "+Inf" : "-Inf", f);
    else
        fprintf(f, "%.17g", v);
}

/* RFC 4180: a field with a quote or a comma is quoted, its quotes doubled. */
static void csv_field(FILE *f, const char *t)
{
    if (strpbrk(t, "\",\n") == NULL) {
        fputs(t, f);
        return;
    }
    fputc('"', f);
    for (; *t; t++) {
        if (*t == '"')
            fputc('"', f);
        fputc(*t, f);
    }
    fputc('"', f);
}

static int on_sample(const expo_sample_t *x, void *ud)
{
    endpoint_t *ep = ud;
    struct scrape *s = ep->s;
    if (!kept(ep->ps, x))
        return 0;
    series_t *r = series_of(s, ep->index, x);
    if (r == NULL) {
        s->dropped++;
        return 0;
    }
    if (point_add(r, ep->started_ms, x->value) != 0)
        return SQ_ENOMEM;
    if (s->csv) {
        fprintf(s->csv, "%lld,%d,%s,", (long long)ep->started_ms, ep->index, x->name);
        csv_field(s->csv, r->labels);
        fputc(',', s->csv);
        csv_value(s->csv, x->value);
        fputc('\n', s->csv);
    }
    return 0;
}

static void failed(endpoint_t *ep, const char *fmt, const char *detail)
{
    ep->failed++;
    snprintf(ep->last_error, sizeof ep->last_error, fmt, detail);
}

static int on_data(void *user, const char *data, size_t len)
{
    (void)data;
    endpoint_t *ep = user;
    ep->bytes += len;
    ep->too_big = ep->bytes > SCRAPE_MAX_BYTES;
    return ep->too_big;
}

static void on_done(void *user, const eng_result_t *res)
{
    endpoint_t *ep = user;
    ep->busy = false;
    if (ep->stopped)
        return; /* cancelled as the run ended: not a failure */
    if (ep->too_big) {
        failed(ep, "the answer was over %s", "16 MiB");
        return;
    }
    if (res->outcome != ENG_OUT_S2XX) {
        char what[64];
        snprintf(what, sizeof what, "%s (status %ld)", eng_outcome_name(res->outcome), res->status);
        failed(ep, "no metrics: %s", what);
        return;
    }
    enum expo_format fmt = expo_format_of(res->content_type);
    ep->format = fmt == EXPO_OPENMETRICS ? "openmetrics" : "prometheus";
    char err[200];
    /* A malformed exposition is dropped whole, as Prometheus drops such a scrape. */
    if (expo_parse(res->body, res->body_len, fmt, NULL, NULL, err, sizeof err) != 0) {
        failed(ep, "malformed metrics: %s", err);
        return;
    }
    if (expo_parse(res->body, res->body_len, fmt, on_sample, ep, err, sizeof err) != 0) {
        failed(ep, "%s", "out of memory");
        return;
    }
    ep->ok++;
}

static void on_tick(uv_timer_t *t)
{
    endpoint_t *ep = t->data;
    if (ep->busy) {
        ep->skipped++; /* the previous scrape is still running */
        return;
    }
    static const char *const headers[] = {ACCEPT};
    int64_t every_ms = ep->ps->every_ns / 1000000;
    eng_req_t rq = {.method = "GET",
                    .path = ep->ps->at.path,
                    .headers = headers,
                    .n_headers = 1,
                    .timeout_ms = every_ms < 10000 ? every_ms : 10000,
                    .keep_body = true,
                    .on_data = on_data,
                    .on_done = on_done,
                    .user = ep};
    ep->bytes = 0;
    ep->too_big = false;
    ep->started_ms = clock_real_ns() / 1000000;
    if (eng_submit(ep->eng, &rq) == 0)
        ep->busy = true;
    else
        failed(ep, "%s", "the scrape could not be sent");
}

/* ---- the section: figures and derived series ------------------------------------------- */

static json_t *points(const int64_t *t, const double *v, size_t n)
{
    json_t *a = json_array();
    for (size_t i = 0; a && i < n; i++)
        if (isfinite(v[i]))
            json_array_append_new(a, json_pack("[I, f]", (json_int_t)t[i], v[i]));
    return a;
}

static json_t *derived_one(const series_t *r, const char *metric, const char *labels,
                           const char *kind, json_t *pts)
{
    return json_pack("{s:s, s:s, s:s, s:s, s:i, s:o}", "metric", metric, "labels", labels, "type",
                     expo_type_name(r->type), "kind", kind, "endpoint", r->endpoint, "points",
                     pts ? pts : json_array());
}

static int by_le(const void *a, const void *b)
{
    const series_t *x = *(series_t *const *)a, *y = *(series_t *const *)b;
    return x->le < y->le ? -1 : x->le > y->le;
}

static bool is_bucket(const series_t *r)
{
    return (r->type == EXPO_HISTOGRAM || r->type == EXPO_GAUGEHISTOGRAM) &&
           strcmp(r->suffix, "_bucket") == 0;
}

/* p50, p90 and p99 over each interval of the histogram whose bucket r is; done[] marks its
 * buckets. Buckets that were not scraped alike (one appeared later) give no quantiles. */
static void quantiles(const scrape_t *s, size_t first, bool *done, json_t *out)
{
    const series_t *r = &s->series[first];
    const series_t **b = malloc(s->n_series * sizeof *b);
    size_t nb = 0;
    for (size_t i = first; b && i < s->n_series; i++) {
        const series_t *x = &s->series[i];
        if (is_bucket(x) && x->endpoint == r->endpoint && !strcmp(x->family, r->family) &&
            !strcmp(x->group, r->group)) {
            b[nb++] = x;
            done[i] = true;
        }
    }
    bool alike = b != NULL && r->n >= 2;
    for (size_t k = 0; alike && k < nb; k++)
        alike = b[k]->n == r->n && memcmp(b[k]->t_ms, r->t_ms, r->n * sizeof *r->t_ms) == 0;
    if (alike) {
        qsort(b, nb, sizeof *b, by_le);
        static const double qs[] = {0.5, 0.9, 0.99};
        static const char *const names[] = {"p50", "p90", "p99"};
        double *bounds = malloc(nb * sizeof *bounds), *inc = malloc(nb * sizeof *inc);
        double *v = malloc(r->n * sizeof *v);
        for (size_t q = 0; bounds && inc && v && q < 3; q++) {
            for (size_t i = 1; i < r->n; i++) {
                for (size_t k = 0; k < nb; k++) {
                    bounds[k] = b[k]->le;
                    double d = b[k]->v[i] - b[k]->v[i - 1];
                    inc[k] = d >= 0 ? d : b[k]->v[i]; /* a reset */
                }
                v[i] = scrape_bucket_quantile(qs[q], bounds, inc, nb);
            }
            json_array_append_new(out, derived_one(r, r->family, r->group, names[q],
                                                   points(r->t_ms + 1, v + 1, r->n - 1)));
        }
        free(bounds);
        free(inc);
        free(v);
    }
    free(b);
}

static void derive(const scrape_t *s, json_t *out)
{
    bool *done = calloc(s->n_series ? s->n_series : 1, sizeof *done);
    for (size_t i = 0; done && i < s->n_series; i++) {
        const series_t *r = &s->series[i];
        if (done[i])
            continue;
        size_t nl = strlen(r->name);
        bool counter = (r->type == EXPO_COUNTER && strcmp(r->suffix, "_created") != 0) ||
                       (r->type == EXPO_UNTYPED && nl > 6 && !strcmp(r->name + nl - 6, "_total"));
        if (is_bucket(r)) {
            quantiles(s, i, done, out);
        } else if (counter && r->n >= 2) {
            double *rate = malloc((r->n - 1) * sizeof *rate);
            if (rate) {
                scrape_rates(r->t_ms, r->v, r->n, rate);
                json_array_append_new(out, derived_one(r, r->name, r->labels, "rate",
                                                       points(r->t_ms + 1, rate, r->n - 1)));
            }
            free(rate);
        } else if (!counter && r->type != EXPO_HISTOGRAM && r->type != EXPO_GAUGEHISTOGRAM &&
                   (r->type != EXPO_SUMMARY || r->suffix[0] == '\0')) {
            json_array_append_new(
                out, derived_one(r, r->name, r->labels, "value", points(r->t_ms, r->v, r->n)));
        }
    }
    free(done);
}

json_t *scrape_section(const scrape_t *s)
{
    if (s == NULL)
        return NULL;
    json_t *eps = json_array(), *series = json_array();
    for (size_t i = 0; i < s->n_ep; i++) {
        const endpoint_t *ep = &s->ep[i];
        json_array_append_new(
            eps,
            json_pack("{s:s, s:f, s:s, s:I, s:I, s:I, s:s?}", "url", ep->ps->at.url, "every_s",
                      (double)ep->ps->every_ns / 1e9, "format", ep->format, "scrapes",
                      (json_int_t)ep->ok, "failed", (json_int_t)ep->failed, "skipped",
                      (json_int_t)ep->skipped, "last_error", ep->failed ? ep->last_error : NULL));
    }
    json_t *all = json_array();
    derive(s, all);
    size_t n = json_array_size(all);
    for (size_t i = 0; i < n && i < SCRAPE_MAX_PLOTTED; i++)
        json_array_append(series, json_array_get(all, i));
    json_decref(all);
    return json_pack(
        "{s:o, s:s, s:I, s:I, s:I, s:o}", "endpoints", eps, "csv", SCRAPE_CSV, "series_kept",
        (json_int_t)s->n_series, "samples_dropped", (json_int_t)s->dropped, "derived_not_shown",
        (json_int_t)(n > SCRAPE_MAX_PLOTTED ? n - SCRAPE_MAX_PLOTTED : 0), "series", series);
}

/* ---- lifecycle ---------------------------------------------------------------------------- */

void scrape_engine_config(const plan_url_t *u, const plan_target_t *t, const eng_config_t *target,
                          char *origin, size_t cap, eng_config_t *out)
{
    bool https = u->relative ? t->https : u->https;
    const char *host = u->relative ? t->host : u->host;
    int port = u->relative ? t->port : u->port;
    snprintf(origin, cap, strchr(host ? host : "", ':') ? "%s://[%s]:%d" : "%s://%s:%d",
             https ? "https" : "http", host ? host : "", port);
    bool target_origin = u->relative || (t->host && u->https == t->https && u->port == t->port &&
                                         strcasecmp(u->host, t->host) == 0);
    *out = target_origin ? *target : (eng_config_t){.http = ENG_HTTP_1_1};
    out->base_url = origin;
    out->connections = 1;
    out->streams = 1;
    out->on_unreachable = NULL;
    out->unreachable_after = 0;
}

static int endpoint_init(struct scrape *s, uv_loop_t *loop, size_t i, const eng_config_t *target)
{
    endpoint_t *ep = &s->ep[i];
    const plan_scrape_t *ps = &s->plan->scrapes[i];
    *ep = (endpoint_t){.s = s, .index = (int)i, .ps = ps, .format = "none"};
    char origin[300];
    eng_config_t cfg;
    scrape_engine_config(&ps->at, &s->plan->target, target, origin, sizeof origin, &cfg);
    int rc = eng_new(loop, &cfg, s->o, &ep->eng);
    if (rc != 0)
        return rc;
    if (uv_timer_init(loop, &ep->timer) != 0)
        return SQ_ELIBUV;
    ep->timer.data = ep;
    ep->timer_on = true;
    return 0;
}

int scrape_new(uv_loop_t *loop, const plan_t *plan, const eng_config_t *target, out_t *o,
               scrape_t **out)
{
    *out = NULL;
    if (plan->n_scrapes == 0)
        return 0;
    struct scrape *s = calloc(1, sizeof *s);
    if (s == NULL || (s->ep = calloc(plan->n_scrapes, sizeof *s->ep)) == NULL) {
        free(s);
        return SQ_ENOMEM;
    }
    s->plan = plan;
    s->o = o;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < plan->n_scrapes; i++, s->n_ep++)
        rc = endpoint_init(s, loop, i, target);
    *out = s;
    return rc;
}

int scrape_start(scrape_t *s, const char *dir)
{
    if (s == NULL)
        return 0;
    char path[4200];
    snprintf(path, sizeof path, "%s/%s", dir, SCRAPE_CSV);
    if ((s->csv = fopen(path, "w")) == NULL) {
        out_error(s->o, "cannot write %s", path);
        return SQ_EIO;
    }
    fputs("unix_ms,endpoint,metric,labels,value\n", s->csv);
    for (size_t i = 0; i < s->n_ep; i++) {
        uint64_t every = (uint64_t)(s->plan->scrapes[i].every_ns / 1000000);
        if (uv_timer_start(&s->ep[i].timer, on_tick, 0, every) != 0)
            return SQ_ELIBUV;
    }
    return 0;
}

void scrape_stop(scrape_t *s)
{
    if (s == NULL)
        return;
    for (size_t i = 0; i < s->n_ep; i++) {
        endpoint_t *ep = &s->ep[i];
        ep->stopped = true;
        if (ep->timer_on) {
            uv_timer_stop(&ep->timer);
            uv_close((uv_handle_t *)&ep->timer, NULL);
            ep->timer_on = false;
        }
        eng_free(ep->eng);
        ep->eng = NULL;
    }
    if (s->csv) {
        fclose(s->csv);
        s->csv = NULL;
    }
}

void scrape_free(scrape_t *s)
{
    if (s == NULL)
        return;
    scrape_stop(s);
    for (size_t i = 0; i < s->n_series; i++)
        series_clear(&s->series[i]);
    free(s->series);
    free(s->slots);
    free(s->text);
    free(s->ep);
    free(s);
}

/* ---- once --------------------------------------------------------------------------------- */

static int gauges_collect(const struct scrape *s, scrape_gauges_t *out)
{
    out->g = calloc(s->n_series ? s->n_series : 1, sizeof *out->g);
    if (out->g == NULL)
        return SQ_ENOMEM;
    for (size_t i = 0; i < s->n_series; i++) {
        const series_t *r = &s->series[i];
        if (r->type != EXPO_GAUGE || r->n == 0)
            continue;
        size_t len = strlen(r->name) + strlen(r->labels) + 3;
        char *name = malloc(len);
        if (name == NULL)
            return SQ_ENOMEM;
        snprintf(name, len, r->labels[0] ? "%s{%s}" : "%s", r->name, r->labels);
        out->g[out->n++] = (scrape_gauge_t){r->endpoint, name, r->v[r->n - 1]};
    }
    return 0;
}

int scrape_once(const plan_t *plan, const eng_config_t *target, out_t *o, scrape_gauges_t *out)
{
    *out = (scrape_gauges_t){0};
    uv_loop_t loop;
    if (uv_loop_init(&loop) != 0)
        return SQ_ELIBUV;
    scrape_t *s = NULL;
    int rc = scrape_new(&loop, plan, target, o, &s);
    for (size_t i = 0; rc == 0 && s && i < s->n_ep; i++)
        on_tick(&s->ep[i].timer); /* what the run's first tick does, without the timer */
    for (bool busy = true; rc == 0 && busy;) {
        busy = false;
        for (size_t i = 0; s && i < s->n_ep; i++)
            busy |= s->ep[i].busy;
        if (busy)
            uv_run(&loop, UV_RUN_ONCE); /* each scrape ends by its own timeout at the latest */
    }
    if (rc == 0 && s) {
        out->n_ep = s->n_ep;
        out->failed = calloc(s->n_ep, sizeof *out->failed);
        rc = out->failed ? gauges_collect(s, out) : SQ_ENOMEM;
        for (size_t i = 0; out->failed && i < s->n_ep; i++) {
            out->failed[i] = s->ep[i].ok == 0;
            if (out->failed[i] && !out->error[0])
                snprintf(out->error, sizeof out->error, "%.280s: %s", s->ep[i].ps->at.url,
                         s->ep[i].last_error);
        }
    }
    scrape_stop(s);
    uv_run(&loop, UV_RUN_DEFAULT); /* the closes */
    scrape_free(s);
    if (uv_loop_close(&loop) != 0 && rc == 0)
        rc = SQ_ELIBUV;
    if (rc != 0)
        scrape_gauges_free(out);
    return rc;
}

void scrape_gauges_free(scrape_gauges_t *g)
{
    for (size_t i = 0; g && i < g->n; i++)
        free(g->g[i].series);
    if (g) {
        free(g->g);
        free(g->failed);
        *g = (scrape_gauges_t){0};
    }
}
