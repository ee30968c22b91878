/* The derived plan as YAML: target, variables, classes, one phase and the objectives, each with
 * a comment saying what was measured in the log (or that a value is common practice). */
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include "prof_int.h"
#include "squall/err.h"
#include "squall/value.h"

#define NS INT64_C(1000000000)

/* A count as every squall output writes one: no thousands separators (DEVELOPERS.md). */
static const char *num(uint64_t v, char *buf, size_t len)
{
    snprintf(buf, len, "%llu", (unsigned long long)v);
    return buf;
}

/* A duration in plan syntax: whole seconds, minutes or hours when exact, else milliseconds. */
static const char *dur(int64_t ns, char *buf, size_t len)
{
    if (ns % (3600 * NS) == 0 && ns > 0)
        snprintf(buf, len, "%lldh", (long long)(ns / (3600 * NS)));
    else if (ns % (60 * NS) == 0 && ns > 0)
        snprintf(buf, len, "%lldm", (long long)(ns / (60 * NS)));
    else if (ns % NS == 0)
        snprintf(buf, len, "%llds", (long long)(ns / NS));
    else
        snprintf(buf, len, "%lldms", (long long)((ns + 500000) / 1000000));
    return buf;
}

/* A rate in plan syntax, per second unless that would need an exponent. */
static const char *rate(double r, char *buf, size_t len)
{
    if (r >= 0.01)
        snprintf(buf, len, "%.4g/s", r);
    else
        snprintf(buf, len, "%.4g/h", r * 3600);
    return buf;
}

static const char *ms(int64_t ns, char *buf, size_t len)
{
    if (ns >= NS)
        snprintf(buf, len, "%.3g s", (double)ns / 1e9);
    else
        snprintf(buf, len, "%.3g ms", (double)ns / 1e6);
    return buf;
}

static const char *utc(int64_t ns, char *buf, size_t len)
{
    time_t t = (time_t)(ns / NS);
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(buf, len, "%Y-%m-%dT%H:%M:%SZ", &tm);
    return buf;
}

/* The code point of the UTF-8 sequence at s (RFC 3629: no overlong forms, no surrogates, at
 * most U+10FFFF) and its length in *k, or -1. */
static long utf8_at(const unsigned char *s, size_t n, size_t *k)
{
    unsigned char c = s[0];
    size_t len = c < 0x80             ? 1
                 : (c & 0xe0) == 0xc0 ? 2
                 : (c & 0xf0) == 0xe0 ? 3
                 : (c & 0xf8) == 0xf0 ? 4
                                      : 0;
    if (len == 0 || len > n)
        return -1;
    long cp = len == 1 ? c : c & (0x7f >> len);
    for (size_t j = 1; j < len; j++) {
        if ((s[j] & 0xc0) != 0x80)
            return -1;
        cp = (cp << 6) | (s[j] & 0x3f);
    }
    static const long least[] = {0, 0, 0x80, 0x800, 0x10000};
    if (cp < least[len] || (cp >= 0xd800 && cp < 0xe000) || cp > 0x10ffff)
        return -1;
    *k = len;
    return cp;
}

/* YAML 1.2 §5.1 c-printable. */
static bool printable(long cp)
{
    return cp == 0x85 || (cp >= 0x20 && cp <= 0x7e) || (cp >= 0xa0 && cp <= 0xd7ff) ||
           (cp >= 0xe000 && cp <= 0xfffd) || cp >= 0x10000;
}

static bool utf8_ok(const char *s, size_t n)
{
    size_t k;
    for (size_t i = 0; i < n; i += k)
        if (utf8_at((const unsigned char *)s + i, n - i, &k) < 0)
            return false;
    return true;
}

/* A YAML double-quoted scalar (YAML 1.2 §7.3.1) of valid UTF-8 text (check with utf8_ok);
 * with tmpl, "{{" is written as the template's literal "{{{{". */
static void quoted(FILE *f, const char *s, size_t n, bool tmpl)
{
    fputc('"', f);
    size_t k;
    for (size_t i = 0; i < n; i += k) {
        long cp = utf8_at((const unsigned char *)s + i, n - i, &k);
        if (cp < 0) { /* not reached after utf8_ok */
            k = 1;
            continue;
        }
        if (cp == '"' || cp == '\\')
            fprintf(f, "\\%c", (int)cp);
        else if (cp == '\n')
            fputs("\\n", f);
        else if (cp == '\t')
            fputs("\\t", f);
        else if (!printable(cp))
            fprintf(f, cp > 0xffff ? "\\U%08lx" : "\\u%04lx", cp);
        else if (tmpl && cp == '{' && i + 1 < n && s[i + 1] == '{')
            fputs("{{{{", f), k = 2;
        else
            fwrite(s + i, 1, k, f);
    }
    fputc('"', f);
}

/* ---- sections -------------------------------------------------------------------------- */

static void header(const prof_t *p, FILE *f)
{
    char a[32], b[32], c[40], d[40], e[32];
    static const char *const what[] = {"", "Common Log Format", "Combined Log Format", "NDJSON"};
    fprintf(f, "# A plan derived by `squall profile` from %s\n", p->log_path);
    fprintf(f, "# (%s%s): %s requests from %s to %s (%s s), time resolution %s.\n",
            what[p->log.format], p->log.gzip ? ", gzip" : "", num(p->records, a, sizeof a),
            utc(p->t0, c, sizeof c), utc(p->t1, d, sizeof d),
            num((uint64_t)prof_span_s(p), b, sizeof b), ms(p->res, e, sizeof e));
    if (p->log.malformed)
        fprintf(f, "# %s malformed lines were skipped.\n", num(p->log.malformed, a, sizeof a));
    if (p->no_method)
        fprintf(f, "# Left out: %s requests with methods a plan cannot send (e.g. %s).\n",
                num(p->no_method, a, sizeof a), p->no_method_names);
    if (p->no_shape || p->too_many_classes)
        fprintf(f, "# Left out: %s requests past the limits on path shapes and classes.\n",
                num(p->no_shape + p->too_many_classes, a, sizeof a));
    if (p->untracked)
        fprintf(f, "# %s requests came from keys past the %u tracked for fleets.\n",
                num(p->untracked, a, sizeof a), PROF_MAX_KEYS);
    fprintf(f, "# Comments give what was measured in that log; \"common practice\" marks what was "
               "not.\n# Edit freely: point target.url at staging, rename classes, scale rates "
               "and agents.\n");
}

static const prof_fleet_t *fleet_of(const prof_t *p, size_t cls)
{
    for (size_t i = 0; i < p->n_fleets; i++)
        if (p->fleets[i].in_plan && p->fleets[i].cls == cls)
            return &p->fleets[i];
    return NULL;
}

static const prof_fleet_t *primary(const prof_t *p)
{
    const prof_fleet_t *b = NULL;
    for (size_t i = 0; i < p->n_fleets; i++)
        if (p->fleets[i].in_plan && (!b || p->fleets[i].requests > b->requests))
            b = &p->fleets[i];
    return b;
}

/* Connections: twice the open loop's mean concurrency by Little's law (L = λW; Little,
 * Operations Research 9(3), 1961), at least an aligned fleet's burst, within 16..256. */
static void target(const prof_t *p, FILE *f)
{
    double l = 0;
    for (size_t i = 0; i < p->n_cls; i++)
        if (p->cls[i].kind != PLAN_WATCH && p->cls[i].dur_n)
            l += (double)p->cls[i].residual / (double)prof_span_s(p) *
                 (p->cls[i].dur_sum / (double)p->cls[i].dur_n / 1e9);
    const prof_fleet_t *fl = primary(p);
    double burst = fl && fl->aligned ? fl->agents : 0;
    double want = fmax(fmax(16, ceil(2 * l)), burst);
    int conns = want > 256 ? 256 : (int)want;
    fprintf(f,
            "# connections: 2 x the open loop's mean requests in flight by Little's law (%.3g), "
            "at least\n# the aligned fleet's burst (%.0f), within 16..256.\n",
            l, burst);
    fprintf(f, "target: {url: ");
    quoted(f, p->cfg.target_url, strlen(p->cfg.target_url), false);
    fprintf(f, ", http: \"1.1\", connections: %d, timeout: 10s}\n", conns);
}

/* The variables some class's path uses as a word list. */
static bool used(const prof_t *p, uint32_t var)
{
    for (size_t i = 0; i < p->n_cls; i++)
        for (uint32_t n = p->cls[i].node; n != 0; n = p->trie.nodes[n].parent)
            if (p->trie.nodes[n].var == var && p->trie.vars[var].name[0]) {
                const prof_fleet_t *fl = fleet_of(p, i);
                if (!fl || fl->agent_var != n)
                    return true;
            }
    return false;
}

static void vars(const prof_t *p, FILE *f)
{
    bool any = false;
    for (uint32_t v = 0; v < p->trie.n_vars; v++) {
        const prof_var_t *var = &p->trie.vars[v];
        if (!used(p, v))
            continue;
        if (!any)
            fprintf(f, "vars:\n");
        any = true;
        fprintf(f, "  # %zu values seen%s\n  %s: [", var->n_values,
                var->more ? " (more were: a sample of the first 64)" : "", var->name);
        for (size_t i = 0; i < var->n_values; i++) {
            fprintf(f, "%s", i ? ", " : "");
            quoted(f, var->values[i], strlen(var->values[i]), false);
        }
        fprintf(f, "]\n");
    }
}

/* The comment above a class: counts, answers, server time. */
static void class_comment(const prof_t *p, const prof_class_t *c, FILE *f)
{
    char a[32], b[32], x[32], y[32];
    fprintf(f, "  # %s %s requests: answers", num(c->count, a, sizeof a),
            c->kind == PLAN_WATCH ? "watch" : c->method);
    for (int d = 1; d <= 5; d++)
        if (c->status[d])
            fprintf(f, " %dxx %s", d, num(c->status[d], b, sizeof b));
    if (c->status[0])
        fprintf(f, " none logged %s", num(c->status[0], b, sizeof b));
    if (c->dur_n && c->kind != PLAN_WATCH)
        fprintf(f, "; server time p50 %s, p99 %s", ms(prof_class_quantile(c, 0.5), x, sizeof x),
                ms(prof_class_quantile(c, 0.99), y, sizeof y));
    fprintf(f, "\n");
    if (c->n_q) {
        fprintf(f, "  # query parameters left out:");
        for (size_t i = 0; i < c->n_q; i++)
            fprintf(f, " %s", c->qnames[i]);
        fprintf(f, "\n");
    }
    (void)p;
}

static void list_keys(const prof_class_t *c, FILE *f)
{
    char a[32], b[32], t[32];
    size_t best = 0;
    for (size_t i = 1; i < c->n_limits; i++)
        if (c->limits[i].n > c->limits[best].n)
            best = i;
    if (c->n_limits)
        fprintf(f, "  # page size %lld in %s of %s requests;", (long long)c->limits[best].v,
                num(c->limits[best].n, a, sizeof a), num(c->count, b, sizeof b));
    else
        fprintf(f, "  # no page size (limit) seen;");
    fprintf(f, " continuation tokens in %s%s\n", num(c->with_token, t, sizeof t),
            c->with_token ? " (pages were followed)" : "");
}

static void write_keys(const prof_class_t *c, FILE *f)
{
    char a[32];
    fprintf(f, ", method: %s", c->method);
    if (strcmp(c->method, "DELETE") != 0) {
        fprintf(f, ", body: ");
        if (c->body && utf8_ok(c->body, c->body_len))
            quoted(f, c->body, c->body_len, true);
        else
            fprintf(f, "'{}'");
    }
    if (c->created * 100 >= c->count && strcmp(c->method, "DELETE") != 0)
        fprintf(f, ", creates: true");
    (void)a;
}

static void one_class(const prof_t *p, size_t i, FILE *f)
{
    const prof_class_t *c = &p->cls[i];
    char path[2048], a[32];
    if (prof_render_path(p, c, fleet_of(p, i), path, sizeof path))
        snprintf(path, sizeof path, "/");
    class_comment(p, c, f);
    if (c->kind == PLAN_LIST)
        list_keys(c, f);
    if (c->kind == PLAN_WRITE) {
        fprintf(f, "  # %s",
                c->body ? "a body as logged (the first one)"
                        : "the log holds no bodies: write the one the target expects");
        if (c->created * 100 >= c->count && strcmp(c->method, "DELETE") != 0)
            fprintf(f, "; %s answers were 201 Created, so creates: true (the run deletes them)",
                    num(c->created, a, sizeof a));
        fprintf(f, "\n");
    }
    fprintf(f, "  %s: {kind: %s, path: ", c->name, plan_kind_name(c->kind));
    quoted(f, path, strlen(path), false);
    if (c->kind == PLAN_LIST) {
        size_t best = 0;
        for (size_t k = 1; k < c->n_limits; k++)
            if (c->limits[k].n > c->limits[best].n)
                best = k;
        if (c->n_limits && c->limits[best].v > 0 && c->limits[best].v <= 1000000)
            fprintf(f, ", page: %lld", (long long)c->limits[best].v);
    } else if (c->kind == PLAN_WRITE) {
        write_keys(c, f);
    }
    fprintf(f, "}\n");
}

static void requests(const prof_t *p, FILE *f)
{
    fprintf(f, "requests:\n");
    for (size_t i = 0; i < p->n_cls; i++)
        one_class(p, i, f);
}

/* ---- the phase ------------------------------------------------------------------------- */

static void open_loop(const prof_t *p, FILE *f)
{
    char a[32], b[32];
    int64_t span = prof_span_s(p);
    fprintf(f,
            "    # open loop: %s requests neither from the fleet nor watches, %s on average;\n"
            "    # steps: %llds bins merged while within %.0f%% (or 3 Poisson standard "
            "deviations)\n",
            num(p->residual, a, sizeof a), rate((double)p->residual / (double)span, b, sizeof b),
            (long long)(p->cfg.bin_ns / NS), p->cfg.tolerance * 100);
    if (p->n_steps == 1) {
        fprintf(f, "    rate: %s\n", rate(p->steps[0].rate, a, sizeof a));
    } else {
        fprintf(f, "    steps:\n");
        for (size_t i = 0; i < p->n_steps; i++)
            fprintf(f, "      - {rate: %s, for: %s}\n", rate(p->steps[i].rate, a, sizeof a),
                    dur(p->steps[i].for_s * NS, b, sizeof b));
    }
    const prof_dispersion_t *d = &p->disp;
    fprintf(f,
            "    # arrivals: index of dispersion of counts in %d s windows within the steps "
            "(Cox & Lewis 1966):\n",
            p->disp_interval_s);
    fprintf(f, "    # D = %.3g (chi-square %.4g on %.0f df, P(lower) = %.3g): %s\n", d->d, d->x2,
            d->df, d->p_low,
            !p->poisson                ? "too regular for Poisson -> even"
            : d->p_high < p->cfg.alpha ? "burstier than Poisson (no plan arrival is) -> poisson"
                                       : "consistent with a Poisson process -> poisson");
    fprintf(f, "    arrivals: %s\n    mix: {", p->poisson ? "poisson" : "even");
    bool first = true;
    for (size_t i = 0; i < p->n_cls; i++) {
        if (p->cls[i].residual == 0)
            continue;
        fprintf(f, "%s%s: %.4g", first ? "" : ", ", p->cls[i].name,
                100.0 * (double)p->cls[i].residual / (double)p->residual);
        first = false;
    }
    fprintf(f, "}\n");
}

static void fleet(const prof_t *p, FILE *f)
{
    const prof_fleet_t *b = primary(p);
    char a[32], e[32];
    for (size_t i = 0; i < p->n_fleets; i++) {
        const prof_fleet_t *x = &p->fleets[i];
        fprintf(f,
                "    # %s %u clients repeat %s every %.4g s (median gap sd %.3g ms), %s "
                "requests%s\n",
                x->in_plan ? "fleet:" : "also periodic:", x->agents, p->cls[x->cls].name,
                (double)x->period_ns / 1e9, x->gap_sd_ns / 1e6, num(x->requests, a, sizeof a),
                x->in_plan ? "" : " (one fleet per phase: these are in the open-loop mix)");
        if (!x->in_plan)
            continue;
        fprintf(f,
                "    #   Rayleigh test of their phases modulo %s (Mardia & Jupp 2000, 6.3; "
                "Zar): R = %.4f,\n    #   Z = %.4g, p = %.3g %s %g: %s (mean phase %.1f ms, "
                "circular sd %.1f ms)\n",
                dur(x->every_ns, e, sizeof e), x->ray.r_bar, x->ray.z, x->ray.p,
                x->aligned ? "<" : ">=", p->cfg.alpha,
                x->aligned ? "they fire together -> aligned" : "uniform phases -> spread",
                x->offset_ms, x->spread_ms);
    }
    fprintf(f, "    fleet: {agents: %u, every: %s, timing: %s, send: ", b->agents,
            dur(b->every_ns, e, sizeof e), b->aligned ? "aligned" : "spread");
    size_t sends = 0;
    for (size_t i = 0; i < p->n_fleets; i++)
        sends += p->fleets[i].in_plan;
    if (sends == 1) {
        fprintf(f, "%s}\n", p->cls[b->cls].name);
        return;
    }
    fprintf(f, "[%s", p->cls[b->cls].name);
    for (size_t i = 0; i < p->n_fleets; i++)
        if (p->fleets[i].in_plan && &p->fleets[i] != b)
            fprintf(f, ", {class: %s, every: %s}", p->cls[p->fleets[i].cls].name,
                    dur(p->fleets[i].every_ns, e, sizeof e));
    fprintf(f, "]}\n");
}

/* Watches: how many are open at the middle of each second of the log, the median over the
 * seconds (robust to reconnect gaps); the mean by Little's law is in the comment. Without
 * durations, the distinct watchers. */
static void watches(const prof_t *p, FILE *f)
{
    char a[32], b[32], line[4096] = "";
    size_t o = 0;
    for (size_t i = 0; i < p->n_cls; i++) {
        const prof_class_t *c = &p->cls[i];
        if (c->kind != PLAN_WATCH)
            continue;
        long n = c->dur_n ? (long)c->open_median : (long)c->keys;
        n = n < 1 ? 1 : n;
        if (c->dur_n)
            fprintf(f,
                    "    # %s: %s streams, median %.3g s open; %u open at the median second, "
                    "%.3g on average\n    # (%.4g stream-seconds over %lld s, Little's law)\n",
                    c->name, num(c->count, a, sizeof a), (double)prof_class_quantile(c, 0.5) / 1e9,
                    c->open_median, c->dur_sum / 1e9 / (double)prof_span_s(p), c->dur_sum / 1e9,
                    (long long)prof_span_s(p));
        else
            fprintf(f, "    # %s: %s streams from %s distinct watchers (no durations logged)\n",
                    c->name, num(c->count, a, sizeof a), num(c->keys, b, sizeof b));
        int w = snprintf(line + o, sizeof line - o, "%s%s: %ld", o ? ", " : "", c->name, n);
        o += w > 0 && (size_t)w < sizeof line - o ? (size_t)w : 0;
    }
    if (o)
        fprintf(f, "    watches: {%s}\n", line);
}

static void phases(const prof_t *p, FILE *f)
{
    char d[32];
    fprintf(f, "phases:\n  - name: ");
    quoted(f, p->cfg.phase_name, strlen(p->cfg.phase_name), false);
    fprintf(f, "\n    duration: %s\n", dur(prof_span_s(p) * NS, d, sizeof d));
    if (p->residual)
        open_loop(p, f);
    if (primary(p))
        fleet(p, f);
    watches(p, f);
}

static void objectives(const prof_t *p, FILE *f)
{
    fprintf(f, "# Objectives: common practice for control planes, not measured here (p99 over a "
               "day at the\n# server; watches excluded): 1 s for single-object reads and writes, "
               "5 s for lists of one\n# collection (30 s for lists of the whole store), at most "
               "1 %% errors. The log's own server\n# times are in each class's comment.\n"
               "objectives:\n");
    for (size_t i = 0; i < p->n_cls; i++)
        if (p->cls[i].kind != PLAN_WATCH)
            fprintf(f, "  - {class: %s, p99: %s}\n", p->cls[i].name,
                    p->cls[i].kind == PLAN_LIST ? "5s" : "1s");
    fprintf(f, "  - {class: \"*\", error-rate: 1%%}\n");
}

int prof_write_plan(const prof_t *p, FILE *f)
{
    header(p, f);
    target(p, f);
    vars(p, f);
    requests(p, f);
    phases(p, f);
    objectives(p, f);
    return ferror(f) ? SQ_EIO : 0;
}
