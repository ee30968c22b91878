/* series.csv: one row per phase x class x second, percentiles from that second's histogram. A
 * second in which a phase ends has rows for both phases, each holding only its own requests (a
 * request belongs to the phase that started it); the teardown has rows of its own. Each row's
 * histogram goes to series-hist.csv, so that a merge can give merged seconds exact percentiles. The
 * row ends with the run's figures of the second (watch streams, the admission queue), the same on
 * every row of that second. */
#include <errno.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"

typedef struct {
    const plan_t *plan;
    out_t *o;
    FILE *f, *fh;            /* series.csv, series-hist.csv */
    int64_t real_minus_mono; /* CLOCK_REALTIME - CLOCK_MONOTONIC, read at each phase's start */
} series_t;

static void series_free(void *self)
{
    series_t *s = self;
    if (s->f)
        fclose(s->f);
    if (s->fh)
        fclose(s->fh);
    free(s);
}

static int series_new(const obs_cfg_t *cfg, void **self)
{
    series_t *s = calloc(1, sizeof(*s));
    if (!s)
        return SQ_ENOMEM;
    *self = s;
    s->plan = cfg->plan;
    s->o = cfg->o;
    return 0;
}

static FILE *open_csv(series_t *s, const char *dir, const char *name, const char *header)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", dir, name);
    FILE *f = fopen(path, "w");
    if (!f)
        out_error(s->o, "cannot write %s: %s", path, strerror(errno));
    else
        fprintf(f, "%s\n", header);
    return f;
}

static int series_open(void *self, const char *dir)
{
    series_t *s = self;
    /* Times in milliseconds; `second` counts from the start of the run. */
    s->f = open_csv(s, dir, RESULTS_SERIES_FILE, RESULTS_SERIES_HEADER);
    s->fh = s->f ? open_csv(s, dir, RESULTS_SERIES_HIST_FILE, RESULTS_SERIES_HIST_HEADER) : NULL;
    return s->f && s->fh ? 0 : SQ_EIO;
}

/* Wall-clock time of the rows: the monotonic clock's offset, taken as each phase starts. */
static void series_phase(void *self, size_t phase, int64_t base_ns, int64_t realtime0_ns)
{
    (void)phase;
    ((series_t *)self)->real_minus_mono = realtime0_ns - base_ns;
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

/* The sync columns of a row (RESULTS_SERIES_SYNC) and its end: the last closed window of the
 * fleet action (phase, class), empty when the row is not one's or none has closed; a window
 * without sends has its index and n = 0 but no gauge (R̄, p and peak-to-mean empty). */
static void sync_cells(FILE *f, const obs_second_t *w, const obs_cell_t *c)
{
    for (size_t k = 0; k < w->n_sync; k++) {
        const obs_sync_t *y = &w->sync[k];
        if (y->phase != c->phase || y->cls != c->cls || !y->closed)
            continue;
        if (y->last.gauge.n == 0)
            fprintf(f, "%lld,0,,,\n", (long long)y->last.index);
        else
            fprintf(f, "%lld,%llu,%.4f,%.4g,%.3f\n", (long long)y->last.index,
                    (unsigned long long)y->last.gauge.n, y->last.gauge.r_bar, y->last.gauge.p,
                    y->last.gauge.peak_to_mean);
        return;
    }
    fputs(",,,,\n", f);
}

/* The run's figures of the second (RESULTS_SERIES_RUN_MAP), one text for all its rows. */
static void run_columns(const obs_second_t *w, char *buf, size_t cap)
{
    static const obs_watch_second_t none = {0};
    const obs_watch_second_t *ws = w->watch ? w->watch : &none;
    const hist_t *prop = ws->propagation;
    char p99[32] = "nan";
    if (prop && hist_count(prop) > 0)
        snprintf(p99, sizeof p99, "%.3f", ms(hist_value_at(prop, 99)));
    snprintf(buf, cap, "%lld,%lld,%lld,%lld,%s,%.3f,%d,%d", (long long)ws->open,
             (long long)ws->dropped, (long long)ws->reconnects, (long long)ws->events, p99,
             w->eng ? ms(w->eng->max_queue_wait_ns) : 0.0, w->eng ? w->eng->max_in_flight : 0,
             w->eng ? w->eng->max_queued : 0);
}

static void series_second(void *self, const obs_second_t *w)
{
    series_t *s = self;
    if (!s->f || !s->fh)
        return;
    char run[256];
    run_columns(w, run, sizeof run);
    for (size_t i = 0; i < w->n_cells; i++) {
        const obs_cell_t *c = &w->cells[i];
        const hist_t *h = c->response;
        bool any = h && c->completed > 0;
        fprintf(s->f, "%lld,%s,%s,%lld,%lld,%.1f,%lld,%.3f,%.3f,%.3f,%.3f,%.3f,%lld,%.3f,%s,%s,",
                (long long)w->index, obs_phase_name(s->plan, c->phase),
                obs_class_name(s->plan, c->cls), (long long)c->started, (long long)c->completed,
                (double)c->completed / w->secs, (long long)c->errors,
                any ? ms(hist_value_at(h, 50)) : 0.0, any ? ms(hist_value_at(h, 90)) : 0.0,
                any ? ms(hist_value_at(h, 99)) : 0.0, any ? ms(hist_max(h)) : 0.0, c->planned,
                (long long)((w->start_ns + s->real_minus_mono) / 1000000),
                any ? ms(hist_value_at(h, 99.9)) : 0.0, w->marks ? w->marks : "", run);
        sync_cells(s->f, w, c);
        /* Out of memory, the row has no histogram: a merge then marks its percentiles unknown. */
        char *text = NULL;
        if (any && hist_encode(h, &text) == 0)
            fprintf(s->fh, "%lld,%s,%s,%lld,%s\n", (long long)w->index,
                    obs_phase_name(s->plan, c->phase), obs_class_name(s->plan, c->cls),
                    (long long)((w->start_ns + s->real_minus_mono) / 1000000), text);
        free(text);
    }
    fflush(s->f);
    fflush(s->fh);
}

static int series_finish(void *self, results_t *res, const char *dir)
{
    (void)res;
    (void)dir;
    series_t *s = self;
    int rc = s->f && fclose(s->f) != 0 ? SQ_EIO : 0;
    if (s->fh && fclose(s->fh) != 0)
        rc = SQ_EIO;
    s->f = s->fh = NULL;
    return rc;
}

static const obs_ops_t ops = {
    .name = "series",
    .open = series_open,
    .phase = series_phase,
    .second = series_second,
    .finish = series_finish,
    .free = series_free,
};

const obs_entry_t obs_series_entry = {.ops = &ops, .new = series_new};
