/* The synchronisation gauge of fleet phases (sync.h): for every fleet action (a class its agents
 * send every P), the send instants of its requests gauged per window of one period, windows
 * counted from the phase's start (the fleet's grid origin). The list owns it (like health.c):
 * obs_done feeds it, obs_second closes the windows that have ended and hands the last closed
 * window of every action to the observers (series.csv, the live line), and obs_finish writes the
 * "sync" section of results.json.
 *
 * What counts. Only requests a fleet source sent for that action (the completion's source is
 * "fleet", its class the action's, not a following page): other traffic of the same class in
 * the same phase (open or closed loop, watches) has its own timing and would blur the fleet's.
 * The instant is the send instant, libcurl's pre-request stamp (eng_result_t.sent_ns); a request
 * that never went on the wire (refused before sending, cancelled) was not a send.
 *
 * Why windows are an array and not one sync_win_t stream. The send instant is known only when a
 * request finishes, and requests finish out of send order (a request sent just before a window
 * ends may be answered after one sent in the next window; under a stall, the whole held bunch
 * is). A stream of consecutive windows would refuse those (SQ_ERANGE), dropping exactly the
 * sends that bunched. So each action keeps one sync_acc_t per window of its phase, allocated at
 * the phase's start (duration / P + 2 of them, nothing on the completion path); a send is added
 * to the window it was sent in whenever it finishes. The live view closes a window at the first
 * second ending at or after the window's end (the gauge does not wait for the next send), with
 * the sends answered by then; results.json's windows, written once every request finished,
 * count every send. A window is *partial* when the phase (or the run) ended inside it.
 * Glossary: action = (phase, class) of phases[].fleet.send[]; window w = [base + w·P,
 * base + (w + 1)·P), base = the phase's t = 0. */
#include <jansson.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"
#include "squall/results.h"

/* Windows kept per action: 100,000 accumulators are about 14 MB (a period of 1 s for 27 hours;
 * a phase longer than that many periods gauges its first ones, and counts the rest `outside`). */
#define GAUGE_MAX_WINDOWS 100000

typedef struct {
    obs_sync_t pub; /* what observers read: the last closed window */
    int64_t base, period, end; /* end: where the phase ended (planned, or earlier) */
    sync_acc_t *w;             /* [n_win] */
    size_t n_win;
    int64_t shown;    /* windows below this index have been closed live */
    uint64_t outside; /* sends past the phase's last window */
} gaction_t;

struct obs_gauge {
    const plan_t *plan;
    gaction_t *a;
    obs_sync_t *last; /* [n]: copies of each action's pub, for obs_second_t */
    size_t n, cap;
    int64_t run_base; /* phase 0's t = 0: the run's start */
    bool have_base;
    int failed;
};

int obs_gauge_new(const plan_t *plan, obs_gauge_t **out)
{
    obs_gauge_t *g = calloc(1, sizeof(*g));
    if (!g)
        return SQ_ENOMEM;
    g->plan = plan;
    size_t cap = 0;
    for (size_t p = 0; p < plan->n_phases; p++)
        cap += plan->phases[p].fleet.on ? plan->phases[p].fleet.n_send : 0;
    g->cap = cap;
    g->a = calloc(cap ? cap : 1, sizeof(*g->a));
    g->last = calloc(cap ? cap : 1, sizeof(*g->last));
    if (!g->a || !g->last) {
        obs_gauge_free(g);
        return SQ_ENOMEM;
    }
    *out = g;
    return 0;
}

void obs_gauge_free(obs_gauge_t *g)
{
    if (!g)
        return;
    for (size_t i = 0; g->a && i < g->n; i++)
        free(g->a[i].w);
    free(g->a);
    free(g->last);
    free(g);
}

/* A phase starts: the previous phases end here (if they had not), and a fleet phase's actions
 * get their windows. */
void obs_gauge_phase(obs_gauge_t *g, size_t phase, int64_t base_ns)
{
    if (!g->have_base) {
        g->run_base = base_ns;
        g->have_base = true;
    }
    for (size_t i = 0; i < g->n; i++)
        if (g->a[i].end > base_ns)
            g->a[i].end = base_ns;
    if (phase >= g->plan->n_phases || !g->plan->phases[phase].fleet.on)
        return;
    const plan_phase_t *pp = &g->plan->phases[phase];
    for (size_t k = 0; k < pp->fleet.n_send && g->n < g->cap; k++) {
        gaction_t *a = &g->a[g->n];
        memset(a, 0, sizeof(*a));
        a->period = pp->fleet.send[k].every_ns;
        a->base = base_ns;
        a->end = base_ns + pp->duration_ns;
        a->n_win = (size_t)(pp->duration_ns / a->period) + 2;
        if (a->n_win > GAUGE_MAX_WINDOWS) /* sends past the last kept window count as outside */
            a->n_win = GAUGE_MAX_WINDOWS;
        a->w = malloc(a->n_win * sizeof(*a->w));
        if (!a->w) {
            g->failed = SQ_ENOMEM;
            return;
        }
        for (size_t w = 0; w < a->n_win; w++)
            sync_acc_init(&a->w[w], base_ns, a->period);
        a->pub = (obs_sync_t){.phase = phase, .cls = pp->fleet.send[k].cls.index,
                              .period_ns = a->period};
        g->n++;
    }
}

void obs_gauge_done(obs_gauge_t *g, const obs_done_t *d)
{
    if (d->whole || !d->first || !d->source || strcmp(d->source, "fleet") != 0 ||
        !d->res->sent_ns)
        return;
    for (size_t i = 0; i < g->n; i++) {
        gaction_t *a = &g->a[i];
        if (a->pub.phase != d->phase || a->pub.cls != d->cls)
            continue;
        int64_t w = sync_window_of(a->base, a->period, d->res->sent_ns);
        if (w >= 0 && (size_t)w < a->n_win && a->base + w * a->period < a->end)
            sync_acc_add(&a->w[w], d->res->sent_ns);
        else
            a->outside++;
        return; /* one action per (phase, class): a class is sent once per fleet */
    }
}

/* Window w of a as it stands: its gauge, start and whether the phase ended inside it. */
static void window_of(const gaction_t *a, int64_t w, sync_window_t *out)
{
    out->index = w;
    out->start_ns = a->base + w * a->period;
    out->partial = out->start_ns + a->period > a->end;
    sync_acc_gauge(&a->w[w], &out->gauge);
}

/* Windows that have ended by now_ns (or whose phase has) are closed for the live view. */
const obs_sync_t *obs_gauge_second(obs_gauge_t *g, int64_t now_ns, size_t *n)
{
    for (size_t i = 0; i < g->n; i++) {
        gaction_t *a = &g->a[i];
        while ((size_t)a->shown < a->n_win) {
            int64_t start = a->base + a->shown * a->period;
            int64_t end = start + a->period < a->end ? start + a->period : a->end;
            if (start >= a->end || now_ns < end)
                break;
            window_of(a, a->shown, &a->pub.last);
            a->pub.closed = true;
            a->shown++;
        }
        g->last[i] = a->pub;
    }
    *n = g->n;
    return g->last;
}

/* The run ended at end_ns: no phase goes on past it. */
void obs_gauge_end(obs_gauge_t *g, int64_t end_ns)
{
    for (size_t i = 0; i < g->n; i++)
        if (g->a[i].end > end_ns)
            g->a[i].end = end_ns;
}

static json_t *window_json(const gaction_t *a, int64_t w, int64_t run_base)
{
    sync_window_t s;
    window_of(a, w, &s);
    return results_sync_window_json(w, (double)(s.start_ns - run_base) / 1e9, &a->w[w],
                                    s.partial);
}

static json_t *action_json(const obs_gauge_t *g, const gaction_t *a)
{
    json_t *wins = json_array();
    for (size_t w = 0; wins && w < a->n_win; w++)
        if (a->base + (int64_t)w * a->period < a->end)
            json_array_append_new(wins, window_json(a, (int64_t)w, g->run_base));
    return json_pack("{s:s,s:I,s:f,s:I,s:o*}", "class", g->plan->reqs[a->pub.cls].name,
                     "period_ns", (json_int_t)a->period, "period_s", (double)a->period / 1e9,
                     "outside", (json_int_t)a->outside, "windows", wins);
}

json_t *obs_gauge_json(const obs_gauge_t *g, int *rc)
{
    *rc = g->failed;
    if (g->failed || !g->n)
        return NULL;
    json_t *sec = json_object();
    for (size_t p = 0; sec && p < g->plan->n_phases; p++) {
        json_t *actions = NULL;
        for (size_t i = 0; i < g->n; i++) {
            if (g->a[i].pub.phase != p)
                continue;
            actions = actions ? actions : json_array();
            json_array_append_new(actions, action_json(g, &g->a[i]));
        }
        if (actions)
            json_object_set_new(sec, g->plan->phases[p].name, json_pack("{s:o}", "actions",
                                                                          actions));
    }
    if (!sec)
        *rc = SQ_ENOMEM;
    return sec;
}
