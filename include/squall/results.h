/* The results of a run: what was measured, keyed by cell, and the results.json file.
 *
 * Concepts. A *cell* is one (phase, class, outcome) triple, e.g. ("steady", "read-gateway",
 * "2xx"); it holds counters and one histogram per *metric* (response time from the intended
 * start, service time from the actual start, schedule lag, connect, TLS, first byte), each
 * created on first use so unused metrics cost nothing. *Meta* says what ran where and when.
 * *Sections* are JSON objects other modules attach by name (e.g. "generator"); they survive a
 * read -> write round trip untouched. A merged file lists its *inputs* (the shards it came from).
 * Every histogram of one results_t has the same configuration (nanoseconds, HIST_NS_* unless
 * created with results_new_with).
 *
 * Ownership: results_t owns its cells, histograms, strings and sections. Cell and histogram
 * pointers stay valid until results_free; look them up once and keep them on hot paths.
 * Not thread-safe: one results_t per event loop. */
#ifndef SQUALL_RESULTS_H
#define SQUALL_RESULTS_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include <jansson.h>

#include "squall/hist.h"
#include "squall/out.h"
#include "squall/sync.h"

#define RESULTS_FORMAT  "squall-results"
#define RESULTS_VERSION 1
#define RESULTS_FILE    "results.json" /* the name inside a results directory */
/* The per-second series beside it (written by the series observer, combined by a merge): one
 * row per phase x class x second, and each row's response-time histogram in a file of its own,
 * so that a merge of shards gives every merged second the percentiles of all its samples.
 * Columns are only ever added at the end; readers find them by name. */
#define RESULTS_SERIES_FILE "series.csv"
#define RESULTS_SERIES_ROW_COLUMNS                                                                 \
    "second,phase,class,started,completed,rate_per_s,errors,p50_ms,p90_ms,p99_ms,max_ms,planned,"  \
    "unix_ms,p999_ms,marks"
/* Then the whole run's figures of the second (every phase and class), the same on every row of
 * the second (so never add them across a second's rows): watch streams open at its end,
 * dropped, reconnects sent and events received in it, the p99 of its stamped events'
 * propagation ("nan" when none was stamped), and the main engine's longest admission-queue wait
 * and peaks of in flight and queued. X(enum suffix, name, the name a merge writes): a merge
 * renames the figures it can only bound (the largest shard's p99 and the shards' peaks added
 * are upper bounds of the pooled figures). */
#define RESULTS_SERIES_RUN_MAP(X)                                                                  \
    X(WATCH_OPEN, "run_watch_open", "run_watch_open")                                              \
    X(WATCH_DROPPED, "run_watch_dropped", "run_watch_dropped")                                     \
    X(WATCH_RECONNECTS, "run_watch_reconnects", "run_watch_reconnects")                            \
    X(WATCH_EVENTS, "run_watch_events", "run_watch_events")                                        \
    X(WATCH_P99, "run_watch_propagation_p99_ms", "run_watch_propagation_p99_upper_ms")             \
    X(QUEUE_WAIT, "run_queue_wait_max_ms", "run_queue_wait_max_ms")                                \
    X(IN_FLIGHT, "run_in_flight_peak", "run_in_flight_peak_upper")                                 \
    X(QUEUED, "run_queued_peak", "run_queued_peak_upper")
/* The run's figures by number: RESULTS_RUN_WATCH_OPEN, ..., RESULTS_RUN__COUNT. */
#define RESULTS_SERIES_RUN_ENUM(e, name, merged) RESULTS_RUN_##e,
enum results_run_figure { RESULTS_SERIES_RUN_MAP(RESULTS_SERIES_RUN_ENUM) RESULTS_RUN__COUNT };
#define RESULTS_SERIES_RUN_HEADER(e, name, merged)     "," name
#define RESULTS_SERIES_MERGED_HEADER_(e, name, merged) "," merged
/* Last, series.csv's synchronisation gauge of a fleet action's row: its last closed window
 * (index, sends, R̄, Rayleigh p, peak-to-mean), empty in other rows and in a merge's series
 * (the merged gauge is results.json's "sync" section). */
#define RESULTS_SERIES_SYNC "sync_window,sync_n,sync_r_bar,sync_p,sync_peak_to_mean"
#define RESULTS_SERIES_HEADER                                                                      \
    RESULTS_SERIES_ROW_COLUMNS RESULTS_SERIES_RUN_MAP(RESULTS_SERIES_RUN_HEADER) "," RESULTS_SERIES_SYNC
#define RESULTS_SERIES_MERGED_HEADER                                                               \
    RESULTS_SERIES_ROW_COLUMNS RESULTS_SERIES_RUN_MAP(RESULTS_SERIES_MERGED_HEADER_)                \
    "," RESULTS_SERIES_SYNC
#define RESULTS_SERIES_HIST_FILE   "series-hist.csv"
#define RESULTS_SERIES_HIST_HEADER "second,phase,class,unix_ms,response"

/* Metrics, in file order. X(enum suffix, name in results.json). Add new ones at the end. */
#define RESULTS_METRIC_MAP(X)                                                                      \
    X(RESPONSE, "response")     /* intended start -> last byte (no coordinated omission) */        \
    X(SERVICE, "service")       /* actual start -> last byte */                                    \
    X(LAG, "lag")               /* actual start - intended start */                                \
    X(CONNECT, "connect")       /* TCP connect, new connections only */                            \
    X(TLS, "tls")               /* TLS handshake, new connections only */                          \
    X(FIRST_BYTE, "first_byte") /* actual start -> first response byte */                          \
    X(OPEN, "open")             /* watch: intended open -> first body byte */                      \
    X(PROPAGATION, "propagation") /* watch: writer's stamp -> event seen (CLOCK_REALTIME) */

enum results_metric {
#define RESULTS_METRIC_ENUM(id, name) RESULTS_M_##id,
    RESULTS_METRIC_MAP(RESULTS_METRIC_ENUM)
#undef RESULTS_METRIC_ENUM
        RESULTS_M__COUNT
};

/* The name of a metric ("response"), or NULL when out of range. */
const char *results_metric_name(enum results_metric m);
/* The metric named `name`, or SQ_ENOTFOUND. */
int results_metric_from_name(const char *name);

typedef struct results results_t;
typedef struct results_cell results_cell_t;

/* A cell's counters: a small public value the engine updates in place. */
#define RESULTS_STATUS_MAX 8 /* exact status codes kept per cell; more are counted as other */
typedef struct {
    int64_t count;     /* finished requests (or events, for watch cells) */
    int64_t bytes_in;  /* response bytes received, body and headers */
    int64_t bytes_out; /* request bytes sent */
    struct {
        int code; /* 0: free slot */
        int64_t n;
    } status[RESULTS_STATUS_MAX]; /* answers per exact HTTP status code (429 vs 503) */
    int64_t status_other;         /* answers whose code found no free slot */
} results_counters_t;

/* Counts n answers with HTTP status code (100..999) into k. */
void results_status_add(results_counters_t *k, int code, int64_t n);

/* What ran, where and when. Strings are owned by the results_t; NULL when unknown. */
typedef struct {
    const char *plan_path;
    const char *plan_sha256; /* 64 lowercase hex digits of the plan file's bytes */
    int64_t start_unix_ms;   /* wall-clock start (written as RFC 3339 UTC with ms); 0 unknown */
    int64_t duration_ns;
    const char *squall_version; /* SQUALL_VERSION of the binary that wrote it */
    const char *host;           /* gethostname() at results_new */
    int shard_index;            /* 1..shard_count; 0 for a merged file (see inputs) */
    int shard_count;
    bool interrupted;
    const char *stop_reason; /* why the run ended early ("brake: ...", "signal: SIGINT") */
    const char *target_url;  /* user info ("user:secret@") removed */
} results_meta_t;

/* A new, empty results with histograms of the squall range (HIST_NS_*); host, version and
 * shard 1/1 filled in. SQ_ENOMEM on failure. */
int results_new(results_t **out);
/* The same with another histogram configuration (SQ_EINVAL if hist_new would refuse it). */
int results_new_with(int64_t lowest, int64_t highest, int digits, results_t **out);
void results_free(results_t *r);

const results_meta_t *results_meta(const results_t *r);
/* The histogram configuration every histogram of r has. */
void results_hist_config(const results_t *r, int64_t *lowest, int64_t *highest, int *digits);

/* Records the plan's path and the SHA-256 of its bytes: of data[0..len) when data is given,
 * else of the file at path (SQ_EIO, with a line on o, if it cannot be read). */
int results_set_plan(results_t *r, const char *path, const void *data, size_t len, out_t *o);
/* Stores the URL without its user info. */
int results_set_target(results_t *r, const char *url);
void results_set_start(results_t *r, int64_t unix_ms);
void results_set_duration(results_t *r, int64_t ns);
/* SQ_EINVAL unless 1 <= index <= count. */
int results_set_shard(results_t *r, int index, int count);
/* Marks the run as ended early; reason is copied (may be NULL). */
int results_set_stopped(results_t *r, const char *reason);

/* The cell for (phase, class, outcome), created empty on first use; NULL only when out of
 * memory. Strings are copied. */
results_cell_t *results_cell(results_t *r, const char *phase, const char *class_name,
                             const char *outcome);
/* One finished request as a cell records it. Times are ns on one monotonic clock. */
typedef struct {
    int64_t intended_ns; /* the schedule's start: response time counts from here */
    int64_t sent_ns;     /* when it went on its connection; 0 = never sent (no service time) */
    int64_t done_ns;     /* when it finished; 0 = count it without any time */
    bool with_lag;       /* also record sent - intended as the lag metric */
    int64_t connect_ns, tls_ns, first_byte_ns; /* > 0 when measured (a new connection) */
    int64_t bytes_in, bytes_out;
    int status; /* the HTTP status code answered; 0 = none */
} results_sample_t;

/* Records one completion into c (NULL: nothing): count and bytes always; then, when done_ns is
 * set, response = done - intended, service = done - sent and (with_lag) lag = sent - intended
 * when sent_ns is set, and connect, TLS and first byte when measured. Negative spans count as
 * 0. Histograms are created on first use; out of memory loses the sample, never the count. */
void results_record(results_cell_t *c, const results_sample_t *s);

/* The cell if it exists, else NULL. */
results_cell_t *results_cell_find(const results_t *r, const char *phase, const char *class_name,
                                  const char *outcome);
/* The histogram of one metric, created empty on first use; NULL when out of memory. */
hist_t *results_cell_hist(results_cell_t *c, enum results_metric m);
/* The histogram if the metric was ever used, else NULL. */
const hist_t *results_cell_hist_find(const results_cell_t *c, enum results_metric m);
results_counters_t *results_cell_counters(results_cell_t *c);
const char *results_cell_phase(const results_cell_t *c);
const char *results_cell_class(const results_cell_t *c);
const char *results_cell_outcome(const results_cell_t *c);

/* Cells in creation order (a read file keeps the file's order): index 0 .. count-1. */
size_t results_cell_count(const results_t *r);
results_cell_t *results_cell_at(const results_t *r, size_t i);

/* Attaches a JSON object under `name` (not one of the file's own keys), replacing any earlier
 * one. Steals the caller's reference to value, also on error (like json_object_set_new).
 * SQ_EINVAL for a bad name or a value that is not an object. */
int results_set_section(results_t *r, const char *name, json_t *value);
/* The section named `name` (a borrowed reference), or NULL. */
json_t *results_section(const results_t *r, const char *name);
/* All sections as one object {name: value} (borrowed). */
json_t *results_sections(const results_t *r);

/* Merged files: their inputs, one JSON object per shard (see DEVELOPERS.md for the fields). */
size_t results_input_count(const results_t *r);
json_t *results_inputs(const results_t *r); /* borrowed array */

/* Adds src to dst: counters and histograms of every cell (cells matched by their three keys,
 * new ones appended), src's meta as one more input named `name` (src's own inputs instead, if
 * src is itself a merge), start = earliest, duration to the latest end, interrupted if any
 * input was. Sections: the first merge adopts src's; later ones keep only sections equal in
 * both (every input's sections also stay in its input entry).
 * dst must be fresh from results_new or a previous merge target: SQ_EINVAL otherwise.
 * SQ_EMISMATCH (with a line on o naming `name` and both configurations) when the histogram
 * configurations differ; dst is then unchanged. SQ_ERANGE if a bucket would exceed UINT32_MAX
 * (4.3 billion samples within 0.1 % of each other): dst is then partly merged; discard it. */
int results_merge(results_t *dst, const results_t *src, const char *name, out_t *o);

/* After the last results_merge: combines the sections every input keeps in its entry, as one
 * run with all their requests would have them (DEVELOPERS.md, "Merging"):
 *   judgement, brakes  must be equal in every input (else SQ_EMISMATCH, a line on o naming the
 *                      input that differs): a merged run is judged once
 *   phases             each phase from the earliest start to the latest end; elapsed_s is the
 *                      union of the inputs' intervals on the wall clock
 *   generator          bound seconds by wall-clock second (bound when any input was); peaks
 *                      the largest; counts added
 *   watches, lifecycle counts added (the churn band: sums of the inputs' minima and maxima)
 *   storms             ticks combined per tick instant on the wall clock
 *   sync               each fleet action's windows combined by index: their sums added, the
 *                      gauge recomputed from them (results_sync.c)
 * and drops "objectives" and "run", which a judge writes for the merge (judge_results). Other
 * sections stay only when equal in every input. SQ_ENOMEM. */
int results_merge_finish(results_t *dst, out_t *o);

/* One window of a fleet action's "sync" section (README, "Fleets and storms"): index, start_s
 * (seconds from the run's start), n, r_bar, z, p, peak_to_mean, partial and the sums a merge adds
 * (cos_sum, sin_sum, bins), from the window's running sums. A window without sends has r_bar, z,
 * p and peak_to_mean null: no gauge, never an R-bar of 0 that would read "evenly spread". Written
 * by the run's observer (src/observe/gauge.c) and by a merge (results_sync.c). NULL: no memory. */
json_t *results_sync_window_json(int64_t index, double start_s, const sync_acc_t *acc,
                                 bool partial);

/* The per-second series of n results directories (RESULTS_SERIES_FILE and, where present,
 * RESULTS_SERIES_HIST_FILE) combined into dir: rows of the same wall-clock second (unix_ms,
 * to the nearest second of merged's start) and (phase, class) add their counts, rates and
 * planned starts; their percentiles come from the merged histograms, or are written as "nan"
 * when a row of several inputs has no histogram. The run's figures of a second
 * (RESULTS_SERIES_RUN_MAP) are combined over the inputs: counts and open streams added, the
 * longest queue wait the largest, the propagation p99 and the peaks in flight and queued as upper
 * bounds under their _upper names (results_series.c says how; a merge of one input that has the
 * exact names keeps them). *written is false (nothing written,
 * a warning on o) when an input has no series.csv. SQ_EIO, SQ_EPARSE (a line on o naming the file),
 * SQ_ENOMEM. */
int results_series_merge(const char *const *dirs, size_t n, const results_t *merged,
                         const char *dir, bool *written, out_t *o);

/* True when meta, cells (counters and every histogram, hist_equal) and sections are equal. */
bool results_equal(const results_t *a, const results_t *b);

/* Writes results.json to `path` atomically (a temporary file in the same directory, fsync,
 * rename). SQ_EIO with a line on o naming the file and the reason. */
int results_write(const results_t *r, const char *path, out_t *o);
/* Creates directory `dir` if needed and writes dir/results.json. */
int results_write_dir(const results_t *r, const char *dir, out_t *o);
/* Reads a results.json file, or dir/results.json when path is a directory. On error one line
 * on o names the file and what is wrong; returns SQ_EIO (cannot read), SQ_EPARSE (malformed
 * JSON or contents, with line:column where known) or SQ_EVERSION (another format or version,
 * naming the one found and the one supported). */
int results_read(const char *path, results_t **out, out_t *o);

#endif
