/* The envelope search: where to run next (doubling, then bisection; a staircase over two
 * dimensions), which points hold, and when to stop. Making a run is the caller's. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/envelope.h"
#include "squall/err.h"

struct envelope {
    envelope_cfg_t cfg;
    envelope_run_t *runs;
    size_t n_runs, cap_runs;
    envelope_column_t cols[ENVELOPE_MAX_COLUMNS];
    size_t n_cols;
    int brakes;
    const char *stopped;
};

enum point_result { HOLDS, NOT_HOLDS, STOP };

int envelope_new(const envelope_cfg_t *cfg, envelope_t **out)
{
    envelope_t *e = calloc(1, sizeof(*e));
    if (!(*out = e))
        return SQ_ENOMEM;
    e->cfg = *cfg;
    return 0;
}

void envelope_free(envelope_t *e)
{
    if (!e)
        return;
    free(e->runs);
    free(e);
}

static double rounded(const envelope_dim_t *d, double v)
{
    return d->integer ? floor(v + 0.5) : v;
}

/* One point: up to `repeats` runs, stopping at the first that does not pass. An INCONCLUSIVE
 * run says nothing about the target (squall fell behind, or too few samples), so the point's
 * first one is run again once; a second makes the point INCONCLUSIVE. */
static enum point_result point(envelope_t *e, const double *v, envelope_column_t *col,
                               envelope_run_fn make_run, void *ctx, int *err)
{
    bool retried = false;
    for (int k = 1; k <= e->cfg.repeats; k++) {
        if ((int)e->n_runs >= e->cfg.max_runs) {
            e->stopped = "max-runs reached";
            return STOP;
        }
        if (e->n_runs == e->cap_runs) {
            size_t cap = e->cap_runs ? 2 * e->cap_runs : 16;
            envelope_run_t *p = realloc(e->runs, cap * sizeof(*p));
            if (!p)
                return (*err = SQ_ENOMEM), STOP;
            e->runs = p;
            e->cap_runs = cap;
        }
        envelope_run_t *r = &e->runs[e->n_runs];
        memset(r, 0, sizeof(*r));
        memcpy(r->v, v, sizeof(r->v));
        r->repeat = k;
        if ((*err = make_run(ctx, r)))
            return STOP;
        e->n_runs++;
        if (r->verdict == ENVELOPE_ERROR) {
            e->stopped = "a run ended in error (see its exit code)";
            return STOP;
        }
        if (r->left > 0) {
            e->stopped = "a run left objects on the target (squall cleanup its directory)";
            return STOP;
        }
        if (r->verdict == ENVELOPE_PASS)
            continue;
        if (r->verdict == ENVELOPE_INCONCLUSIVE && !retried) {
            retried = true;
            k--;
            continue;
        }
        col->fails_how = r->verdict;
        snprintf(col->limited, sizeof col->limited, "%s", r->limited);
        if (r->verdict == ENVELOPE_BRAKE && ++e->brakes >= 2) {
            e->stopped = "brakes fired twice";
            return STOP;
        }
        return NOT_HOLDS;
    }
    return HOLDS;
}

/* Searches the last dimension in column col (the first dimension fixed at col->value in 2-D),
 * never above `to`. Returns false when the search must stop. */
static bool search_column(envelope_t *e, envelope_column_t *col, double to,
                          envelope_run_fn make_run, void *ctx, int *err)
{
    const envelope_dim_t *d = &e->cfg.dims[e->cfg.n_dims - 1];
    double v[ENVELOPE_MAX_DIMS] = {col->value, 0}, lo = NAN, hi = NAN;
    double *x = &v[e->cfg.n_dims - 1];
    enum envelope_verdict hi_how = ENVELOPE_FAIL;
    char hi_why[512] = "";
    col->searched = true;
    *x = d->from;
    for (;;) { /* doubling */
        enum point_result pr = point(e, v, col, make_run, ctx, err);
        if (pr == STOP)
            goto stop;
        if (pr == NOT_HOLDS) {
            hi = *x;
            hi_how = col->fails_how;
            snprintf(hi_why, sizeof hi_why, "%s", col->limited);
            break;
        }
        lo = *x;
        /* Holding at the cap a smaller column set (below TO) means that column's limit does
         * not bound this one: go on towards TO. */
        if (*x >= to && to < d->to)
            to = d->to;
        else if (*x >= to)
            break;
        *x = fmin(rounded(d, 2 * *x), to);
    }
    while (!isnan(lo) && !isnan(hi) && hi - lo > d->resolution) { /* bisection */
        double mid = rounded(d, (lo + hi) / 2);
        if (mid <= lo || mid >= hi)
            break;
        *x = mid;
        enum point_result pr = point(e, v, col, make_run, ctx, err);
        if (pr == STOP)
            goto stop;
        if (pr == HOLDS) {
            lo = mid;
        } else {
            hi = mid;
            hi_how = col->fails_how;
            snprintf(hi_why, sizeof hi_why, "%s", col->limited);
        }
    }
    col->holds_up_to = lo;
    col->fails_at = hi;
    col->fails_how = hi_how;
    snprintf(col->limited, sizeof col->limited, "%s", hi_why);
    /* A boundary decided by an INCONCLUSIVE point is not known: it was squall (or too few
     * samples), not the target, that stopped the search there. */
    col->resolved = isnan(hi)
                        ? !isnan(lo)
                        : hi_how != ENVELOPE_INCONCLUSIVE &&
                              (isnan(lo) || hi - lo <= d->resolution ||
                               rounded(d, (lo + hi) / 2) <= lo || rounded(d, (lo + hi) / 2) >= hi);
    return true;
stop:
    col->holds_up_to = lo;
    col->fails_at = hi;
    col->fails_how = hi_how;
    snprintf(col->limited, sizeof col->limited, "%s", hi_why);
    col->resolved = false;
    return false;
}

int envelope_search(envelope_t *e, envelope_run_fn make_run, void *ctx)
{
    int err = 0;
    const envelope_dim_t *last = &e->cfg.dims[e->cfg.n_dims - 1];
    if (e->cfg.n_dims == 1) {
        e->n_cols = 1;
        e->cols[0] = (envelope_column_t){.value = NAN, .holds_up_to = NAN, .fails_at = NAN};
        search_column(e, &e->cols[0], last->to, make_run, ctx, &err);
        return err;
    }
    const envelope_dim_t *first = &e->cfg.dims[0];
    int steps = e->cfg.steps < 2 ? 2 : e->cfg.steps;
    double to = last->to, prev = NAN;
    bool go = true, none = false;
    for (int i = 0; i < steps && i < ENVELOPE_MAX_COLUMNS; i++) {
        double v = rounded(first, first->from + (first->to - first->from) * i / (steps - 1));
        if (v == prev)
            continue;
        prev = v;
        envelope_column_t *col = &e->cols[e->n_cols++];
        *col = (envelope_column_t){.value = v, .holds_up_to = NAN, .fails_at = NAN};
        if (!go || none)
            continue;
        go = search_column(e, col, to, make_run, ctx, &err);
        if (!isnan(col->fails_at))
            to = col->fails_at; /* a larger first value leaves no more room */
        none = isnan(col->holds_up_to) && go;
    }
    return err;
}

const envelope_cfg_t *envelope_cfg(const envelope_t *e)
{
    return &e->cfg;
}

size_t envelope_run_count(const envelope_t *e)
{
    return e->n_runs;
}

const envelope_run_t *envelope_run_at(const envelope_t *e, size_t i)
{
    return i < e->n_runs ? &e->runs[i] : NULL;
}

size_t envelope_column_count(const envelope_t *e)
{
    return e->n_cols;
}

const envelope_column_t *envelope_column_at(const envelope_t *e, size_t i)
{
    return i < e->n_cols ? &e->cols[i] : NULL;
}

const char *envelope_stopped(const envelope_t *e)
{
    return e->stopped;
}

bool envelope_complete(const envelope_t *e)
{
    if (e->stopped)
        return false;
    for (size_t i = 0; i < e->n_cols; i++)
        if (e->cols[i].searched && !e->cols[i].resolved)
            return false;
    return true;
}

void envelope_value_text(const envelope_dim_t *d, double v, char *buf, size_t cap)
{
    if (isnan(v))
        snprintf(buf, cap, "-");
    else if (d->integer)
        snprintf(buf, cap, "%.0f%s", v, d->suffix);
    else
        snprintf(buf, cap, "%.6g%s", v, d->suffix);
}

/* A number and the unit text after it. */
static bool number_unit(const char *s, double *v, const char **unit)
{
    char *end;
    *v = strtod(s, &end);
    *unit = end;
    return end != s && isfinite(*v);
}

int envelope_dim_parse(const char *text, envelope_dim_t *d, char *err, size_t cap)
{
    memset(d, 0, sizeof(*d));
    const char *eq = strchr(text, '='), *dots = eq ? strstr(eq, "..") : NULL;
    if (!eq || eq == text || !dots)
        return snprintf(err, cap, "expected PATH=FROM..TO, got '%s'", text), SQ_EINVAL;
    char *copy = strdup(text);
    if (!copy)
        return SQ_ENOMEM;
    copy[eq - text] = '\0';
    copy[dots - text] = '\0';
    const char *from = copy + (eq - text) + 1, *to = copy + (dots - text) + 2, *u1, *u2;
    if (!number_unit(from, &d->from, &u1) || !number_unit(to, &d->to, &u2) || strcmp(u1, u2) != 0 ||
        strlen(u1) > 16 || d->from <= 0 || d->to <= d->from) {
        snprintf(err, cap,
                 "expected FROM..TO with 0 < FROM < TO, both numbers with the same unit "
                 "(e.g. 50/s..800/s), got '%s'",
                 text + (eq - text) + 1);
        free(copy);
        return SQ_EINVAL;
    }
    d->path = copy;
    d->suffix = u1;
    d->integer = d->from == floor(d->from) && d->to == floor(d->to);
    d->resolution = d->integer ? fmax(1, floor((d->to - d->from) / 32)) : (d->to - d->from) / 32;
    return 0;
}

bool envelope_back_to_idle(double idle, double now)
{
    double d = fabs(now - idle), share = ENVELOPE_IDLE_SHARE * fabs(idle);
    return d <= (share > ENVELOPE_IDLE_FLOOR ? share : ENVELOPE_IDLE_FLOOR);
}
