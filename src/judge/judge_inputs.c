/* The judgement's inputs as data (results.json's "judgement" section): the plan's objectives,
 * the reasons it accepts, the options and the phases judged, written by every run and read back
 * when saved results are judged again. */
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/judge.h"

static const char *const metric_words[] = {"response", "service", "open", "propagation", NULL};
static const char *const limit_words[] = {"percentile", "error-rate", "min-rate", "max-sync",
                                          NULL};

static json_t *objective_json(const plan_objective_t *ob)
{
    const char *cls = ob->cls.name ? ob->cls.name : "*";
    json_t *o = json_pack("{s:s, s:s?, s:s, s:s}", "class", cls, "phase", ob->phase.name, "metric",
                          metric_words[ob->metric], "limit", limit_words[ob->limit]);
    if (!o)
        return NULL;
    if (!ob->phase.name)
        json_object_set_new(o, "phase", json_null());
    if (ob->limit == PLAN_LIMIT_PERCENTILE) {
        json_object_set_new(o, "percentile", json_real(ob->percentile));
        json_object_set_new(o, "max_ms", json_real((double)ob->max_ns / 1e6));
    } else {
        json_object_set_new(o, "value", json_real(ob->value));
    }
    return o;
}

static json_t *strings_json(const char *const *v, size_t n)
{
    json_t *a = json_array();
    for (size_t i = 0; a && i < n; i++)
        json_array_append_new(a, json_string(v[i]));
    return a;
}

json_t *judge_inputs_json(const judge_inputs_t *in)
{
    json_t *objs = json_array(), *accept = json_array(), *phases = json_array();
    for (size_t i = 0; objs && i < in->n_objectives; i++)
        json_array_append_new(objs, objective_json(&in->objectives[i]));
    for (int k = 0; accept && plan_accept_names[k]; k++)
        if (in->accept & 1u << k)
            json_array_append_new(accept, json_string(plan_accept_names[k]));
    for (size_t i = 0; phases && i < in->n_phases; i++)
        json_array_append_new(phases, json_string(in->phases[i].name));
    return json_pack(
        "{s:o, s:o, s:f, s:o, s:o, s:o}", "objectives", objs, "accept", accept,
        "default_error_rate", in->opts.default_error_rate, "watch_classes",
        strings_json(in->opts.watch_classes, in->opts.n_watch_classes), "internal_classes",
        strings_json(in->opts.internal_classes, in->opts.n_internal_classes), "phases", phases);
}

/* ---- reading it back ------------------------------------------------------------------------ */

/* What judge_inputs_init_json owns: the section (strings point into it) and the arrays. */
typedef struct {
    json_t *section;
    plan_objective_t *objectives;
    const char **watch, **internal;
    judge_phase_t *phases;
} mem_t;

static int bad(char *err, size_t cap, const char *fmt, ...) __attribute__((format(printf, 3, 4)));
static int bad(char *err, size_t cap, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    if (err && cap)
        vsnprintf(err, cap, fmt, ap);
    va_end(ap);
    return SQ_EPARSE;
}

/* The index of word in words, or -1. */
static int word_index(const char *word, const char *const *words)
{
    for (int i = 0; word && words[i]; i++)
        if (strcmp(word, words[i]) == 0)
            return i;
    return -1;
}

/* A finite number at key, within [lo, hi]. */
static bool number_at(const json_t *o, const char *key, double lo, double hi, double *v)
{
    const json_t *n = json_object_get(o, key);
    *v = json_number_value(n);
    return json_is_number(n) && isfinite(*v) && *v >= lo && *v <= hi;
}

static int objective_read(const json_t *o, size_t i, plan_objective_t *ob, char *err, size_t cap)
{
    const char *cls = json_string_value(json_object_get(o, "class"));
    const json_t *phase = json_object_get(o, "phase");
    int metric = word_index(json_string_value(json_object_get(o, "metric")), metric_words);
    int limit = word_index(json_string_value(json_object_get(o, "limit")), limit_words);
    if (!json_is_object(o) || !cls || !*cls)
        return bad(err, cap, "judgement.objectives[%zu]: expected an object with a class", i);
    if (phase && !json_is_null(phase) && !json_is_string(phase))
        return bad(err, cap, "judgement.objectives[%zu].phase: expected a name or null", i);
    if (metric < 0 || limit < 0)
        return bad(err, cap, "judgement.objectives[%zu]: unknown %s", i,
                   metric < 0 ? "metric" : "limit");
    *ob = (plan_objective_t){
        .cls = {.name = cls, .index = strcmp(cls, "*") ? 0 : -1},
        .phase = {.name = json_string_value(phase), .index = json_is_string(phase) ? 0 : -1},
        .metric = (enum plan_metric)metric,
        .limit = (enum plan_limit)limit,
    };
    double ms;
    if (limit == PLAN_LIMIT_PERCENTILE) {
        if (!number_at(o, "percentile", 1e-9, 100, &ob->percentile) ||
            !number_at(o, "max_ms", 0, 3.6e9, &ms))
            return bad(err, cap,
                       "judgement.objectives[%zu]: expected percentile (0, 100] and "
                       "max_ms >= 0",
                       i);
        ob->max_ns = llround(ms * 1e6);
    } else if (!number_at(o, "value", 0, 1e12, &ob->value)) {
        return bad(err, cap, "judgement.objectives[%zu].value: expected a number >= 0", i);
    }
    return 0;
}

/* A JSON array of strings into v (n entries); false when something else is found. */
static bool strings_read(const json_t *a, const char **v)
{
    size_t i;
    const json_t *s;
    json_array_foreach(a, i, s)
    {
        if (!(v[i] = json_string_value(s)))
            return false;
    }
    return true;
}

static int accept_read(const json_t *a, unsigned *accept, char *err, size_t cap)
{
    size_t i;
    const json_t *s;
    *accept = 0;
    json_array_foreach(a, i, s)
    {
        int k = word_index(json_string_value(s), plan_accept_names);
        if (k < 0)
            return bad(err, cap, "judgement.accept[%zu]: unknown reason", i);
        *accept |= 1u << k;
    }
    return 0;
}

static int lists_read(judge_inputs_t *in, mem_t *m, const json_t *sec, char *err, size_t cap)
{
    const json_t *objs = json_object_get(sec, "objectives"),
                 *watch = json_object_get(sec, "watch_classes");
    const json_t *phases = json_object_get(sec, "phases");
    const json_t *internal = json_object_get(sec, "internal_classes");
    if (!internal)
        internal = json_array(); /* results of an older squall: none (a new reference) */
    else
        json_incref((json_t *)internal);
    bool arrays = json_is_array(objs) && json_is_array(watch) && json_is_array(phases) &&
                  json_is_array(internal) && json_is_array(json_object_get(sec, "accept"));
    m->internal = arrays ? calloc(json_array_size(internal) + 1, sizeof(*m->internal)) : NULL;
    bool internal_ok = m->internal && strings_read(internal, m->internal);
    in->opts.internal_classes = m->internal;
    in->opts.n_internal_classes = internal_ok ? json_array_size(internal) : 0;
    json_decref((json_t *)internal);
    if (arrays && !m->internal)
        return SQ_ENOMEM;
    if (arrays && !internal_ok)
        return bad(err, cap, "judgement: internal_classes must be a list of names");
    if (!arrays)
        return bad(err, cap,
                   "judgement: expected arrays objectives, accept, watch_classes, "
                   "internal_classes (if any) and phases");
    m->objectives = calloc(json_array_size(objs) + 1, sizeof(*m->objectives));
    m->watch = calloc(json_array_size(watch) + 1, sizeof(*m->watch));
    m->phases = calloc(json_array_size(phases) + 1, sizeof(*m->phases));
    const char **names = calloc(json_array_size(phases) + 1, sizeof(*names));
    if (!m->objectives || !m->watch || !m->phases || !names) {
        free(names);
        return SQ_ENOMEM;
    }
    bool ok = strings_read(watch, m->watch) && strings_read(phases, names);
    for (size_t i = 0; ok && i < json_array_size(phases); i++)
        m->phases[i].name = names[i];
    free(names);
    if (!ok)
        return bad(err, cap, "judgement: watch_classes and phases must be lists of names");
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < json_array_size(objs); i++)
        rc = objective_read(json_array_get(objs, i), i, &m->objectives[i], err, cap);
    in->objectives = m->objectives;
    in->n_objectives = json_array_size(objs);
    in->opts.watch_classes = m->watch;
    in->opts.n_watch_classes = json_array_size(watch);
    in->phases = m->phases;
    in->n_phases = json_array_size(phases);
    return rc;
}

int judge_inputs_init_json(judge_inputs_t *in, const json_t *section, char *err, size_t cap)
{
    memset(in, 0, sizeof(*in));
    if (!json_is_object(section))
        return bad(err, cap, "judgement: expected an object");
    mem_t *m = calloc(1, sizeof(*m));
    if (!m)
        return SQ_ENOMEM;
    in->mem = m;
    m->section = json_incref((json_t *)section);
    int rc = lists_read(in, m, section, err, cap);
    if (rc == 0)
        rc = accept_read(json_object_get(section, "accept"), &in->accept, err, cap);
    if (rc == 0 && !number_at(section, "default_error_rate", 0, 1, &in->opts.default_error_rate))
        rc = bad(err, cap, "judgement.default_error_rate: expected a fraction in [0, 1]");
    if (rc)
        judge_inputs_close(in);
    return rc;
}

void judge_inputs_close(judge_inputs_t *in)
{
    mem_t *m = in->mem;
    if (m) {
        json_decref(m->section);
        free(m->objectives);
        free(m->watch);
        free(m->internal);
        free(m->phases);
        free(m);
    }
    memset(in, 0, sizeof(*in));
}
