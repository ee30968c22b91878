/* Replay: the requests of a recorded access log sent again at their recorded instants (scaled by
 * `speed`), in `copies` copies. Recorded watches (a marker in the query and a duration of at
 * least watch-min) are opened at their instants as watch streams and closed after their
 * recorded duration, also scaled (src/source/watches_once.h). The log is read twice: once when the
 * source is built (counts per second and class: the model that check, the estimate and the live
 * line ask), then streamed while the phase runs, through a read-ahead bounded in entries, so memory
 * does not grow with the log. Each request's intended start is its recorded time, so response time
 * counts from it (no coordinated omission). */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "replay_int.h"
#include "src_int.h"
#include "watches_once.h"
#include "squall/err.h"

#define RP_READ_AHEAD 16384               /* requests held ahead of their start at most */
#define RP_HORIZON_NS INT64_C(1000000000) /* read at most this far past the earliest held */
#define RP_SEC        INT64_C(1000000000)

/* A request read ahead, waiting for its start. */
typedef struct {
    int64_t t;    /* intended, ns from the phase's t = 0 */
    uint64_t seq; /* read order: equal times keep the log's order */
    int cls, copy;
    int64_t hold; /* a watch stream's scaled duration, else 0 */
    char method[33];
    char *path;
} rp_ent_t;

typedef struct {
    src_ctx_t ctx;
    const plan_phase_t *pp;
    src_t *me;
    rp_rules_t rules;
    alog_config_t cfg;
    int n_cls;
    /* First pass: requests to send per second of the log (absolute second sec0 + i) and class. */
    int64_t t_min, t_max, origin, win_lo, win_hi;
    int64_t sec0;
    size_t n_secs;
    uint32_t *counts; /* [n_secs][n_cls] */
    uint32_t *tick;   /* [n_secs]: sum over classes */
    bool coarse;      /* times of 1 s resolution: spread over their second */
    uint64_t verdicts[RP_N_VERDICTS], records, lines, malformed;
    uint64_t n_watches; /* watch streams in the log (any window), for the engine's size */
    watches_t *watches; /* the recorded watches' streams (NULL when the log has none) */
    const char *format;
    json_t *samples;
    /* Second pass. */
    alog_t *log;
    bool eof;
    rp_ent_t *heap;
    size_t n_heap;
    uint64_t seq;
    int64_t last_t;
    uint32_t *seen; /* [n_secs]: requests of the second placed so far */
    sched_spread_t spread;
    int64_t spread_sec;
    uint64_t issued, bad_path, unsent, watched, watch_failed;
} replay_t;

static bool rp_used_by(const plan_t *plan, const plan_phase_t *pp)
{
    (void)plan;
    return pp->replay.on;
}

static void heap_clear(replay_t *s)
{
    for (size_t i = 0; i < s->n_heap; i++)
        free(s->heap[i].path);
    s->unsent += s->n_heap;
    s->n_heap = 0;
}

static void rp_free(void *self)
{
    replay_t *s = self;
    heap_clear(s);
    alog_close(s->log);
    watches_once_free(s->watches);
    rp_rules_close(&s->rules);
    json_decref(s->samples);
    free(s->heap);
    free(s->counts);
    free(s->tick);
    free(s->seen);
    free(s);
}

/* ---- reading the log --------------------------------------------------------------------- */

static int open_log(replay_t *s, alog_t **out)
{
    char err[512];
    int rc = alog_open(s->pp->replay.log, &s->cfg, out, err, sizeof err);
    if (rc)
        out_raw(s->ctx.o, OUT_ERROR, "%s:%d:%d: error: phase '%s': replay: %s", s->pp->pos.file,
                s->pp->pos.line, s->pp->pos.col, s->pp->name, err);
    return rc;
}

static int config(replay_t *s)
{
    alog_config_init(&s->cfg);
    for (size_t i = 0; i < s->pp->replay.n_log_opts; i++) {
        const plan_kv_t *kv = &s->pp->replay.log_opts[i];
        char err[256];
        if (alog_config_set(&s->cfg, kv->name, kv->value, err, sizeof err)) {
            out_raw(s->ctx.o, OUT_ERROR, "%s:%d:%d: error: replay: %s", kv->pos.file, kv->pos.line,
                    kv->pos.col, err);
            return SQ_EINVAL;
        }
    }
    return 0;
}

static int64_t floor_sec(int64_t t)
{
    return t >= 0 ? t / RP_SEC : -((-t + RP_SEC - 1) / RP_SEC);
}

/* Makes room for absolute second sec in the per-second counts (the log may step back). */
static int count_slot(replay_t *s, int64_t sec, size_t *at)
{
    if (s->n_secs == 0)
        s->sec0 = sec;
    int64_t lo = sec < s->sec0 ? sec : s->sec0;
    int64_t hi = sec >= s->sec0 + (int64_t)s->n_secs ? sec + 1 : s->sec0 + (int64_t)s->n_secs;
    if (hi - lo > INT64_C(10) * 366 * 86400)
        return SQ_ELIMIT; /* over ten years of log: a bad clock, not a recording */
    if (lo < s->sec0 || hi > s->sec0 + (int64_t)s->n_secs) {
        size_t n = (size_t)(hi - lo), shift = (size_t)(s->sec0 - lo);
        uint32_t *c = calloc(n * (size_t)s->n_cls, sizeof(*c)), *t = calloc(n, sizeof(*t));
        if (!c || !t) {
            free(c);
            free(t);
            return SQ_ENOMEM;
        }
        if (s->n_secs) {
            memcpy(c + shift * (size_t)s->n_cls, s->counts,
                   s->n_secs * (size_t)s->n_cls * sizeof(*c));
            memcpy(t + shift, s->tick, s->n_secs * sizeof(*t));
        }
        free(s->counts);
        free(s->tick);
        s->counts = c;
        s->tick = t;
        s->sec0 = lo;
        s->n_secs = n;
    }
    *at = (size_t)(sec - s->sec0);
    return 0;
}

/* Whether a record's client is this shard's: a client's requests all go to one shard, in their
 * recorded order (records without a client identity all go to the shard of ""). */
static bool mine(const replay_t *s, const alog_record_t *rec)
{
    sched_shard_t sh = s->ctx.shard;
    return !sched_shard_split(sh) ||
           sched_shard_hash(rec->client ? rec->client : "") % (uint64_t)sh.count ==
               (uint64_t)(sh.index - 1);
}

/* The whole log once: counts per second and class of what will be sent, before the window. */
static int first_pass(replay_t *s)
{
    alog_t *log;
    int rc = open_log(s, &log);
    if (rc)
        return rc;
    alog_record_t rec;
    s->t_min = INT64_MAX;
    s->t_max = INT64_MIN;
    s->coarse = true;
    while (rc == 0 && (rc = alog_next(log, &rec)) == 1) {
        rc = 0;
        s->t_min = rec.t_ns < s->t_min ? rec.t_ns : s->t_min;
        s->t_max = rec.t_ns > s->t_max ? rec.t_ns : s->t_max;
        s->coarse &= rec.resolution_ns >= RP_SEC;
        int cls;
        enum rp_verdict v = rp_rules_judge(&s->rules, &rec, &cls);
        bool own = mine(s, &rec);
        s->n_watches += v == RP_WATCH && own;
        if (v != RP_SEND)
            continue;
        size_t at;
        rc = count_slot(s, floor_sec(rec.t_ns), &at);
        /* A second's requests are spread over it by their place among all of them (as the
         * single run places them); the counts the model gives are the shard's own. */
        if (rc == 0) {
            s->counts[at * (size_t)s->n_cls + (size_t)cls] += own;
            s->tick[at]++;
        }
    }
    if (rc < 0)
        out_raw(s->ctx.o, OUT_ERROR, "%s:%d:%d: error: phase '%s': replay: %s: %s", s->pp->pos.file,
                s->pp->pos.line, s->pp->pos.col, s->pp->name, s->pp->replay.log,
                rc == SQ_EIO ? alog_error(log) : sq_strerror(rc));
    const alog_stats_t *st = alog_stats(log);
    s->format = alog_format_name(st->format);
    s->malformed = st->malformed;
    s->samples = json_array();
    for (size_t i = 0; i < st->n_samples; i++)
        json_array_append_new(s->samples, json_string(st->samples[i]));
    alog_close(log);
    return rc < 0 ? rc : 0;
}

/* The window (whole seconds from the log's first second) and the origin of time: the first
 * request, or the window's start when `from` cuts the log. */
static void window(replay_t *s)
{
    if (s->t_min == INT64_MAX)
        s->t_min = 0;
    int64_t first = floor_sec(s->t_min) * RP_SEC;
    s->win_lo = first + s->pp->replay.from_ns;
    s->win_hi = s->pp->replay.has_to ? first + s->pp->replay.to_ns : INT64_MAX;
    s->origin = s->pp->replay.from_ns ? s->win_lo : s->t_min;
    for (size_t i = 0; i < s->n_secs; i++) {
        int64_t a = (s->sec0 + (int64_t)i) * RP_SEC;
        if (a >= s->win_lo && a < s->win_hi)
            continue;
        memset(s->counts + i * (size_t)s->n_cls, 0, (size_t)s->n_cls * sizeof(*s->counts));
        s->tick[i] = 0;
    }
}

static int rp_new(const src_ctx_t *ctx, void **self)
{
    replay_t *s = calloc(1, sizeof(*s));
    if (!(*self = s))
        return SQ_ENOMEM;
    s->ctx = *ctx;
    s->pp = src_phase(ctx);
    s->n_cls = (int)ctx->plan->n_reqs;
    int rc = rp_rules_init(&s->rules, ctx->plan, s->pp, ctx->o);
    if (rc == 0)
        rc = config(s);
    if (rc == 0)
        rc = first_pass(s);
    if (rc == 0)
        window(s);
    if (rc == 0 && s->n_watches) {
        uint64_t n = s->n_watches * (uint64_t)s->pp->replay.copies;
        rc = watches_once_new(ctx, n > INT32_MAX ? INT32_MAX : (int)n, &s->watches);
    }
    return rc;
}

/* ---- the read-ahead: a min-heap on (t, seq) ------------------------------------------------- */

static bool before(const rp_ent_t *a, const rp_ent_t *b)
{
    return a->t < b->t || (a->t == b->t && a->seq < b->seq);
}

static void heap_push(replay_t *s, rp_ent_t e)
{
    size_t i = s->n_heap++;
    while (i > 0 && before(&e, &s->heap[(i - 1) / 2])) {
        s->heap[i] = s->heap[(i - 1) / 2];
        i = (i - 1) / 2;
    }
    s->heap[i] = e;
}

static rp_ent_t heap_pop(replay_t *s)
{
    rp_ent_t top = s->heap[0], last = s->heap[--s->n_heap];
    size_t i = 0, n = s->n_heap;
    for (;;) {
        size_t c = 2 * i + 1;
        if (c >= n)
            break;
        if (c + 1 < n && before(&s->heap[c + 1], &s->heap[c]))
            c++;
        if (!before(&s->heap[c], &last))
            break;
        s->heap[i] = s->heap[c];
        i = c;
    }
    if (n)
        s->heap[i] = last;
    return top;
}

/* A record's time from the phase's t = 0: a 1 s time spread over its second (not a watch's,
 * which the first pass did not count). */
static int64_t rel_time(replay_t *s, const alog_record_t *rec, bool spread)
{
    int64_t t = rec->t_ns;
    int64_t sec = floor_sec(t);
    /* A second the first pass did not count (the file grew in between) is sent as recorded. */
    if (spread && s->coarse && sec >= s->sec0 && sec < s->sec0 + (int64_t)s->n_secs) {
        size_t at = (size_t)(sec - s->sec0);
        if (sec != s->spread_sec) {
            sched_spread_tick(&s->spread, RP_SEC, s->tick[at]);
            s->spread.k = s->seen[at];
            s->spread_sec = sec;
        }
        s->seen[at]++;
        t = sec * RP_SEC + sched_spread_next(&s->spread);
    }
    return (int64_t)((double)(t - s->origin) / s->pp->replay.speed);
}

/* One record into the read-ahead, once per copy. */
static int take(replay_t *s, const alog_record_t *rec)
{
    int cls;
    enum rp_verdict v = rec->t_ns < s->win_lo || rec->t_ns >= s->win_hi
                            ? RP_FILTERED
                            : rp_rules_judge(&s->rules, rec, &cls);
    bool own = mine(s, rec);
    s->verdicts[(v == RP_SEND || v == RP_WATCH) && !own ? RP_OTHER_SHARD : v]++;
    if (v != RP_SEND && v != RP_WATCH)
        return 0;
    int64_t t = rel_time(s, rec, v == RP_SEND);
    if (!own)
        return 0;
    int64_t hold = 0; /* a watch's, at least 1 ns: an entry with a hold opens a stream */
    if (v == RP_WATCH) {
        hold = (int64_t)((double)rec->duration_ns / s->pp->replay.speed);
        hold = hold > 0 ? hold : 1;
    }
    s->last_t = t;
    for (int c = 0; c < s->pp->replay.copies; c++) {
        char path[8192];
        size_t n = rp_rules_path(&s->rules, rec->path, c, path, sizeof path);
        if (n == 0) {
            s->bad_path++;
            continue;
        }
        rp_ent_t e = {.t = t + c * s->pp->replay.offset_ns,
                      .seq = s->seq++,
                      .cls = cls,
                      .copy = c,
                      .hold = hold};
        const plan_req_t *pr = &s->ctx.plan->reqs[cls];
        bool read = !strcmp(rec->method, "GET") || !strcmp(rec->method, "HEAD");
        snprintf(e.method, sizeof e.method, "%s",
                 pr->kind == PLAN_WRITE && read ? pr->write.method : rec->method);
        if (!(e.path = strdup(path)))
            return SQ_ENOMEM;
        heap_push(s, e);
    }
    return 0;
}

/* Reads until the read-ahead is full, or reaches a second past its earliest entry, or the log
 * ends. */
static int fill(replay_t *s)
{
    alog_record_t rec;
    while (!s->eof && s->n_heap + (size_t)s->pp->replay.copies <= RP_READ_AHEAD) {
        if (s->n_heap > 0 && s->last_t > s->heap[0].t + RP_HORIZON_NS)
            break;
        int rc = alog_next(s->log, &rec);
        if (rc == 0) {
            s->eof = true;
        } else if (rc < 0) {
            out_raw(s->ctx.o, OUT_ERROR, "replay: %s: %s", s->pp->replay.log, alog_error(s->log));
            s->eof = true;
            return rc;
        } else if ((rc = take(s, &rec))) {
            return rc;
        }
    }
    return 0;
}

/* ---- the source --------------------------------------------------------------------------- */

static int rp_start(void *self, src_t *me)
{
    replay_t *s = self;
    s->me = me;
    s->spread_sec = INT64_MIN;
    sched_spread_init(&s->spread, s->pp->replay.spread == PLAN_ARRIVALS_POISSON,
                      src_seed(&s->ctx, SRC_STREAM_ARRIVALS));
    s->heap = malloc(RP_READ_AHEAD * sizeof(*s->heap));
    s->seen = calloc(s->n_secs ? s->n_secs : 1, sizeof(*s->seen));
    if (!s->heap || !s->seen)
        return SQ_ENOMEM;
    int rc = s->watches ? watches_once_start(s->watches) : 0;
    if (rc == 0)
        rc = open_log(s, &s->log);
    return rc ? rc : fill(s);
}

static bool rp_next(const void *self, int64_t *at_ns)
{
    const replay_t *s = self;
    if (s->n_heap == 0)
        return false;
    *at_ns = s->ctx.base_ns + s->heap[0].t;
    return true;
}

static int rp_due(void *self, int64_t now_ns)
{
    replay_t *s = self;
    int rc = 0;
    while (rc == 0 && s->n_heap > 0 && s->ctx.base_ns + s->heap[0].t <= now_ns) {
        rp_ent_t e = heap_pop(s);
        src_req_t req = {
            .cls = e.cls, .intended_ns = s->ctx.base_ns + e.t, .agent = e.copy, .client = -1};
        if (e.hold) {
            rc = watches_once_open(s->watches, e.cls, e.path, req.intended_ns, e.hold);
            s->watched += rc == 0;
            s->watch_failed += rc != 0 && rc != SQ_ESTOPPED;
            rc = rc == SQ_ENOMEM ? rc : 0; /* a stream that cannot open is counted, not fatal */
        } else {
            rc = src_issue_as(s->ctx.issuer, s->me, &req, e.method, e.path);
            s->issued += rc == 0;
        }
        free(e.path);
        if (s->n_heap < RP_READ_AHEAD / 2 && rc == 0)
            rc = fill(s);
    }
    return rc ? rc : fill(s);
}

/* Second i of the log (its part inside the window) as an interval of the phase, for copy c. */
static void sec_span(const replay_t *s, size_t i, int c, double *a, double *b)
{
    int64_t lo = (s->sec0 + (int64_t)i) * RP_SEC, hi = lo + RP_SEC;
    lo = lo > s->origin ? lo : s->origin;
    /* A finer log's last second ends at its last request, where the phase ends. */
    hi = s->coarse || hi <= s->t_max ? hi : s->t_max + 1;
    double off = (double)c * (double)s->pp->replay.offset_ns;
    *a = (double)(lo - s->origin) / s->pp->replay.speed + off;
    *b = (double)(hi - s->origin) / s->pp->replay.speed + off;
}

/* The share of second i's n requests that copy c starts in [t0, t1): evenly spread 1 s times
 * are the instants a + k (b - a) / n, counted exactly; otherwise the overlap's fraction. */
static double sec_share(const replay_t *s, size_t i, int c, int64_t t0, int64_t t1)
{
    double a, b, n = s->tick[i];
    sec_span(s, i, c, &a, &b);
    if (s->coarse && s->pp->replay.spread == PLAN_ARRIVALS_EVEN) {
        double k0 = ceil(((double)t0 - a) * n / (b - a) - 1e-9);
        double k1 = ceil(((double)t1 - a) * n / (b - a) - 1e-9);
        k0 = k0 < 0 ? 0 : k0 > n ? n : k0;
        k1 = k1 < 0 ? 0 : k1 > n ? n : k1;
        return (k1 - k0) / n;
    }
    double lo = a > (double)t0 ? a : (double)t0, hi = b < (double)t1 ? b : (double)t1;
    return hi <= lo ? 0 : b > a ? (hi - lo) / (b - a) : 1;
}

/* The log's requests per second at their instants (1 s logs spread evenly), else spread evenly
 * over each second (a mean within a second; totals exact). */
static double rp_expected(const void *self, int64_t t0, int64_t t1, double *per_class)
{
    const replay_t *s = self;
    double sum = 0;
    for (int c = 0; c < s->pp->replay.copies; c++) {
        /* Only the seconds of the log that copy c maps into [t0, t1), and one either side. */
        double off = (double)c * (double)s->pp->replay.offset_ns, speed = s->pp->replay.speed;
        double a0 = ((double)t0 - off) * speed + (double)s->origin;
        double a1 = ((double)t1 - off) * speed + (double)s->origin;
        double first = floor(a0 / 1e9) - (double)s->sec0 - 1,
               last = ceil(a1 / 1e9) - (double)s->sec0 + 1;
        size_t lo = first > 0 ? (size_t)first : 0;
        size_t hi = last < (double)s->n_secs ? (size_t)(last > 0 ? last : 0) : s->n_secs;
        for (size_t i = lo; i < hi; i++) {
            if (!s->tick[i])
                continue;
            double f = sec_share(s, i, c, t0, t1);
            if (f <= 0)
                continue;
            sum += f * s->tick[i];
            for (int k = 0; per_class && k < s->n_cls; k++)
                per_class[k] += f * s->counts[i * (size_t)s->n_cls + (size_t)k];
        }
    }
    return sum;
}

static void rp_stop(void *self)
{
    replay_t *s = self;
    if (s->log) {
        const alog_stats_t *st = alog_stats(s->log);
        s->records = st->records;
        s->lines = st->lines;
    }
    heap_clear(s);
    alog_close(s->log);
    s->log = NULL;
    watches_once_stop(s->watches);
}

static bool rp_idle(const void *self)
{
    const replay_t *s = self;
    return s->eof && s->n_heap == 0 && watches_once_open_now(s->watches) == 0;
}

static const char *spread_name(const replay_t *s)
{
    if (!s->coarse)
        return "none (times as recorded)";
    return s->pp->replay.spread == PLAN_ARRIVALS_POISSON ? "poisson" : "even";
}

static int rp_finish(void *self, results_t *res)
{
    replay_t *s = self;
    json_t *sec = results_section(res, "replay");
    if (!sec && results_set_section(res, "replay", sec = json_object()))
        return SQ_ENOMEM;
    json_t *ph = json_pack(
        "{s:s,s:s,s:f,s:i,s:I,s:s,s:I,s:I,s:I,s:O,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I}", "log",
        s->pp->replay.log, "format", s->format, "speed", s->pp->replay.speed, "copies",
        s->pp->replay.copies, "offset_ns", (json_int_t)s->pp->replay.offset_ns, "spread",
        spread_name(s), "lines", (json_int_t)s->lines, "records", (json_int_t)s->records,
        "malformed", (json_int_t)s->malformed, "malformed_samples", s->samples, "sent",
        (json_int_t)s->issued, "watches", (json_int_t)s->watched, "watches_failed",
        (json_int_t)s->watch_failed, "skipped_writes", (json_int_t)s->verdicts[RP_SKIP_WRITE],
        "skipped_watches", (json_int_t)s->verdicts[RP_SKIP_WATCH], "skipped_kind",
        (json_int_t)s->verdicts[RP_SKIP_KIND], "filtered", (json_int_t)s->verdicts[RP_FILTERED],
        "bad_rewrites", (json_int_t)s->bad_path, "not_sent", (json_int_t)s->unsent, "other_shards",
        (json_int_t)s->verdicts[RP_OTHER_SHARD]);
    return ph ? json_object_set_new(sec, s->ctx.name, ph) : SQ_ENOMEM;
}

const src_ops_t src_replay_ops = {
    .name = "replay",
    .used_by = rp_used_by,
    .new = rp_new,
    .start = rp_start,
    .next = rp_next,
    .due = rp_due,
    .expected = rp_expected,
    .stop = rp_stop,
    .idle = rp_idle,
    .finish = rp_finish,
    .free = rp_free,
};
