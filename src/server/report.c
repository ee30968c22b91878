/* The embedded target's own reports: GET /stats (JSON), GET /metrics (OpenMetrics 1.0 text)
 * and the fault counts shown by GET /admin/faults. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

static const char *const method_names[SRV_M_COUNT] = {"GET",   "HEAD",   "PUT",  "POST",
                                                      "PATCH", "DELETE", "OTHER"};

static json_t *fault_counts(const srv_fault_counts_t *c)
{
    return json_pack("{s:I,s:f,s:I,s:I,s:I,s:I,s:I,s:I}", "delayed", (json_int_t)c->delayed,
                     "delay_seconds_total", (double)c->delay_ns_total / 1e9, "failed",
                     (json_int_t)c->failed, "stalled", (json_int_t)c->stalled, "queued",
                     (json_int_t)c->queued, "rejected", (json_int_t)c->rejected, "drops",
                     (json_int_t)c->drops, "dropped_streams", (json_int_t)c->dropped_streams);
}

json_t *srv_report_faults(srv_server_t *sv)
{
    return json_pack("{s:o,s:o,s:i}", "faults", srv_faults_to_json(&sv->faults), "counts",
                     fault_counts(&sv->fc), "inflight", sv->inflight);
}

static json_t *requests_json(const srv_server_t *sv)
{
    json_t *all = json_object();
    for (int m = 0; all && m < SRV_M_COUNT; m++) {
        json_t *by = NULL;
        for (int st = 100; st < 600; st++) {
            if (!sv->requests[m][st])
                continue;
            char k[8];
            snprintf(k, sizeof(k), "%d", st);
            if (!by)
                by = json_object();
            json_object_set_new(by, k, json_integer((json_int_t)sv->requests[m][st]));
        }
        if (by)
            json_object_set_new(all, method_names[m], by);
    }
    return all;
}

static json_t *latency_json(const hist_t *h)
{
    return json_pack("{s:I,s:f,s:f,s:f,s:f,s:f}", "count", (json_int_t)hist_count(h), "p50_ms",
                     (double)hist_value_at(h, 50) / 1e6, "p90_ms",
                     (double)hist_value_at(h, 90) / 1e6, "p99_ms",
                     (double)hist_value_at(h, 99) / 1e6, "p999_ms",
                     (double)hist_value_at(h, 99.9) / 1e6, "max_ms", (double)hist_max(h) / 1e6);
}

int srv_report_stats(srv_server_t *sv, srv_buf_t *b)
{
    const srv_store_t *s = &sv->store;
    json_t *j = json_pack(
        "{s:I,s:I,s:{s:I,s:I,s:I,s:I,s:I,s:I},s:o,s:{s:I,s:I,s:I,s:I},"
        "s:{s:I,s:I,s:I,s:I,s:I},s:o,s:i,s:o}",
        "version", (json_int_t)s->version, "objects", (json_int_t)s->n_objects, "store", "creates",
        (json_int_t)s->creates, "replaces", (json_int_t)s->replaces, "patches",
        (json_int_t)s->patches, "deletes", (json_int_t)s->deletes, "conflicts",
        (json_int_t)s->conflicts, "expired", (json_int_t)s->expired, "requests", requests_json(sv),
        "rejected_input", "bad_json", (json_int_t)sv->bad_json, "bad_path",
        (json_int_t)sv->bad_path, "too_large", (json_int_t)sv->too_large, "bad_method",
        (json_int_t)sv->bad_method, "streams", "open", (json_int_t)sv->streams_open, "opened",
        (json_int_t)sv->streams_opened, "events_sent", (json_int_t)sv->events_sent, "slow_closed",
        (json_int_t)sv->slow_closed, "gone", (json_int_t)sv->streams_gone, "faults",
        fault_counts(&sv->fc), "inflight", sv->inflight, "latency", latency_json(sv->latency));
    char *t = j ? json_dumps(j, JSON_COMPACT) : NULL;
    json_decref(j);
    if (!t)
        return SQ_ENOMEM;
    int rc = srv_buf_str(b, t);
    free(t);
    return rc < 0 ? rc : srv_buf_str(b, "\n");
}

/* One metric family header (OpenMetrics 1.0: TYPE and HELP name the family, without _total). */
static int family(srv_buf_t *b, const char *name, const char *type, const char *help)
{
    return srv_buf_printf(b, "# TYPE squall_target_%s %s\n# HELP squall_target_%s %s\n", name, type,
                          name, help);
}

static int metrics_store(srv_server_t *sv, srv_buf_t *b)
{
    const srv_store_t *s = &sv->store;
    int rc = family(b, "objects", "gauge", "Objects in the store.");
    rc |= srv_buf_printf(b, "squall_target_objects %llu\n", (unsigned long long)s->n_objects);
    rc |= family(b, "store_version", "gauge", "The store's global version.");
    rc |= srv_buf_printf(b, "squall_target_store_version %llu\n", (unsigned long long)s->version);
    rc |= family(b, "writes", "counter", "Writes applied, by kind.");
    const char *ops[] = {"create", "replace", "patch", "delete", "conflict"};
    const uint64_t vals[] = {s->creates, s->replaces, s->patches, s->deletes, s->conflicts};
    for (int i = 0; i < 5; i++)
        rc |= srv_buf_printf(b, "squall_target_writes_total{op=\"%s\"} %llu\n", ops[i],
                             (unsigned long long)vals[i]);
    rc |= family(b, "open_streams", "gauge", "Watch streams open now.");
    rc |= srv_buf_printf(b, "squall_target_open_streams %llu\n",
                         (unsigned long long)sv->streams_open);
    rc |= family(b, "events_sent", "counter", "Watch events queued to streams.");
    rc |= srv_buf_printf(b, "squall_target_events_sent_total %llu\n",
                         (unsigned long long)sv->events_sent);
    return rc;
}

static int metrics_requests(srv_server_t *sv, srv_buf_t *b)
{
    int rc = family(b, "requests", "counter", "Requests under /v1/ answered, by method and code.");
    for (int m = 0; m < SRV_M_COUNT; m++)
        for (int st = 100; st < 600; st++)
            if (sv->requests[m][st])
                rc |= srv_buf_printf(b,
                                     "squall_target_requests_total{method=\"%s\",code=\"%d\"} "
                                     "%llu\n",
                                     method_names[m], st, (unsigned long long)sv->requests[m][st]);
    const srv_fault_counts_t *c = &sv->fc;
    rc |= family(b, "faults", "counter", "Fault injections, by fault.");
    const char *names[] = {"delayed", "failed", "stalled", "queued", "rejected", "dropped_streams"};
    const uint64_t vals[] = {c->delayed, c->failed,   c->stalled,
                             c->queued,  c->rejected, c->dropped_streams};
    for (int i = 0; i < 6; i++)
        rc |= srv_buf_printf(b, "squall_target_faults_total{fault=\"%s\"} %llu\n", names[i],
                             (unsigned long long)vals[i]);
    return rc;
}

/* The server-side latency histogram; bucket counts are cumulative over HDR buckets whose
 * highest value is at most the bound (within the histogram's 0.1 % resolution). */
static int metrics_latency(srv_server_t *sv, srv_buf_t *b)
{
    static const char *const le[] = {"0.0001", "0.00025", "0.0005", "0.001", "0.0025", "0.005",
                                     "0.01",   "0.025",   "0.05",   "0.1",   "0.25",   "0.5",
                                     "1",      "2.5",     "5",      "10"};
    const hist_t *h = sv->latency;
    int rc = family(b, "request_seconds", "histogram",
                    "Server-side time from receipt to last byte, /v1/ requests except watches.");
    hist_iter_t it;
    hist_iter_init(&it, h);
    bool more = hist_iter_next(&it);
    int64_t cum = 0;
    for (size_t i = 0; i < sizeof(le) / sizeof(le[0]); i++) {
        int64_t bound = (int64_t)(strtod(le[i], NULL) * 1e9 + 0.5);
        while (more && it.hi <= bound) {
            cum += it.count;
            more = hist_iter_next(&it);
        }
        rc |= srv_buf_printf(b, "squall_target_request_seconds_bucket{le=\"%s\"} %lld\n", le[i],
                             (long long)cum);
    }
    long long n = (long long)hist_count(h);
    rc |= srv_buf_printf(b, "squall_target_request_seconds_bucket{le=\"+Inf\"} %lld\n", n);
    rc |= srv_buf_printf(b, "squall_target_request_seconds_sum %.17g\n", sv->latency_sum_s);
    rc |= srv_buf_printf(b, "squall_target_request_seconds_count %lld\n", n);
    return rc;
}

int srv_report_metrics(srv_server_t *sv, srv_buf_t *b)
{
    int rc = metrics_store(sv, b);
    rc |= metrics_requests(sv, b);
    rc |= metrics_latency(sv, b);
    rc |= srv_buf_str(b, "# EOF\n");
    return rc < 0 ? SQ_ENOMEM : 0;
}
