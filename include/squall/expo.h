/* Metrics in text exposition formats, parsed from a buffer one sample at a time.
 *
 * Formats (enum expo_format), each by its published grammar:
 *   prometheus   the Prometheus text format 0.0.4 (prometheus.io, "Exposition formats",
 *                text-based format): lines of `name{label="value",...} value [timestamp]`,
 *                `# HELP name text` and `# TYPE name type`, other `#` lines are comments, blank
 *                lines and runs of spaces or tabs between tokens allowed, a trailing comma
 *                inside the braces allowed; the timestamp is integer milliseconds.
 *   openmetrics  OpenMetrics 1.0 (github.com/OpenObservability/OpenMetrics,
 *                specification/OpenMetrics.md, "ABNF"): single spaces, no blank lines, no other
 *                comments, `# UNIT`, more types, exemplars after ` # `, the timestamp in
 *                seconds (a real number), and the exposition must end with `# EOF`.
 * Both: label values and help text escape `\\`, `\n` and (label values) `\"`; any other
 * escape is an error; a number is a float in decimal notation or NaN, +Inf, -Inf.
 *
 * Families: a sample belongs to the family its TYPE line names when its name is the family's
 * name plus a suffix that family's type allows (`_bucket`, `_count`, `_sum` for histograms;
 * `_count`, `_sum` for summaries; `_total`, `_created` for OpenMetrics counters, ...); otherwise
 * its name is its family.
 *
 * What is refused, with "line L: what" in the caller's buffer (SQ_EPARSE): anything outside the
 * grammar, `__name__` or a label name twice in one sample, more than EXPO_MAX_LABELS labels,
 * a label value that is not UTF-8; for Prometheus also a second HELP or TYPE line for a family,
 * a TYPE line after its samples, an `le` or `quantile` that is not a number, a last line
 * without its line feed; for OpenMetrics also an exemplar on a family that has none, a UNIT that
 * is not the end of the family's name, text after `# EOF` and a missing `# EOF`.
 * A scraper reads what the server it stands beside reads: where Prometheus 2.42's own readers
 * take more than the documents allow, squall takes it too, and says so here. OpenMetrics: an
 * unknown escape is kept as written, a family may resume after another, a counter sample may
 * lack its suffix, HELP and TYPE may repeat or follow samples, a bucket may lack `le`.
 * Both: a bucket without `le` is taken. The corpus in tests/data/expo/ holds each of these
 * cases; promtool and a prometheus server judge it in the tests. The buffer is never modified.
 *
 * Glossary: "family" = the metric a HELP/TYPE line describes, with all its samples; "sample" =
 * one line of name, labels and value. */
#ifndef SQUALL_EXPO_H
#define SQUALL_EXPO_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#define EXPO_MAX_LABELS 64 /* labels in one sample; more is refused */

enum expo_format { EXPO_PROMETHEUS, EXPO_OPENMETRICS };

enum expo_type {
    EXPO_UNTYPED, /* no TYPE line; OpenMetrics "unknown", Prometheus "untyped" */
    EXPO_COUNTER,
    EXPO_GAUGE,
    EXPO_HISTOGRAM,
    EXPO_SUMMARY,
    EXPO_GAUGEHISTOGRAM, /* OpenMetrics only, like the three below */
    EXPO_STATESET,
    EXPO_INFO,
};

typedef struct {
    const char *name;
    const char *value; /* unescaped */
} expo_label_t;

/* One sample. Every pointer is valid only during the callback. */
typedef struct {
    const char *family;         /* the family's name */
    enum expo_type type;        /* the family's type */
    const char *name;           /* the sample's own name (family plus suffix) */
    const char *suffix;         /* the part of name after the family's ("" when none) */
    const expo_label_t *labels; /* in the order written */
    size_t n_labels;
    double value;
    bool has_time;
    int64_t time_ms; /* the sample's timestamp, when has_time (OpenMetrics seconds converted) */
    uint64_t line;   /* 1-based line number */
} expo_sample_t;

/* Called for each sample in order; a non-zero return stops the parse, which returns it. */
typedef int (*expo_sample_fn)(const expo_sample_t *s, void *ud);

/* Parses buf[0..len) in the given format, calling fn for every sample. Returns 0, fn's non-zero
 * return, or a negative SQ_E* code: SQ_EPARSE with "line L: what" in err (when err is not NULL),
 * SQ_ENOMEM. Samples before an error have been handed to fn. */
int expo_parse(const char *buf, size_t len, enum expo_format fmt, expo_sample_fn fn, void *ud,
               char *err, size_t errcap);

/* The format an HTTP Content-Type names: OpenMetrics for `application/openmetrics-text` (any
 * parameters), Prometheus otherwise (its `text/plain; version=0.0.4`, and any unknown type, as
 * scrapers do). */
enum expo_format expo_format_of(const char *content_type);

/* The label's value in s, or NULL. */
const char *expo_label(const expo_sample_t *s, const char *name);

/* "counter", "gauge", ... as the formats write them (untyped as "unknown"). */
const char *expo_type_name(enum expo_type t);

#endif
