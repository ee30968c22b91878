/* A test driver for the engine API: sends N requests closed-loop (a fixed concurrency) or
 * open-loop (a rate, 1 ms tick, intended starts in ns) and prints one JSON object of figures.
 *
 * Usage: engine_probe --url BASE --path PATH [--requests N] [--concurrency C | --rate R]
 *        [--http 1.1|2] [--connections K] [--streams S] [--timeout-ms T] [--method M]
 *        [--body TEXT] [--header "Name: value"] [--ca F] [--cert F --key F] [--insecure]
 *        [--bearer-file F] [--keep-body] [--stream] [--max-s SECONDS]
 * --keep-body keeps each body (the first is printed as first_body); --stream counts on_data calls.
 * Stops itself after --max-s (default 60) and when the engine reports the target unreachable. */
#include <getopt.h>
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>

#include "squall/engine.h"
#include "squall/err.h"
#include "squall/hist.h"

struct probe {
    uv_loop_t loop;
    eng_t *eng;
    eng_req_t req;
    uv_timer_t tick, limit;
    int64_t n, submitted, completed, concurrency;
    double rate;
    int64_t t0, t_end, unreachable_ns;
    hist_t *service, *response, *lag, *curl_total, *first_byte;
    int64_t outcomes[ENG_OUT_COUNT], bytes_in, bytes_in_body, bytes_out;
    int64_t max_queue_wait_ns, max_busy_ns;
    int max_conns, first_curl_error, submit_errors;
    long last_status;
    bool done;
    int64_t kept_bytes, data_calls;
    char *first_body;
};

static void finish(struct probe *p)
{
    if (p->done)
        return;
    p->done = true;
    p->t_end = (int64_t)uv_hrtime();
    uv_timer_stop(&p->tick);
    uv_timer_stop(&p->limit);
    eng_stop(p->eng, 0);
}

static void submit_one(struct probe *p, int64_t intended)
{
    p->req.intended_ns = intended;
    int rc = eng_submit(p->eng, &p->req);
    if (rc) {
        p->submit_errors++;
        return;
    }
    p->submitted++;
}

static void on_done(void *user, const eng_result_t *r)
{
    struct probe *p = user;
    p->completed++;
    p->outcomes[r->outcome]++;
    p->bytes_in += r->bytes_in;
    p->bytes_in_body += r->bytes_in_body;
    p->bytes_out += r->bytes_out;
    p->last_status = r->status;
    if (r->body) {
        p->kept_bytes += (int64_t)r->body_len;
        if (!p->first_body)
            p->first_body = strndup(r->body, r->body_len);
    }
    if (r->curl_code && !p->first_curl_error)
        p->first_curl_error = r->curl_code;
    if (r->sent_ns) {
        hist_record(p->service, r->done_ns - r->sent_ns);
        hist_record(p->lag, r->sent_ns - r->intended_ns);
    }
    if (r->outcome != ENG_OUT_CANCELLED)
        hist_record(p->response, r->done_ns - r->intended_ns);
    hist_record(p->curl_total, r->total_us * 1000);
    hist_record(p->first_byte, r->starttransfer_us * 1000);
    eng_stats_t st;
    eng_stats(p->eng, &st, false);
    if (st.connections > p->max_conns)
        p->max_conns = st.connections;
    if (st.max_queue_wait_ns > p->max_queue_wait_ns)
        p->max_queue_wait_ns = st.max_queue_wait_ns;
    if (st.max_loop_busy_ns > p->max_busy_ns)
        p->max_busy_ns = st.max_loop_busy_ns;
    if (p->done)
        return;
    if (p->completed >= p->n)
        finish(p);
    else if (p->rate <= 0 && p->submitted < p->n)
        submit_one(p, 0);
}

/* Open loop: every request due by now is submitted with its own intended start. */
static void on_tick(uv_timer_t *t)
{
    struct probe *p = t->data;
    int64_t now = (int64_t)uv_hrtime();
    while (!p->done && p->submitted < p->n) {
        int64_t due = p->t0 + (int64_t)((double)p->submitted * 1e9 / p->rate);
        if (due > now)
            break;
        submit_one(p, due);
    }
}

static int on_data(void *user, const char *data, size_t len)
{
    struct probe *p = user;
    (void)data;
    (void)len;
    p->data_calls++;
    return 0;
}

static void on_limit(uv_timer_t *t)
{
    finish(t->data);
}

static void on_unreachable(void *user)
{
    struct probe *p = user;
    p->unreachable_ns = (int64_t)uv_hrtime() - p->t0;
    finish(p);
}

static json_t *pcts(const hist_t *h)
{
    return json_pack("{s:f,s:f,s:f,s:f,s:f,s:I}", "p50", hist_value_at(h, 50) / 1e6, "p90",
                     hist_value_at(h, 90) / 1e6, "p99", hist_value_at(h, 99) / 1e6, "max",
                     hist_max(h) / 1e6, "mean", hist_mean(h) / 1e6, "count",
                     (json_int_t)hist_count(h));
}

static void report(struct probe *p, int loop_close_rc)
{
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    double cpu_us = ru.ru_utime.tv_sec * 1e6 + ru.ru_utime.tv_usec + ru.ru_stime.tv_sec * 1e6 +
                    ru.ru_stime.tv_usec;
    double secs = (p->t_end - p->t0) / 1e9;
    json_t *oc = json_object();
    for (int i = 0; i < ENG_OUT_COUNT; i++)
        json_object_set_new(oc, eng_outcome_name(i), json_integer(p->outcomes[i]));
    json_t *o = json_pack(
        "{s:I,s:I,s:I,s:o,s:o,s:o,s:o,s:o,s:o,s:I,s:I,s:I,s:f,s:f,s:f,s:f,s:f,s:i,s:b,s:f,s:i,"
        "s:i,s:i,s:i}",
        "requests", (json_int_t)p->n, "submitted", (json_int_t)p->submitted, "completed",
        (json_int_t)p->completed, "outcomes", oc, "service_ms", pcts(p->service), "response_ms",
        pcts(p->response), "lag_ms", pcts(p->lag), "curl_total_ms", pcts(p->curl_total),
        "first_byte_ms", pcts(p->first_byte), "bytes_in", (json_int_t)p->bytes_in, "bytes_in_body",
        (json_int_t)p->bytes_in_body, "bytes_out", (json_int_t)p->bytes_out, "elapsed_s", secs,
        "rps", secs > 0 ? p->completed / secs : 0.0, "cpu_us_per_req",
        p->completed ? cpu_us / (double)p->completed : 0.0, "queue_wait_max_ms",
        p->max_queue_wait_ns / 1e6, "loop_busy_max_ms", p->max_busy_ns / 1e6, "max_connections",
        p->max_conns, "unreachable", p->unreachable_ns > 0, "unreachable_after_ms",
        p->unreachable_ns / 1e6, "first_curl_error", p->first_curl_error, "last_status",
        (int)p->last_status, "submit_errors", p->submit_errors, "loop_close", loop_close_rc);
    json_object_set_new(o, "kept_body_bytes", json_integer(p->kept_bytes));
    json_object_set_new(o, "data_calls", json_integer(p->data_calls));
    json_object_set_new(o, "first_body", p->first_body ? json_string(p->first_body) : json_null());
    char *s = json_dumps(o, JSON_COMPACT);
    printf("%s\n", s);
    free(s);
    json_decref(o);
}

static char *read_token(const char *path)
{
    FILE *f = fopen(path, "r");
    char buf[4096];
    if (!f || !fgets(buf, sizeof(buf), f)) {
        if (f)
            fclose(f);
        return NULL;
    }
    fclose(f);
    buf[strcspn(buf, "\r\n")] = '\0';
    return strdup(buf);
}

static int parse_args(int argc, char **argv, struct probe *p, eng_config_t *c, const char **hdr)
{
    static const struct option opts[] = {
        {"url", 1, 0, 'u'},         {"path", 1, 0, 'p'},    {"requests", 1, 0, 'n'},
        {"concurrency", 1, 0, 'c'}, {"rate", 1, 0, 'r'},    {"http", 1, 0, 'H'},
        {"connections", 1, 0, 'k'}, {"streams", 1, 0, 's'}, {"timeout-ms", 1, 0, 't'},
        {"method", 1, 0, 'm'},      {"body", 1, 0, 'b'},    {"header", 1, 0, 'h'},
        {"ca", 1, 0, 'A'},          {"cert", 1, 0, 'C'},    {"key", 1, 0, 'K'},
        {"keep-body", 0, 0, 'y'},   {"stream", 0, 0, 'z'},  {"insecure", 0, 0, 'i'},
        {"bearer-file", 1, 0, 'B'}, {"max-s", 1, 0, 'x'},   {0, 0, 0, 0}};
    int ch;
    while ((ch = getopt_long(argc, argv, "", opts, NULL)) != -1) {
        switch (ch) {
        case 'u':
            c->base_url = optarg;
            break;
        case 'p':
            p->req.path = optarg;
            break;
        case 'n':
            p->n = atoll(optarg);
            break;
        case 'c':
            p->concurrency = atoll(optarg);
            break;
        case 'r':
            p->rate = atof(optarg);
            break;
        case 'H':
            c->http = strcmp(optarg, "2") == 0 ? ENG_HTTP_2 : ENG_HTTP_1_1;
            break;
        case 'k':
            c->connections = atoi(optarg);
            break;
        case 's':
            c->streams = atoi(optarg);
            break;
        case 't':
            c->timeout_ms = atoll(optarg);
            break;
        case 'm':
            p->req.method = optarg;
            break;
        case 'b':
            p->req.body = optarg;
            p->req.body_len = strlen(optarg);
            break;
        case 'h':
            *hdr = optarg;
            break;
        case 'A':
            c->ca_file = optarg;
            break;
        case 'C':
            c->cert_file = optarg;
            break;
        case 'K':
            c->key_file = optarg;
            break;
        case 'y':
            p->req.keep_body = true;
            break;
        case 'z':
            p->req.on_data = on_data;
            break;
        case 'i':
            c->insecure = true;
            break;
        case 'B':
            c->bearer_token = read_token(optarg);
            break;
        case 'x':
            p->limit.data = (void *)(intptr_t)atoi(optarg);
            break;
        default:
            return -1;
        }
    }
    return c->base_url && p->req.path && p->n > 0 ? 0 : -1;
}

int main(int argc, char **argv)
{
    static struct probe p;
    eng_config_t cfg = {.connections = 1, .timeout_ms = 10000};
    const char *hdr = NULL;
    p.n = 100;
    p.concurrency = 1;
    if (parse_args(argc, argv, &p, &cfg, &hdr)) {
        fprintf(stderr, "usage: see the header of tests/integration/engine_probe.c\n");
        return 2;
    }
    int max_s = p.limit.data ? (int)(intptr_t)p.limit.data : 60;
    if (hdr) {
        cfg.headers = &hdr;
        cfg.n_headers = 1;
    }
    cfg.on_unreachable = on_unreachable;
    cfg.user = &p;
    p.req.on_done = on_done;
    p.req.user = &p;
    out_t *o = out_new_file(stdout, stderr);
    uv_loop_init(&p.loop);
    if (hist_new_ns(&p.service) || hist_new_ns(&p.response) || hist_new_ns(&p.lag) ||
        hist_new_ns(&p.curl_total) || hist_new_ns(&p.first_byte) ||
        eng_new(&p.loop, &cfg, o, &p.eng)) {
        fprintf(stderr, "engine_probe: setup failed\n");
        return 1;
    }
    uv_timer_init(&p.loop, &p.tick);
    uv_timer_init(&p.loop, &p.limit);
    p.tick.data = p.limit.data = &p;
    p.t0 = (int64_t)uv_hrtime();
    uv_timer_start(&p.limit, on_limit, (uint64_t)max_s * 1000, 0);
    if (p.rate > 0) {
        uv_timer_start(&p.tick, on_tick, 0, 1);
    } else {
        for (int64_t i = 0; i < p.concurrency && i < p.n; i++)
            submit_one(&p, 0);
    }
    uv_run(&p.loop, UV_RUN_DEFAULT);
    finish(&p);
    eng_free(p.eng);
    uv_close((uv_handle_t *)&p.tick, NULL);
    uv_close((uv_handle_t *)&p.limit, NULL);
    uv_run(&p.loop, UV_RUN_DEFAULT);
    int rc = uv_loop_close(&p.loop);
    report(&p, rc);
    hist_free(p.service);
    hist_free(p.response);
    hist_free(p.lag);
    hist_free(p.curl_total);
    hist_free(p.first_byte);
    free((char *)cfg.bearer_token);
    free(p.first_body);
    out_free(o);
    return rc == 0 ? 0 : 1;
}
