/* The live line: once a second on stderr, the phase, the time, the achieved against the planned
 * rate, the peaks of requests in flight and queued, errors and the second's latencies. */
#include <math.h>
#include <stdlib.h>

#include "obs_int.h"
#include "squall/clock.h"
#include "squall/err.h"

typedef struct {
    const plan_t *plan;
    out_t *o;
    bool quiet;
    int64_t run_start_ns;
    double planned_s; /* the plan's phases together, seconds */
} live_t;

static int live_new(const obs_cfg_t *cfg, void **self)
{
    live_t *v = calloc(1, sizeof(*v));
    if (!v)
        return SQ_ENOMEM;
    *self = v;
    v->plan = cfg->plan;
    v->o = cfg->o;
    v->quiet = cfg->quiet;
    for (size_t i = 0; i < cfg->plan->n_phases; i++)
        v->planned_s += (double)cfg->plan->phases[i].duration_ns / 1e9;
    return 0;
}

static void live_phase(void *self, size_t phase, int64_t base_ns, int64_t realtime0_ns)
{
    (void)realtime0_ns;
    live_t *v = self;
    if (phase == 0 || !v->run_start_ns)
        v->run_start_ns = base_ns;
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

static void live_second(void *self, const obs_second_t *s)
{
    live_t *v = self;
    if (v->quiet || s->final)
        return;
    double elapsed = (double)(clock_mono_ns() - v->run_start_ns) / 1e9;
    char planned[32] = "-";
    if (!isnan(s->planned))
        snprintf(planned, sizeof planned, "%.0f/s", s->planned / s->secs);
    char limited[300] = "";
    if (s->bound != OBS_BOUND_NONE)
        snprintf(limited, sizeof limited, "  %s: %s",
                 s->bound == OBS_BOUND_GENERATOR ? "GENERATOR-BOUND" : "CONNECTION-BOUND",
                 s->bound_why);
    char when[48]; /* the run's time against the plan's; draining and teardown come after it */
    snprintf(when, sizeof when, s->loading ? "%5.1fs/%.0fs" : "%5.1fs, after the plan's %.0fs",
             elapsed, v->planned_s);
    out_live(v->o,
             "[%s] %s  rate %.0f/s of %s  in flight %d  queued %d  errors %lld  "
             "p50 %.1fms  p99 %.1fms  send lag p99 %.2fms%s",
             obs_phase_name(v->plan, s->phase), when, (double)s->started / s->secs,
             planned, s->eng->max_in_flight, s->eng->max_queued, (long long)s->errors,
             ms(hist_value_at(s->response, 50)), ms(hist_value_at(s->response, 99)),
             ms(hist_value_at(s->send_lag, 99)), limited);
}

static const obs_ops_t ops = {
    .name = "live",
    .phase = live_phase,
    .second = live_second,
    .free = free,
};

const obs_entry_t obs_live_entry = {.ops = &ops, .new = live_new};
