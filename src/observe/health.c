/* The generator's health, second by second: could squall offer the planned load? A second is
 * generator-bound when squall itself fell behind (its schedule, its loop, or more requests at
 * once than its connections could take although the target answered in time): the target's
 * figures for it are not evidence. It is connection-bound when every connection was busy
 * because the target answered slowly: the response times, measured from each intended start,
 * are then a fair verdict on the target, and more connections would offer more load. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "obs_int.h"
#include "squall/err.h"

/* The figures are ours, chosen so that a healthy run on a 2-core machine (schedule lag p99
 * ~1.7 ms at 10k/s, measured in tools/bench) stays clear of them. Falling behind is judged on
 * the lag's p90, not its tail: a pause of the machine delays the few requests due during it
 * and squall catches up, so the target is still offered the second's load (at 100/s a 10 ms
 * pause moves p99, not p90); a tenth of a second's requests late by over 10 ms is a
 * generator that cannot keep up (CPU starvation, a burst it takes too long to write). */
#define LAG_P90_NS    (10 * INT64_C(1000000)) /* schedule lag p90 in the second */
#define QUEUE_WAIT_NS (10 * INT64_C(1000000)) /* a request waited for a free connection */
#define BUSY_FRACTION 0.90                    /* the loop spent this much in callbacks */
#define BUSY_MIN_WINDOW_NS (100 * INT64_C(1000000)) /* ... of a window at least this long */
/* Connection-bound when the plan's rate times the target's service time (Little's law,
 * L = λW: Little, Operations Research 9(3), 1961) keeps at least half the connections busy on
 * average; below that, waits for a connection come from bursts squall could not send at once. */
#define BUSY_SHARE 0.5
#define LIST_MAX   10000 /* seconds listed per kind (a longer run counts the rest) */

static void note(obs_bound_list_t *b, int64_t second, const char *why)
{
    b->seconds++;
    snprintf(b->why, sizeof b->why, "%s", why);
    if (b->n == b->cap && b->cap < LIST_MAX) {
        size_t cap = b->cap ? b->cap * 2 : 32;
        int64_t *l = realloc(b->list, cap * sizeof(*l));
        if (l) {
            b->list = l;
            b->cap = cap;
        }
    }
    if (b->n < b->cap)
        b->list[b->n++] = second;
}

static void peaks(obs_health_t *h, const eng_stats_t *st, double busy)
{
    if (st->max_queue_wait_ns > h->max_queue_wait_ns)
        h->max_queue_wait_ns = st->max_queue_wait_ns;
    if (st->max_loop_busy_ns > h->max_loop_busy_ns)
        h->max_loop_busy_ns = st->max_loop_busy_ns;
    if (st->max_queued > h->max_queued)
        h->max_queued = st->max_queued;
    if (st->max_in_flight > h->max_in_flight)
        h->max_in_flight = st->max_in_flight;
    if (busy > h->max_busy_fraction)
        h->max_busy_fraction = busy;
}

/* Waits for a connection: the target's service time or the plan's bursts? */
static enum obs_bound waiting(const obs_health_in_t *in, const eng_stats_t *st, char *why,
                              size_t cap)
{
    double wait_ms = (double)st->max_queue_wait_ns / 1e6;
    int conns = st->capacity > 0 ? st->capacity : 1;
    if (in->svc_n == 0) {
        snprintf(why, cap,
                 "all %d connections busy and no answer this second: the target is slow; raise "
                 "target.connections to offer more load",
                 conns);
        return OBS_BOUND_CONNECTIONS;
    }
    double s = (double)in->svc_sum_ns / (double)in->svc_n / 1e9;
    double rate = isnan(in->planned_per_s) ? in->completed_per_s : in->planned_per_s;
    double need = rate * s;
    if (need >= BUSY_SHARE * conns) {
        snprintf(why, cap,
                 "requests waited up to %.1f ms for one of %d connections: %.0f/s at the "
                 "target's %.2f ms needs about %.0f; raise target.connections to offer more load",
                 wait_ms, conns, rate, s * 1e3, ceil(need));
        return OBS_BOUND_CONNECTIONS;
    }
    snprintf(why, cap,
             "requests waited up to %.1f ms for one of %d connections although the target "
             "answered in %.2f ms: more started at once (up to %lld queued) than the connections "
             "could take; raise target.connections toward that",
             wait_ms, conns, s * 1e3, (long long)st->max_queued);
    return OBS_BOUND_GENERATOR;
}

enum obs_bound obs_health_second(obs_health_t *h, const eng_stats_t *st,
                                 const obs_health_in_t *in, char *why, size_t cap)
{
    /* The loop's load is judged over at least a tenth of a second: the run's last, partial
     * second can be a few milliseconds spent in one callback (measured: a 2 s run's final window
     * read "100 % busy" and made a healthy run INCONCLUSIVE). */
    double busy = st->window_ns >= BUSY_MIN_WINDOW_NS
                      ? (double)st->loop_busy_ns / (double)st->window_ns
                      : 0;
    peaks(h, st, busy);
    enum obs_bound b = OBS_BOUND_NONE;
    if (in->lag_p90_ns > LAG_P90_NS) {
        snprintf(why, cap,
                 "schedule lag p90 %.1f ms: squall fell behind its schedule (a tenth of the "
                 "second's requests started over 10 ms late)",
                 (double)in->lag_p90_ns / 1e6);
        b = OBS_BOUND_GENERATOR;
    } else if (busy > BUSY_FRACTION) {
        snprintf(why, cap, "event loop %.0f%% busy: squall is short of CPU", busy * 100);
        b = OBS_BOUND_GENERATOR;
    } else if (st->max_queue_wait_ns > QUEUE_WAIT_NS) {
        b = waiting(in, st, why, cap);
    }
    if (b != OBS_BOUND_NONE && in->loading && in->second >= h->late_seconds)
        note(b == OBS_BOUND_GENERATOR ? &h->generator : &h->connections, in->second, why);
    return b;
}

void obs_health_late(obs_health_t *h, int64_t seconds, const char *why)
{
    for (int64_t s = h->late_seconds; s < seconds; s++)
        note(&h->generator, s, why);
    if (seconds > h->late_seconds)
        h->late_seconds = seconds;
}

void obs_health_close(obs_health_t *h)
{
    free(h->generator.list);
    free(h->connections.list);
}

void obs_bound_seconds(const obs_bound_list_t *b, char *buf, size_t cap)
{
    size_t n = 0;
    buf[0] = '\0';
    for (size_t i = 0; i < b->n && n + 24 < cap; i++)
        n += (size_t)snprintf(buf + n, cap - n, "%s%lld", i ? ", " : "", (long long)b->list[i]);
    if ((int64_t)b->n < b->seconds || n + 24 >= cap)
        snprintf(buf + n, cap - n, ", ...");
}

static json_t *bound_json(const obs_bound_list_t *b)
{
    json_t *list = json_array();
    for (size_t i = 0; list && i < b->n; i++)
        json_array_append_new(list, json_integer(b->list[i]));
    return json_pack("{s:I, s:o, s:s?}", "seconds", (json_int_t)b->seconds, "list", list,
                     "last_reason", b->seconds ? b->why : NULL);
}

json_t *obs_health_json(const obs_health_t *h)
{
    json_t *lim = json_pack("{s:f, s:f, s:f, s:f}", "lag_p90_ms", (double)LAG_P90_NS / 1e6,
                            "queue_wait_ms", (double)QUEUE_WAIT_NS / 1e6, "loop_busy_fraction",
                            BUSY_FRACTION, "busy_share", BUSY_SHARE);
    json_t *g = json_object();
    json_object_set_new(g, "generator_bound", bound_json(&h->generator));
    json_object_set_new(g, "connection_bound", bound_json(&h->connections));
    json_object_set_new(g, "max_queue_wait_ms", json_real((double)h->max_queue_wait_ns / 1e6));
    json_object_set_new(g, "max_queued", json_integer(h->max_queued));
    json_object_set_new(g, "max_in_flight", json_integer(h->max_in_flight));
    json_object_set_new(g, "max_loop_pass_ms", json_real((double)h->max_loop_busy_ns / 1e6));
    json_object_set_new(g, "max_loop_busy_fraction", json_real(h->max_busy_fraction));
    json_object_set_new(g, "thresholds", lim);
    return g;
}
