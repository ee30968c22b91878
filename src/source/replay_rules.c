/* The replay phase's rules: which recorded requests are replayed, into which class, and with
 * which path. Patterns are POSIX extended regular expressions (regcomp, the C library's). */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "replay_int.h"
#include "squall/err.h"

static int compile(regex_t *re, const char *pattern, plan_pos_t pos, out_t *o)
{
    int rc = regcomp(re, pattern, REG_EXTENDED);
    if (rc == 0)
        return 0;
    char msg[160];
    regerror(rc, re, msg, sizeof msg);
    regfree(re);
    out_raw(o, OUT_ERROR,
            "%s:%d:%d: error: replay pattern: %s (expected a POSIX extended regular expression, "
            "got '%s')",
            pos.file, pos.line, pos.col, msg, pattern);
    return SQ_EINVAL;
}

/* A rewrite template: text with {{0}}..{{9}} and {{copy}} and no other {{. It replaces only the
 * matched text, so it need not start with '/': the rewritten path is checked as a whole. */
static int check_template(const char *t, plan_pos_t pos, out_t *o)
{
    const char *p = t;
    bool ok = true;
    while (ok && (p = strstr(p, "{{"))) {
        ok = (p[2] >= '0' && p[2] <= '9' && !strncmp(p + 3, "}}", 2)) ||
             !strncmp(p + 2, "copy}}", 6);
        p += 2;
    }
    if (ok)
        return 0;
    out_raw(o, OUT_ERROR,
            "%s:%d:%d: error: replay rewrite: bad template (expected text with {{0}}..{{9}} "
            "or {{copy}}, got '%s')",
            pos.file, pos.line, pos.col, t);
    return SQ_EINVAL;
}

static int classify_init(rp_rules_t *r, out_t *o)
{
    const plan_phase_t *pp = r->pp;
    int bad = 0;
    for (size_t i = 0; i < pp->replay.n_classify; i++) {
        const plan_replay_rule_t *rule = &pp->replay.classify[i];
        int cls = plan_find_req(r->plan, rule->cls.name);
        r->classify_cls[i] = cls;
        if (cls < 0) {
            out_raw(o, OUT_ERROR,
                    "%s:%d:%d: error: replay classify: unknown class (expected a class of "
                    "requests, got '%s')",
                    rule->cls.pos.file, rule->cls.pos.line, rule->cls.pos.col, rule->cls.name);
            bad = 1;
        }
        int rc = compile(&r->classify[i], rule->match, rule->pos, o);
        if (rc)
            return rc;
        r->n_classify++;
    }
    return bad ? SQ_EINVAL : 0;
}

int rp_rules_init(rp_rules_t *r, const plan_t *plan, const plan_phase_t *pp, out_t *o)
{
    *r = (rp_rules_t){.plan = plan, .pp = pp};
    size_t nr = pp->replay.n_rewrite, nc = pp->replay.n_classify;
    r->rewrite = calloc(nr ? nr : 1, sizeof(regex_t));
    r->classify = calloc(nc ? nc : 1, sizeof(regex_t));
    r->classify_cls = calloc(nc ? nc : 1, sizeof(int));
    if (!r->rewrite || !r->classify || !r->classify_cls)
        return SQ_ENOMEM;
    if (pp->replay.match) {
        if (compile(&r->match, pp->replay.match, pp->replay.match_pos, o))
            return SQ_EINVAL;
        r->has_match = true;
    }
    for (size_t i = 0; i < nr; i++) {
        const plan_replay_rule_t *rule = &pp->replay.rewrite[i];
        if (check_template(rule->to, rule->pos, o) ||
            compile(&r->rewrite[i], rule->match, rule->pos, o))
            return SQ_EINVAL;
        r->n_rewrite++;
    }
    return classify_init(r, o);
}

void rp_rules_close(rp_rules_t *r)
{
    if (r->has_match)
        regfree(&r->match);
    for (size_t i = 0; i < r->n_rewrite; i++)
        regfree(&r->rewrite[i]);
    for (size_t i = 0; i < r->n_classify; i++)
        regfree(&r->classify[i]);
    free(r->rewrite);
    free(r->classify);
    free(r->classify_cls);
    *r = (rp_rules_t){0};
}

/* A collection rather than one object: a list's query (limit, continue) or a last segment that
 * is a plain word (letters, '-', '_'), as in /v1/sites/north/gateways. */
static bool collection_shape(const char *path)
{
    const char *q = strchr(path, '?');
    if (q && (strstr(q, "limit=") || strstr(q, "continue=")))
        return true;
    size_t end = q ? (size_t)(q - path) : strlen(path);
    while (end > 1 && path[end - 1] == '/')
        end--;
    size_t start = end;
    while (start > 0 && path[start - 1] != '/')
        start--;
    if (start == end)
        return false;
    for (size_t i = start; i < end; i++) {
        char ch = path[i];
        if (!((ch >= 'a' && ch <= 'z') || (ch >= 'A' && ch <= 'Z') || ch == '-' || ch == '_'))
            return false;
    }
    return true;
}

/* A recorded watch: a stream when it lasted at least watch-min, else (no duration in the log,
 * or an answer that was not a stream) skipped. */
static enum rp_verdict watch_verdict(const rp_rules_t *r, const alog_record_t *rec)
{
    return rec->duration_ns >= 0 && rec->duration_ns >= r->pp->replay.watch_min_ns ? RP_WATCH
                                                                                   : RP_SKIP_WATCH;
}

enum rp_verdict rp_rules_judge(const rp_rules_t *r, const alog_record_t *rec, int *cls)
{
    const plan_phase_t *pp = r->pp;
    if (pp->replay.n_methods) {
        size_t i = 0;
        while (i < pp->replay.n_methods && strcmp(pp->replay.methods[i], rec->method))
            i++;
        if (i == pp->replay.n_methods)
            return RP_FILTERED;
    }
    if (r->has_match && regexec(&r->match, rec->path, 0, NULL, 0) != 0)
        return RP_FILTERED;
    bool read = !strcmp(rec->method, "GET") || !strcmp(rec->method, "HEAD");
    *cls = -1;
    for (size_t i = 0; i < r->n_classify && *cls < 0; i++)
        if (regexec(&r->classify[i], rec->path, 0, NULL, 0) == 0)
            *cls = r->classify_cls[i];
    const char *q = strchr(rec->path, '?');
    if (read && alog_query_marks(q ? q + 1 : NULL, pp->replay.watch_param)) {
        if (*cls < 0 || r->plan->reqs[*cls].kind != PLAN_WATCH)
            *cls = pp->replay.watch_cls;
        return watch_verdict(r, rec);
    }
    if (*cls < 0) {
        if (!read)
            return RP_SKIP_WRITE;
        *cls = collection_shape(rec->path) ? pp->replay.list_cls : pp->replay.get_cls;
    }
    const plan_req_t *pr = &r->plan->reqs[*cls];
    if (pr->kind == PLAN_WATCH)
        return read ? watch_verdict(r, rec) : RP_SKIP_KIND;
    if (pr->kind != PLAN_WRITE && !read)
        return RP_SKIP_KIND;
    if (pr->kind == PLAN_WRITE && !pr->write.body)
        return RP_SKIP_WRITE;
    return RP_SEND;
}

/* Appends n bytes to dst at *len; false when they do not fit. */
static bool put(char *dst, size_t cap, size_t *len, const char *s, size_t n)
{
    if (*len + n >= cap)
        return false;
    memcpy(dst + *len, s, n);
    *len += n;
    return true;
}

static bool expand(const char *t, const char *path, const regmatch_t *m, int copy, char *dst,
                   size_t cap, size_t *len)
{
    bool ok = true;
    while (ok && *t) {
        const char *open = strstr(t, "{{");
        size_t lit = open ? (size_t)(open - t) : strlen(t);
        ok = put(dst, cap, len, t, lit);
        if (!open || !ok)
            break;
        if (open[2] == 'c') {
            char num[16];
            int n = snprintf(num, sizeof num, "%d", copy);
            ok = put(dst, cap, len, num, (size_t)n);
            t = open + 8;
        } else {
            const regmatch_t *g = &m[open[2] - '0'];
            if (g->rm_so >= 0)
                ok = put(dst, cap, len, path + g->rm_so, (size_t)(g->rm_eo - g->rm_so));
            t = open + 5;
        }
    }
    return ok;
}

size_t rp_rules_path(const rp_rules_t *r, const char *path, int copy, char *dst, size_t cap)
{
    regmatch_t m[10];
    size_t len = 0, i = 0;
    while (i < r->n_rewrite && regexec(&r->rewrite[i], path, 10, m, 0) != 0)
        i++;
    bool ok;
    if (i == r->n_rewrite) {
        ok = put(dst, cap, &len, path, strlen(path));
    } else {
        ok = put(dst, cap, &len, path, (size_t)m[0].rm_so) &&
             expand(r->pp->replay.rewrite[i].to, path, m, copy, dst, cap, &len) &&
             put(dst, cap, &len, path + m[0].rm_eo, strlen(path + m[0].rm_eo));
    }
    if (!ok || len == 0 || dst[0] != '/')
        return 0;
    dst[len] = '\0';
    for (size_t k = 0; k < len; k++)
        if ((unsigned char)dst[k] <= 0x20 || dst[k] == 0x7f)
            return 0; /* a group or template put a control byte or a space in the path */
    return len;
}
