/* The journal: an append-only record of every object a run creates and deletes, so that what it
 * left behind can be deleted later, after a crash, a kill -9 or on another machine.
 *
 * File format (our own): NDJSON, one JSON object per line. The first line of a journal is a
 * header {"squall_journal": 1, "target": URL, "started_unix_ms": T}; every later line is
 * {"op": OP, "path": PATH, "class": NAME, "t": UNIX_MS} (plus "version" for created), where OP is
 *   put      a create is about to be sent (written ahead of the request, straight to the kernel,
 *            so a kill -9 between the target's answer and our record cannot hide an object)
 *   created  the target answered 201: the object exists and is ours
 *   failed   the target answered otherwise and definitely created nothing (4xx, or 2xx other
 *            than 201: the object existed before and is not ours to delete)
 *   deleted  it was deleted (2xx) or found already gone (404, 410)
 * An object is alive when its last line is put or created. put, created, failed and deleted are
 * buffered except put; the buffer is written at least once a second (journal_flush, called by
 * the owner's timer), when it fills, and by journal_close (which also fsyncs).
 * Reading tolerates a torn last line (a crash mid-write): it is reported and skipped. A journal
 * reopened for append (squall cleanup) first ends a torn line, so records never run together.
 *
 * The reaper deletes a list of paths over the engine at a bounded rate with retries: the shared
 * core of a run's teardown and of `squall cleanup`. */
#ifndef SQUALL_JOURNAL_H
#define SQUALL_JOURNAL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <uv.h>

#include "squall/engine.h"
#include "squall/out.h"

#define JOURNAL_FILE    "journal.ndjson" /* its name inside a results directory */
#define JOURNAL_VERSION 1                /* the header's "squall_journal" */

typedef struct journal journal_t;

enum journal_op { JOURNAL_PUT, JOURNAL_CREATED, JOURNAL_FAILED, JOURNAL_DELETED };

/* Opens path for appending, writing the header when the file is new or empty. target_url is
 * recorded in the header (user info removed is the caller's job). SQ_EIO (a line on o), SQ_ENOMEM.
 */
int journal_open(const char *path, const char *target_url, out_t *o, journal_t **out);
/* Appends one record; JOURNAL_PUT is written through at once. SQ_EIO on a write error (reported
 * once on the journal's out_t; later records are still attempted). j NULL: does nothing. */
int journal_add(journal_t *j, enum journal_op op, const char *path, const char *cls,
                uint64_t version);
int journal_flush(journal_t *j);
/* Flushes, fsyncs and closes; NULL is allowed. Returns the first write error, if any. */
int journal_close(journal_t *j);

/* What a journal shows still alive. */
typedef struct {
    char *target;         /* from the header (malloc'd) */
    char **paths;         /* alive objects, in the order they were first recorded */
    char **classes;       /* their classes ("" when unknown) */
    bool *confirmed;      /* created (true) or only put (false: the answer never came) */
    size_t n;             /* alive objects */
    size_t records, torn; /* lines read; lines skipped as torn or malformed */
    size_t created, deleted;
} journal_alive_t;

/* Reads a journal. Torn or malformed lines, and records whose path is not a request path
 * (value_path_problem), are reported (a warning naming the line) and skipped; a missing or
 * unreadable file, or one without a header or of another version than JOURNAL_VERSION, is
 * SQ_EIO / SQ_EPARSE (reported). */
int journal_read(const char *path, journal_alive_t *a, out_t *o);
void journal_alive_close(journal_alive_t *a);
/* The journals ins[0..n) as one at out (a merge of shards, which create disjoint objects): the
 * first header, then every record of each in turn, as written. An input without a journal is
 * skipped; none at all writes nothing (0). Headers naming different targets are SQ_EINVAL, an
 * unreadable input or a failed write SQ_EIO (each reported on o, nothing left at out). */
int journal_merge(const char *const *ins, size_t n, const char *out, out_t *o);

/* ---- the reaper ------------------------------------------------------------------------- */

enum journal_fate {
    JOURNAL_LEFT,      /* not deleted: tried, then stopped (time limit, signal, unreachable) */
    JOURNAL_DONE,      /* deleted: a 2xx answer */
    JOURNAL_GONE,      /* already gone: 404 or 410 */
    JOURNAL_REFUSED,   /* failed: another 4xx, or 5xx/429/timeouts on every attempt */
    JOURNAL_NOT_TRIED, /* its delete was never sent: the reaper stopped first */
};

typedef struct {
    double rate;      /* first attempts per second; 0 = as fast as `parallel` allows */
    int parallel;     /* deletes in flight at most, >= 1 */
    int attempts;     /* tries per object on 5xx, 429, timeouts and transport errors, >= 1 */
    int64_t limit_ns; /* everything stops after this long */
    /* Called once per attempt the engine accepted, and once per attempt that ended
     * (cancelled ones too), with the object's index, the engine's result and its fate so far
     * (LEFT while it will be retried or when cancelled). Either may be NULL. */
    void (*on_submit)(void *user, size_t i);
    void (*on_result)(void *user, size_t i, const eng_result_t *res, enum journal_fate f);
    void *user;
    bool signals; /* SIGINT or SIGTERM stops it (the rest is LEFT): for `cleanup` */
} journal_reap_cfg_t;

typedef struct {
    size_t done, gone, refused, left, not_tried;
    int64_t elapsed_ns;
    char why[160]; /* why it stopped early, "" when it did not */
} journal_reap_counts_t;

/* The one wording teardown and cleanup share: "N objects: D deleted, G already gone, F failed,
 * L left, T not tried (S s)" into buf; returns how many are still on the target (F + L + T). */
size_t journal_counts_text(const journal_reap_counts_t *c, char *buf, size_t cap);

typedef struct journal_reaper journal_reaper_t;

/* Starts deleting paths[0..n) with DELETE requests through a new engine on `loop` (made from
 * ecfg, which carries the target's headers, TLS and token; its on_unreachable is replaced), on
 * its own 1 ms timer, until every object has a fate. A retry waits the answer's Retry-After
 * when a 429 or 503 gives one (at most 30 s), else 200 ms x 2^(attempt - 1), at most 2 s.
 * fates (n entries) receives each object's fate and must outlive the reaper; so must paths
 * and cfg. Returns 0 and *out, or SQ_ENOMEM / SQ_ELIBUV / the engine's code (then nothing is
 * sent, every fate is NOT_TRIED, and *out, when set, must still be freed). */
int journal_reaper_start(uv_loop_t *loop, const eng_config_t *ecfg, out_t *o,
                         const journal_reap_cfg_t *cfg, const char *const *paths, size_t n,
                         enum journal_fate *fates, journal_reaper_t **out);
/* Stops at once: deletes in flight are cancelled, everything without a fate is LEFT. */
void journal_reaper_stop(journal_reaper_t *rp, const char *why);
/* True when every object has its fate and the reaper closed its engine and timer. */
bool journal_reaper_finished(const journal_reaper_t *rp);
void journal_reaper_counts(const journal_reaper_t *rp, journal_reap_counts_t *counts);
/* Stops it if needed and releases it once its handles closed (run the loop afterwards). */
void journal_reaper_free(journal_reaper_t *rp);

/* The reaper run to the end on `loop` (which must have no other active handles), closing all
 * it opened before returning. */
int journal_reap(uv_loop_t *loop, const eng_config_t *ecfg, out_t *o, const journal_reap_cfg_t *cfg,
                 const char *const *paths, size_t n, enum journal_fate *fates,
                 journal_reap_counts_t *counts);

#endif
