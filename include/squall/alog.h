/* Recorded traffic logs, read one record at a time with bounded memory whatever the log's size.
 *
 * Formats (enum alog_format):
 *   common    Common Log Format, `%h %l %u %t "%r" %>s %b` (Apache httpd documentation, "Log
 *             Files"): time `[10/Oct/2000:13:55:36 -0700]` at 1 s resolution; `%b` is `-` when
 *             no body was sent; quoted fields escape `\"`, `\\` and `\xhh`.
 *   combined  Combined Log Format: Common plus `"%{Referer}i" "%{User-agent}i"`.
 *   ndjson    one JSON object per line; the fields are named by the caller (alog_ndjson_t), with
 *             dotted names reaching into nested objects (`request.method`).
 * Gzip-compressed input (any of the above) is read transparently: it is recognised by its magic
 * bytes (RFC 1952: 1f 8b), never by the file name; concatenated gzip members are read in turn.
 *
 * Bounded memory: a reader holds one read buffer (256 KiB) and one scratch area for the current
 * record, whatever the log's size. A line longer than ALOG_MAX_LINE bytes is malformed and is
 * skipped without being stored.
 *
 * Malformed lines are counted and skipped; the first ALOG_MAX_SAMPLES messages ("line N: what")
 * are kept. Blank lines are skipped and counted apart. alog_open() reads the first
 * ALOG_PROBE_LINES non-blank lines before returning a reader, and refuses the log (SQ_EPARSE)
 * when fewer than half of them parse in the expected format: the error names the format and
 * shows the first line that failed. So a log that is mostly garbage is refused before anything
 * uses it; one that goes bad later in the file is counted line by line.
 *
 * Auto-detection (ALOG_AUTO): every format is tried on the probed lines and the one that parses
 * the most wins (ties: combined, then common, then ndjson). NDJSON found this way uses the
 * default field names (see alog_ndjson_t) with the time unit inferred from each value.
 *
 * Untrusted input: what could reach a URL or a header is validated before a record is returned.
 * The method is an RFC 9110 §5.6.2 token (1 to 32 tchar); the path is the origin form (RFC 9112
 * §3.2.1: path and query) starting with '/', with no control bytes, no space and no DEL; an
 * absolute URI (`http://host/p?q`) keeps only its path and query; a fragment is dropped; bytes
 * of 0x80 and above are percent-encoded (RFC 3986 §2.1), as a client would send them. The client
 * identity is percent-encoded the same way (bytes up to 0x20, DEL and 0x80 and above), so it too
 * is safe in a URL. A line whose method or path fails is malformed.
 *
 * Glossary: "line" = bytes up to '\n' (a '\r' before it is dropped); "record" = a line that
 * parsed; "resolution" = the smallest time step the log can express (1 s for CLF). */
#ifndef SQUALL_ALOG_H
#define SQUALL_ALOG_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#define ALOG_MAX_LINE    65536 /* bytes; a longer line is malformed */
#define ALOG_MAX_SAMPLES 10    /* malformed-line messages kept */
#define ALOG_PROBE_LINES 1000  /* non-blank lines read by alog_open to detect and vet the log */

enum alog_format { ALOG_AUTO, ALOG_COMMON, ALOG_COMBINED, ALOG_NDJSON };

/* How an NDJSON time field is written. AUTO: a string is RFC 3339, a number (or a numeric string)
 * is unix time whose unit follows from its size (below 1e11: s, 1e14: ms, 1e17: us, else ns:
 * right for every date from 1973 to 5138). */
enum alog_time_kind {
    ALOG_TIME_AUTO,
    ALOG_TIME_RFC3339, /* 2000-10-10T20:55:36.125Z, 2000-10-10T13:55:36-07:00 (RFC 3339 §5.6) */
    ALOG_TIME_S,
    ALOG_TIME_MS,
    ALOG_TIME_US,
    ALOG_TIME_NS
};
enum alog_unit { ALOG_UNIT_S, ALOG_UNIT_MS, ALOG_UNIT_US, ALOG_UNIT_NS };

/* NDJSON field names; NULL leaves a field out. Defaults (alog_config_init): time "time", method
 * "method", path "path", status "status", duration "duration" (in seconds), client "client",
 * bytes "bytes", body "body". time, method and path are required in every line; the others are
 * optional. The path field may hold a path or a full URI. A body that is a JSON string is
 * unescaped; any other JSON value is kept as its JSON text. */
typedef struct {
    const char *time, *method, *path, *status, *duration, *client, *bytes, *body;
    enum alog_time_kind time_kind;
    enum alog_unit duration_unit;
} alog_ndjson_t;

typedef struct {
    enum alog_format format;
    alog_ndjson_t ndjson;
    /* The time field marks the end of the request (nginx writes $time_local and $msec when it
     * logs, after the response; Apache's %t is the time the request was received): the start
     * is then time - duration when the line has a duration. */
    bool time_at_end;
} alog_config_t;

void alog_config_init(alog_config_t *c);
/* Sets one option by name, as the command line and plans spell them: "format" (auto, common,
 * combined, ndjson), "field" (NAME=KEY with NAME one of time, method, path, status, duration,
 * client, bytes, body; an empty KEY leaves an optional field out), "time-unit" (auto, rfc3339,
 * s, ms, us, ns), "duration-unit" (s, ms, us, ns), "time-at" (start, end). Strings are not
 * copied until alog_open. Returns 0, or SQ_EINVAL with one line in err naming what was
 * expected. */
int alog_config_set(alog_config_t *c, const char *key, const char *value, char *err, size_t len);
const char *alog_format_name(enum alog_format f);

/* One request. Strings are NUL-terminated and valid until the next alog_next, alog_rewind or
 * alog_close on the same reader. */
typedef struct {
    int64_t t_ns;          /* request start, unix time in ns (see alog_config_t.time_at_end) */
    int64_t resolution_ns; /* the time's resolution: 1e9 for CLF; NDJSON from its digits */
    const char *method;    /* an RFC 9110 token, e.g. "GET" */
    const char *path;      /* origin form: path and query, starting with '/' */
    const char *client;    /* client identity, "" when absent (CLF: %u unless '-', else %h) */
    const char *body;      /* NULL when absent; body_len bytes (may contain NUL) */
    size_t body_len;
    int status;          /* 100..999, 0 when absent */
    int64_t duration_ns; /* -1 when absent */
    int64_t bytes;       /* response bytes, -1 when absent or '-' */
    uint64_t line;       /* 1-based line number */
} alog_record_t;

typedef struct {
    enum alog_format format; /* as detected or given */
    bool gzip;
    uint64_t lines;                        /* lines read so far, blank ones included */
    uint64_t records;                      /* lines returned as records */
    uint64_t blank;                        /* empty or all-space lines */
    uint64_t malformed;                    /* lines counted and skipped */
    size_t n_samples;                      /* <= ALOG_MAX_SAMPLES */
    const char *samples[ALOG_MAX_SAMPLES]; /* "line N: what (expected ..., got '...')" */
} alog_stats_t;

typedef struct alog alog_t;

/* Opens a log file (seekable: the probe reads its start, then rewinds). On success returns 0
 * and a reader to release with alog_close. On failure *out is NULL and err holds one line
 * naming the file: SQ_EIO (cannot open or read), SQ_EPARSE (mostly unparseable: names the
 * format expected and shows a sample line), SQ_EINVAL (bad configuration), SQ_ENOMEM. */
int alog_open(const char *path, const alog_config_t *cfg, alog_t **out, char *err, size_t len);
/* The same from an open descriptor, which the reader owns from then on (also on failure). name
 * is used in messages. */
int alog_open_fd(int fd, const char *name, const alog_config_t *cfg, alog_t **out, char *err,
                 size_t len);
/* The next record: 1 and *rec filled, 0 at the end of the log, SQ_EIO on a read or
 * decompression error (alog_error says what; the reader stays at the end). Malformed lines are
 * skipped and counted, never returned. */
int alog_next(alog_t *r, alog_record_t *rec);
/* Back to the first line, with the counts reset: for callers that read a log more than once.
 * 0 or SQ_EIO. */
int alog_rewind(alog_t *r);
const alog_stats_t *alog_stats(const alog_t *r);
const char *alog_error(const alog_t *r); /* the last SQ_EIO's message, "" if none */
void alog_close(alog_t *r);

/* Validators, also for callers that take paths and methods from elsewhere. */
bool alog_method_ok(const char *s, size_t n);
/* The value of query parameter `name` in the query q (the text after '?', or NULL): 1 and
 * [*v, *v + *vn) (empty for a bare name), or 0 when absent. */
int alog_query_param(const char *q, const char *name, const char **v, size_t *vn);
/* Whether the query q marks a request with parameter `name`: present, and not "0" or "false"
 * (a watch marker such as watch=1 or watch=true). */
bool alog_query_marks(const char *q, const char *name);

/* An RFC 3339 date-time (section 5.6: offset or Z required, fraction allowed) of n bytes as ns
 * since the Unix epoch; 0, or -1 when it is not one. The parser the logs' times use. */
int alog_rfc3339_ns(const char *s, size_t n, int64_t *ns);

#endif
