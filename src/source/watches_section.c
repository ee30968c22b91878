/* The end of a watch phase: its figures per class, summed over its streams, and its reconnect
 * log, written as the phase's entry of the results' "watches" section. */
#include <jansson.h>

#include "watches_int.h"

void watches_figs_add(watches_figs_t *f, const watches_watcher_t *w)
{
    f->opens += w->st.opens;
    f->drops += w->st.drops;
    f->reconnects += w->st.reconnects;
    f->relists += w->st.relists;
    f->too_old += w->st.too_old;
    f->dup += w->st.duplicates;
    f->over += w->fr.st.oversize;
}

/* The reconnect log as columns: {ended_ns, delay_ns, sent_ns, attempt: [...], truncated,
 * dropped}; truncated when reconnects were dropped (more than WATCHES_LOG_MAX in the phase). */
static json_t *log_json(const watches_t *ws)
{
    json_t *end = json_array(), *delay = json_array(), *sent = json_array(), *att = json_array();
    for (size_t i = 0; i < ws->n_log; i++) {
        json_array_append_new(end, json_integer(ws->log[i].end));
        json_array_append_new(delay, json_integer(ws->log[i].delay));
        json_array_append_new(sent, json_integer(ws->log[i].sent));
        json_array_append_new(att, json_integer(ws->log[i].attempt));
    }
    return json_pack("{s:o,s:o,s:o,s:o,s:b,s:I}", "ended_ns", end, "delay_ns", delay, "sent_ns",
                     sent, "attempt", att, "truncated", ws->log_dropped > 0, "dropped",
                     (json_int_t)ws->log_dropped);
}

/* The phase's figures per class, summed over its watchers. */
static json_t *class_json(watches_t *ws, const watches_class_t *wc)
{
    watches_figs_t f = wc->ended;
    for (size_t i = 0; i < ws->n; i++)
        if (ws->w[i].wc == wc)
            watches_figs_add(&f, &ws->w[i]);
    return json_pack(
        "{s:i,s:i,s:i,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:I,s:s}", "streams", wc->streams,
        "open_at_end", wc->open_at_end, "waiting_at_end", wc->waiting_at_end, "opens",
        (json_int_t)f.opens, "events", (json_int_t)wc->events_n, "bytes", (json_int_t)wc->bytes,
        "drops", (json_int_t)f.drops, "reconnects", (json_int_t)f.reconnects, "relists",
        (json_int_t)f.relists, "too_old", (json_int_t)f.too_old, "duplicates", (json_int_t)f.dup,
        "oversize", (json_int_t)f.over, "unparsed", (json_int_t)wc->unparsed, "server_errors",
        (json_int_t)wc->server_errors, "no_stamp", (json_int_t)wc->no_stamp, "policy",
        plan_backoff_name(src_class(ws->ctx.issuer, wc->cls)->pr->watch.policy));
}

static json_t *phase_json(watches_t *ws)
{
    json_t *ph = json_object();
    json_t *classes = json_object();
    for (size_t k = 0; k < ws->n_wc; k++) {
        json_t *cj = class_json(ws, &ws->wcs[k]);
        if (cj)
            json_object_set_new(classes, ws->ctx.plan->reqs[ws->wcs[k].cls].name, cj);
    }
    json_object_set_new(ph, "classes", classes);
    json_object_set_new(ph, "reconnect_log", log_json(ws));
    return ph;
}

void watches_section_put(watches_t *ws)
{
    json_t *ph = phase_json(ws);
    if (ph)
        obs_section_put(ws->ctx.obs, "watches", ws->ctx.name, ph);
}
