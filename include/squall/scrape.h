/* The target's own metrics, scraped while a run loads it.
 *
 * Concepts. Every `observe.metrics` endpoint of the plan is an *endpoint*: fetched at once when
 * the run starts and then every `every`, through an engine of its own (one connection, so a
 * scrape never waits behind the load and is never counted as load). An endpoint on the target's
 * origin (scheme, host and port) is fetched with the target's engine settings (TLS, token,
 * headers); any other with plain ones. The answer is parsed in the format its Content-Type names
 * (squall/expo.h); each sample whose metric name matches a `keep` pattern (all, without one)
 * is a point of its *series* (metric name plus labels), appended to DIR/metrics.csv as it
 * arrives. A scrape that fails (no answer, not 2xx, over SCRAPE_MAX_BYTES, malformed) is
 * counted with its reason and never stops the run.
 *
 * Derived series, for the report and results.json's "metrics" section: a counter's rate
 * between consecutive scrapes (a value lower than the one before is a reset, and the new value
 * is the increase, as Prometheus's rate() reads it); a histogram's p50, p90 and p99 over each
 * interval between scrapes from the increase of its cumulative buckets, interpolated linearly
 * within the bucket as Prometheus's histogram_quantile() does (prometheus.io, "Query
 * functions"); a gauge's (or untyped metric's) values as they are.
 *
 * Threading: none; everything runs on the run's loop (scrape_once: on a loop of its own). */
#ifndef SQUALL_SCRAPE_H
#define SQUALL_SCRAPE_H

#include <jansson.h>
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <uv.h>

#include "squall/engine.h"
#include "squall/out.h"
#include "squall/plan.h"

#define SCRAPE_MAX_BYTES  (16 * 1024 * 1024) /* an answer longer than this is a failed scrape */
#define SCRAPE_MAX_SERIES 2000               /* kept series per run; more are counted, dropped */
#define SCRAPE_CSV        "metrics.csv"

typedef struct scrape scrape_t;

/* Builds the endpoints of plan->scrapes (none: *out = NULL, returns 0). `target` is the plan
 * target's engine settings. SQ_ENOMEM, SQ_EINVAL (reported on o). */
int scrape_new(uv_loop_t *loop, const plan_t *plan, const eng_config_t *target, out_t *o,
               scrape_t **out);
/* Opens DIR/metrics.csv and starts every endpoint (its first scrape at once). SQ_EIO, SQ_ELIBUV.
 * NULL is allowed. */
int scrape_start(scrape_t *s, const char *dir);
/* No more scrapes: one in flight is cancelled, the engines and timers closed (the caller runs
 * the loop afterwards). NULL is allowed. */
void scrape_stop(scrape_t *s);
/* The "metrics" section of results.json (a new reference): per endpoint its figures, and the
 * derived series. NULL for NULL. */
json_t *scrape_section(const scrape_t *s);
void scrape_free(scrape_t *s);

/* The engine settings for a fetch of u beside the load: the target's own (TLS, token, headers,
 * HTTP version) when u is a path on the target or on the target's origin (scheme, host, port),
 * plain HTTP/1.1 otherwise; one connection; base_url is u's origin, written into origin. */
void scrape_engine_config(const plan_url_t *u, const plan_target_t *t, const eng_config_t *target,
                          char *origin, size_t cap, eng_config_t *out);

/* ---- once, outside a run: the target's gauges now ------------------------------------------ */

typedef struct {
    int endpoint;  /* index in plan->scrapes */
    char *series;  /* metric{labels}, or the metric alone without labels */
    double value;
} scrape_gauge_t;

typedef struct {
    scrape_gauge_t *g; /* every kept gauge series (TYPE gauge) of the endpoints that answered */
    size_t n;
    bool *failed;      /* per endpoint: its scrape failed (no answer, not 2xx, malformed...) */
    size_t n_ep;
    char error[600];   /* the first failure's reason, "" none */
} scrape_gauges_t;

/* Scrapes every endpoint of plan->scrapes once, on a short-lived loop of its own, exactly as a
 * run's scrapes (engine settings, `keep`, formats, SCRAPE_MAX_BYTES; timeout the endpoint's
 * `every`, at most 10 s), and returns in *out each kept gauge series' value (counters,
 * histograms, summaries and untyped metrics are left out). A failed endpoint is marked in
 * out->failed, not an error. SQ_ENOMEM, SQ_ELIBUV, SQ_EINVAL (on o). Free with
 * scrape_gauges_free. */
int scrape_once(const plan_t *plan, const eng_config_t *target, out_t *o, scrape_gauges_t *out);
void scrape_gauges_free(scrape_gauges_t *g);

/* ---- derived series: pure arithmetic, exposed for the tests -------------------------------- */

/* A counter's rate from t[i-1] to t[i] (ms) for i = 1..n-1 into rate[i-1]; resets as above. */
void scrape_rates(const int64_t *t_ms, const double *v, size_t n, double *rate);
/* The q-quantile (0 < q < 1) of the observations a histogram gained over an interval: bounds
 * ascending (the last may be +Inf), inc[k] the increase of bucket k's cumulative count. NAN when
 * nothing was observed; the highest finite bound when it falls in the +Inf bucket. */
double scrape_bucket_quantile(double q, const double *bounds, const double *inc, size_t n);

#endif
