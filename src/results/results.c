/* The in-memory results of a run: meta, cells with lazily created histograms, sections.
 * The file format lives in results_json.c, merging in results_merge.c. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

#include <openssl/evp.h>

#include "results_int.h"
#include "squall/err.h"

static const char *const metric_names[] = {
#define RESULTS_METRIC_NAME(id, name) name,
    RESULTS_METRIC_MAP(RESULTS_METRIC_NAME)
#undef RESULTS_METRIC_NAME
};

const char *results_metric_name(enum results_metric m)
{
    return (unsigned)m < RESULTS_M__COUNT ? metric_names[m] : NULL;
}

int results_metric_from_name(const char *name)
{
    for (int m = 0; m < RESULTS_M__COUNT; m++)
        if (strcmp(metric_names[m], name) == 0)
            return m;
    return SQ_ENOTFOUND;
}

int results_new_with(int64_t lowest, int64_t highest, int digits, results_t **out)
{
    *out = NULL;
    hist_t *probe;
    int rc = hist_new(lowest, highest, digits, &probe);
    if (rc != 0)
        return rc;
    hist_free(probe);
    results_t *r = calloc(1, sizeof(*r));
    if (!r)
        return SQ_ENOMEM;
    r->lowest = lowest;
    r->highest = highest;
    r->digits = digits;
    r->meta.shard_index = r->meta.shard_count = 1;
    r->sections = json_object();
    r->inputs = json_array();
    char host[256] = "";
    if (gethostname(host, sizeof host - 1) != 0)
        host[0] = '\0';
    if (!r->sections || !r->inputs || results_meta_str(&r->meta.squall_version, SQUALL_VERSION) ||
        (host[0] && results_meta_str(&r->meta.host, host))) {
        results_free(r);
        return SQ_ENOMEM;
    }
    *out = r;
    return 0;
}

int results_new(results_t **out)
{
    return results_new_with(HIST_NS_LOWEST, HIST_NS_HIGHEST, HIST_NS_DIGITS, out);
}

static void cell_free(results_cell_t *c)
{
    for (int m = 0; m < RESULTS_M__COUNT; m++)
        hist_free(c->hists[m]);
    free(c->phase);
    free(c->class_name);
    free(c->outcome);
    free(c);
}

void results_free(results_t *r)
{
    if (!r)
        return;
    for (size_t i = 0; i < r->ncells; i++)
        cell_free(r->cells[i]);
    free(r->cells);
    const char **strs[] = {&r->meta.plan_path, &r->meta.plan_sha256, &r->meta.squall_version,
                           &r->meta.host,      &r->meta.stop_reason, &r->meta.target_url};
    for (size_t i = 0; i < sizeof strs / sizeof strs[0]; i++)
        free((char *)*strs[i]);
    json_decref(r->sections);
    json_decref(r->inputs);
    free(r);
}

int results_meta_str(const char **slot, const char *s)
{
    char *copy = NULL;
    if (s && !(copy = strdup(s)))
        return SQ_ENOMEM;
    free((char *)*slot);
    *slot = copy;
    return 0;
}

const results_meta_t *results_meta(const results_t *r)
{
    return &r->meta;
}

void results_hist_config(const results_t *r, int64_t *lowest, int64_t *highest, int *digits)
{
    *lowest = r->lowest;
    *highest = r->highest;
    *digits = r->digits;
}

static void hex_digest(const unsigned char *md, char *hex)
{
    for (int i = 0; i < 32; i++)
        snprintf(hex + 2 * i, 3, "%02x", md[i]);
}

/* SHA-256 of the file at path (libcrypto's EVP interface, read in 16 KiB pieces). */
static int digest_file(const char *path, char *hex, out_t *o)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        out_error(o, "%s: cannot read plan: %m", path);
        return SQ_EIO;
    }
    EVP_MD_CTX *ctx = EVP_MD_CTX_new();
    int rc = ctx && EVP_DigestInit_ex(ctx, EVP_sha256(), NULL) ? 0 : SQ_ENOMEM;
    unsigned char buf[16384];
    size_t n;
    while (rc == 0 && (n = fread(buf, 1, sizeof buf, f)) > 0)
        rc = EVP_DigestUpdate(ctx, buf, n) ? 0 : SQ_EINTERNAL;
    if (rc == 0 && ferror(f)) {
        out_error(o, "%s: cannot read plan", path);
        rc = SQ_EIO;
    }
    unsigned char md[32];
    unsigned int mdlen = 0;
    if (rc == 0)
        rc = EVP_DigestFinal_ex(ctx, md, &mdlen) && mdlen == 32 ? 0 : SQ_EINTERNAL;
    if (rc == 0)
        hex_digest(md, hex);
    EVP_MD_CTX_free(ctx);
    fclose(f);
    return rc;
}

int results_set_plan(results_t *r, const char *path, const void *data, size_t len, out_t *o)
{
    char hex[65];
    if (data) {
        unsigned char md[32];
        unsigned int mdlen = 0;
        if (!EVP_Digest(data, len, md, &mdlen, EVP_sha256(), NULL) || mdlen != 32)
            return SQ_EINTERNAL;
        hex_digest(md, hex);
    } else {
        int rc = digest_file(path, hex, o);
        if (rc != 0)
            return rc;
    }
    if (results_meta_str(&r->meta.plan_path, path) || results_meta_str(&r->meta.plan_sha256, hex))
        return SQ_ENOMEM;
    return 0;
}

int results_set_target(results_t *r, const char *url)
{
    if (!url)
        return results_meta_str(&r->meta.target_url, NULL);
    char *copy = strdup(url);
    if (!copy)
        return SQ_ENOMEM;
    /* Drop "user:password@" from the authority so credentials never reach a results file. */
    char *auth = strstr(copy, "://");
    auth = auth ? auth + 3 : copy;
    size_t auth_len = strcspn(auth, "/?#");
    char *at = NULL;
    for (char *p = auth; p < auth + auth_len; p++)
        if (*p == '@')
            at = p;
    if (at)
        memmove(auth, at + 1, strlen(at + 1) + 1);
    free((char *)r->meta.target_url);
    r->meta.target_url = copy;
    return 0;
}

void results_set_start(results_t *r, int64_t unix_ms)
{
    r->meta.start_unix_ms = unix_ms;
}

void results_set_duration(results_t *r, int64_t ns)
{
    r->meta.duration_ns = ns;
}

int results_set_shard(results_t *r, int index, int count)
{
    if (count < 1 || index < 1 || index > count)
        return SQ_EINVAL;
    r->meta.shard_index = index;
    r->meta.shard_count = count;
    return 0;
}

int results_set_stopped(results_t *r, const char *reason)
{
    r->meta.interrupted = true;
    return results_meta_str(&r->meta.stop_reason, reason);
}

/* FNV-1a over the three keys, each followed by a zero byte so ("ab","c") != ("a","bc"). */
static uint64_t key_hash(const char *phase, const char *class_name, const char *outcome)
{
    uint64_t h = 14695981039346656037u;
    const char *keys[] = {phase, class_name, outcome};
    for (int k = 0; k < 3; k++) {
        for (const char *p = keys[k];; p++) {
            h = (h ^ (unsigned char)*p) * 1099511628211u;
            if (!*p)
                break;
        }
    }
    return h;
}

results_cell_t *results_cell_find(const results_t *r, const char *phase, const char *class_name,
                                  const char *outcome)
{
    uint64_t h = key_hash(phase, class_name, outcome);
    for (size_t i = 0; i < r->ncells; i++) {
        results_cell_t *c = r->cells[i];
        if (c->hash == h && strcmp(c->phase, phase) == 0 &&
            strcmp(c->class_name, class_name) == 0 && strcmp(c->outcome, outcome) == 0)
            return c;
    }
    return NULL;
}

results_cell_t *results_cell(results_t *r, const char *phase, const char *class_name,
                             const char *outcome)
{
    results_cell_t *c = results_cell_find(r, phase, class_name, outcome);
    if (c)
        return c;
    if (r->ncells == r->cap) {
        size_t cap = r->cap ? 2 * r->cap : 16;
        results_cell_t **cells = realloc(r->cells, cap * sizeof(*cells));
        if (!cells)
            return NULL;
        r->cells = cells;
        r->cap = cap;
    }
    c = calloc(1, sizeof(*c));
    if (!c)
        return NULL;
    c->phase = strdup(phase);
    c->class_name = strdup(class_name);
    c->outcome = strdup(outcome);
    if (!c->phase || !c->class_name || !c->outcome) {
        cell_free(c);
        return NULL;
    }
    c->hash = key_hash(phase, class_name, outcome);
    c->owner = r;
    r->cells[r->ncells++] = c;
    return c;
}

hist_t *results_cell_hist(results_cell_t *c, enum results_metric m)
{
    if ((unsigned)m >= RESULTS_M__COUNT)
        return NULL;
    if (!c->hists[m] &&
        hist_new(c->owner->lowest, c->owner->highest, c->owner->digits, &c->hists[m]) != 0)
        return NULL;
    return c->hists[m];
}

const hist_t *results_cell_hist_find(const results_cell_t *c, enum results_metric m)
{
    return (unsigned)m < RESULTS_M__COUNT ? c->hists[m] : NULL;
}

results_counters_t *results_cell_counters(results_cell_t *c)
{
    return &c->counters;
}

const char *results_cell_phase(const results_cell_t *c)
{
    return c->phase;
}

const char *results_cell_class(const results_cell_t *c)
{
    return c->class_name;
}

const char *results_cell_outcome(const results_cell_t *c)
{
    return c->outcome;
}

size_t results_cell_count(const results_t *r)
{
    return r->ncells;
}

results_cell_t *results_cell_at(const results_t *r, size_t i)
{
    return i < r->ncells ? r->cells[i] : NULL;
}

bool results_reserved_name(const char *name)
{
    static const char *const reserved[] = {"format",    "version", "meta",
                                           "histogram", "cells",   "sections"};
    for (size_t i = 0; i < sizeof reserved / sizeof reserved[0]; i++)
        if (strcmp(name, reserved[i]) == 0)
            return true;
    return false;
}

int results_set_section(results_t *r, const char *name, json_t *value)
{
    if (!name || !*name || results_reserved_name(name) || !json_is_object(value)) {
        json_decref(value);
        return SQ_EINVAL;
    }
    return json_object_set_new(r->sections, name, value) == 0 ? 0 : SQ_ENOMEM;
}

json_t *results_section(const results_t *r, const char *name)
{
    return json_object_get(r->sections, name);
}

json_t *results_sections(const results_t *r)
{
    return r->sections;
}

size_t results_input_count(const results_t *r)
{
    return json_array_size(r->inputs);
}

json_t *results_inputs(const results_t *r)
{
    return r->inputs;
}

static bool str_eq(const char *a, const char *b)
{
    return (!a && !b) || (a && b && strcmp(a, b) == 0);
}

static bool meta_equal(const results_meta_t *a, const results_meta_t *b)
{
    return str_eq(a->plan_path, b->plan_path) && str_eq(a->plan_sha256, b->plan_sha256) &&
           a->start_unix_ms == b->start_unix_ms && a->duration_ns == b->duration_ns &&
           str_eq(a->squall_version, b->squall_version) && str_eq(a->host, b->host) &&
           a->shard_index == b->shard_index && a->shard_count == b->shard_count &&
           a->interrupted == b->interrupted && str_eq(a->stop_reason, b->stop_reason) &&
           str_eq(a->target_url, b->target_url);
}

static bool cell_equal(const results_cell_t *a, const results_cell_t *b)
{
    if (strcmp(a->phase, b->phase) || strcmp(a->class_name, b->class_name) ||
        strcmp(a->outcome, b->outcome) || memcmp(&a->counters, &b->counters, sizeof a->counters))
        return false;
    for (int m = 0; m < RESULTS_M__COUNT; m++) {
        const hist_t *x = a->hists[m], *y = b->hists[m];
        if (!x != !y || (x && (!hist_equal(x, y) || hist_clamped(x) != hist_clamped(y) ||
                               hist_overflow(x) != hist_overflow(y))))
            return false;
    }
    return true;
}

bool results_equal(const results_t *a, const results_t *b)
{
    if (a->lowest != b->lowest || a->highest != b->highest || a->digits != b->digits ||
        !meta_equal(&a->meta, &b->meta) || a->ncells != b->ncells ||
        !json_equal(a->sections, b->sections) || !json_equal(a->inputs, b->inputs))
        return false;
    for (size_t i = 0; i < a->ncells; i++)
        if (!cell_equal(a->cells[i], b->cells[i]))
            return false;
    return true;
}

void results_format_time(int64_t unix_ms, char *buf)
{
    time_t sec = (time_t)(unix_ms / 1000);
    int ms = (int)(unix_ms % 1000);
    if (ms < 0) {
        ms += 1000;
        sec -= 1;
    }
    struct tm tm;
    gmtime_r(&sec, &tm);
    size_t n = strftime(buf, 24, "%Y-%m-%dT%H:%M:%S", &tm);
    snprintf(buf + n, 32 - n, ".%03dZ", ms);
}

bool results_parse_time(const char *s, int64_t *unix_ms)
{
    struct tm tm = {0};
    int ms, used = 0;
    if (sscanf(s, "%4d-%2d-%2dT%2d:%2d:%2d.%3dZ%n", &tm.tm_year, &tm.tm_mon, &tm.tm_mday,
               &tm.tm_hour, &tm.tm_min, &tm.tm_sec, &ms, &used) != 7 ||
        used != 24 || s[used] != '\0')
        return false;
    if (tm.tm_mon < 1 || tm.tm_mon > 12 || tm.tm_mday < 1 || tm.tm_mday > 31 || tm.tm_hour > 23 ||
        tm.tm_min > 59 || tm.tm_sec > 60 || ms < 0)
        return false;
    tm.tm_year -= 1900;
    tm.tm_mon -= 1;
    *unix_ms = (int64_t)timegm(&tm) * 1000 + ms;
    return true;
}
