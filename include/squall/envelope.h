/* The envelope search (`squall envelope`): where the plan's objectives still hold as one or two
 * plan values grow.
 *
 * Concepts. A *dimension* is a plan value --set can address (phases.steady.rate) searched from
 * FROM to TO, never beyond TO. A *point* is one value per dimension; it *holds* only when every
 * one of its runs (up to `repeats`, stopping at the first that does not pass) passed. A point's
 * first INCONCLUSIVE run is run again once; a point that stays INCONCLUSIVE never holds: the
 * answer says what limited it. One dimension: doubling from
 * FROM until a point does not hold (or TO holds), then bisection between the last holding and
 * the first non-holding value until they are at most `resolution` apart. Two dimensions: the
 * first takes `steps` evenly spaced values from its FROM to TO (a *column* each); in each column
 * the second is searched as above, first up to the previous column's first non-holding value
 * (more of the first dimension is assumed to leave no more room for the second; a column that
 * holds there goes on towards TO), and once a
 * column does not hold at the second's FROM the larger columns are not searched: the safe zone
 * is a staircase. The search stops when `max_runs` runs were made, at the run whose brakes
 * fired for the second time in the search, or at a run that left objects on the target.
 * How a run is made is the caller's (envelope_run_fn): this file only decides where to look. */
#ifndef SQUALL_ENVELOPE_H
#define SQUALL_ENVELOPE_H

#include <stdbool.h>
#include <stddef.h>

#include <jansson.h>

#include "squall/out.h"

#define ENVELOPE_MAX_DIMS    2
#define ENVELOPE_MAX_COLUMNS 64

typedef struct {
    const char *path; /* the --set key */
    double from, to, resolution;
    const char *suffix; /* the unit text after the number ("/s"), "" when none */
    bool integer;       /* FROM and TO are whole numbers: every value is rounded */
} envelope_dim_t;

typedef struct {
    envelope_dim_t dims[ENVELOPE_MAX_DIMS];
    int n_dims;
    int steps;    /* values of the first dimension in a 2-D search (2..ENVELOPE_MAX_COLUMNS) */
    int repeats;  /* runs per point at most (>= 1) */
    int max_runs; /* runs in the whole search at most */
} envelope_cfg_t;

/* How one run ended, as the run's exit code says. */
enum envelope_verdict {
    ENVELOPE_PASS,
    ENVELOPE_FAIL,
    ENVELOPE_INCONCLUSIVE,
    ENVELOPE_BRAKE,
    ENVELOPE_ERROR /* interrupted, unreachable, a usage or I/O failure: the search stops */
};

typedef struct {
    double v[ENVELOPE_MAX_DIMS];
    int repeat; /* 1.. */
    enum envelope_verdict verdict;
    int exit_code;
    long long left;    /* objects its teardown did not delete (lifecycle.teardown): stops it */
    char dir[1024];    /* its results directory */
    char broke[256];   /* the first objective that failed, with its observed value; "" */
    char limited[512]; /* INCONCLUSIVE: the first reason; ERROR: what went wrong; "" */
    /* The cool-down before this run (none before the first): cool_mode 0 none, 1 a fixed pause,
     * 2 until idle; cool_s how long it took; cool_idle whether every kept gauge was back
     * (envelope_back_to_idle) when it ended; not_idle the series that were not, one a line
     * ("name{labels}: now 3 (idle 0)"), or why the target could not be read. */
    int cool_mode;
    double cool_s;
    bool cool_idle;
    char not_idle[512];
} envelope_run_t;

/* Makes one run at values v (repeat 1..repeats) and fills *r (v, repeat are set already).
 * Returns 0, or a negative code to abandon the search. */
typedef int (*envelope_run_fn)(void *ctx, envelope_run_t *r);

typedef struct {
    double value;       /* the first dimension's value (2-D); NaN in a 1-D search */
    double holds_up_to; /* the largest holding value of the searched dimension; NaN none */
    double fails_at;    /* the smallest non-holding value above it; NaN none found */
    bool resolved;      /* fails_at - holds_up_to <= resolution, or holds at its TO */
    bool searched;      /* false when skipped (a smaller column held nowhere) or stopped */
    enum envelope_verdict fails_how; /* the verdict of the point at fails_at */
    char limited[512];               /* why the point at fails_at did not hold when not a FAIL */
} envelope_column_t;

typedef struct envelope envelope_t;

int envelope_new(const envelope_cfg_t *cfg, envelope_t **out);
void envelope_free(envelope_t *e);
/* Runs the search, calling run for every run. SQ_ENOMEM, or run's negative code. */
int envelope_search(envelope_t *e, envelope_run_fn run, void *ctx);

const envelope_cfg_t *envelope_cfg(const envelope_t *e);
size_t envelope_run_count(const envelope_t *e);
const envelope_run_t *envelope_run_at(const envelope_t *e, size_t i);
size_t envelope_column_count(const envelope_t *e);
const envelope_column_t *envelope_column_at(const envelope_t *e, size_t i);
/* Why the search stopped before it was done ("max-runs reached", "brakes fired twice"...);
 * NULL when it finished. */
const char *envelope_stopped(const envelope_t *e);
/* Every column resolved and the search not stopped. */
bool envelope_complete(const envelope_t *e);
/* A value as --set takes it: "150/s", "1200". */
void envelope_value_text(const envelope_dim_t *d, double v, char *buf, size_t cap);
/* Parses "PATH=FROM..TO" (FROM and TO a number with the same unit text after it, FROM > 0,
 * TO > FROM) into *d (path and suffix point into a copy the caller frees with free(d->path)).
 * SQ_EINVAL with the reason in err. */
int envelope_dim_parse(const char *text, envelope_dim_t *d, char *err, size_t cap);

/* The cool-down's rule: a gauge is back to its idle value when |now - idle| is at most
 * ENVELOPE_IDLE_SHARE of |idle| or ENVELOPE_IDLE_FLOOR, whichever is larger (so a count that was
 * 0 or a few must be back exactly, a large one within 10 %). */
#define ENVELOPE_IDLE_SHARE 0.10
#define ENVELOPE_IDLE_FLOOR 0.5
bool envelope_back_to_idle(double idle, double now);

/* ---- outputs (envelope_out.c) -------------------------------------------------------------- */

/* The answer in words, one line per column. */
void envelope_print(const envelope_t *e, out_t *o);
/* {"format": "squall-envelope", "version": 1, ...}; NULL when out of memory. */
json_t *envelope_json(const envelope_t *e, const char *plan);
/* DIR/envelope.json, DIR/envelope.csv and DIR/envelope.html (the safe zone drawn, every point
 * linked to its runs' report.html). SQ_EIO with a line on o. */
int envelope_write(const envelope_t *e, const char *plan, const char *dir, out_t *o);

#endif
