/* The /v1/ store API of the embedded target: get an object, list a collection with pagination,
 * create/replace/patch/delete with optional compare-and-swap, and open watch streams. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

static const char ctype_json[] = "application/json";

static const char *arg(struct MHD_Connection *conn, const char *name)
{
    return MHD_lookup_connection_value(conn, MHD_GET_ARGUMENT_KIND, name);
}

/* Strict decimal: digits only, no sign, no overflow. */
static bool parse_u64(const char *s, uint64_t *v)
{
    if (!s || !*s || strlen(s) > 19)
        return false;
    *v = 0;
    for (; *s; s++) {
        if (*s < '0' || *s > '9')
            return false;
        *v = *v * 10 + (uint64_t)(*s - '0');
    }
    return true;
}

static enum MHD_Result reply_obj(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                 unsigned status, const srv_obj_t *o)
{
    struct MHD_Response *r =
        MHD_create_response_from_buffer(o->item_len, o->item, MHD_RESPMEM_MUST_COPY);
    if (!r)
        return MHD_NO;
    char etag[32];
    snprintf(etag, sizeof(etag), "\"%llu\"", (unsigned long long)o->version);
    MHD_add_response_header(r, "Content-Type", ctype_json);
    MHD_add_response_header(r, "ETag", etag);
    if (status == 201)
        MHD_add_response_header(r, "Location", o->path);
    srv_reply_count(sv, method, status);
    srv_access_status(conn, status);
    enum MHD_Result rc = MHD_queue_response(conn, status, r);
    MHD_destroy_response(r);
    return rc;
}

static enum MHD_Result list(srv_server_t *sv, struct MHD_Connection *conn, int method,
                            const char *path, const srv_coll_t *c)
{
    uint64_t limit = 0;
    const char *ls = arg(conn, "limit"), *token = arg(conn, "continue");
    if (ls && !parse_u64(ls, &limit))
        return srv_reply_error(sv, conn, method, 400, "bad-limit",
                               "limit must be a non-negative integer (0 = no limit)");
    size_t i = (c && token && *token) ? srv_coll_after(c, token) : 0, n = c ? c->n : 0;
    size_t end = (limit > 0 && limit < n - i) ? i + limit : n;
    srv_buf_t b = {0};
    int rc = srv_buf_str(&b, "{\"collection\":");
    rc |= srv_buf_json_str(&b, path);
    rc |=
        srv_buf_printf(&b, ",\"version\":%llu,\"items\":[", (unsigned long long)sv->store.version);
    for (size_t k = i; k < end; k++) {
        if (k > i)
            rc |= srv_buf_add(&b, ",", 1);
        rc |= srv_buf_add(&b, c->items[k]->item, c->items[k]->item_len);
    }
    rc |= srv_buf_str(&b, "]");
    /* The token is the last name returned: the next page starts after it in name order, so a
     * member that exists throughout is returned exactly once whatever is written meanwhile. */
    if (end < n) {
        rc |= srv_buf_str(&b, ",\"continue\":");
        rc |= srv_buf_json_str(&b, c->items[end - 1]->name);
    }
    rc |= srv_buf_str(&b, "}");
    enum MHD_Result r = rc < 0 ? srv_reply_error(sv, conn, method, 500, "no-memory", "no memory")
                               : srv_reply(sv, conn, method, 200, ctype_json, b.p, b.len);
    srv_buf_free(&b);
    return r;
}

static enum MHD_Result watch(srv_server_t *sv, struct MHD_Connection *conn, int method,
                             const char *path, bool *is_watch)
{
    srv_store_t *s = &sv->store;
    uint64_t since = s->version;
    const char *ss = arg(conn, "since");
    if (method == SRV_M_HEAD)
        return srv_reply_error(sv, conn, method, 400, "bad-watch", "watch with GET, not HEAD");
    if (ss && !parse_u64(ss, &since))
        return srv_reply_error(sv, conn, method, 400, "bad-since",
                               "since must be a version (a non-negative integer)");
    if (since > s->version) {
        /* A resume point this store never reached: a client of a store that restarted empty.
         * Waiting silently would hide every change made since; 410 sends it to relist. */
        char msg[200];
        s->expired++;
        snprintf(msg, sizeof(msg),
                 "version %llu is ahead of this store (now at %llu; it may have restarted); list "
                 "the collection again and watch from its version",
                 (unsigned long long)since, (unsigned long long)s->version);
        return srv_reply_error(sv, conn, method, 410, "ahead", msg);
    }
    int first = srv_store_history_after(s, since);
    if (first < 0) {
        char msg[256];
        s->expired++;
        snprintf(msg, sizeof(msg),
                 "version %llu is older than the history window (the oldest version a watch can "
                 "resume from is %llu); list the collection again and watch from its version",
                 (unsigned long long)since, (unsigned long long)s->evicted_upto);
        return srv_reply_error(sv, conn, method, 410, "expired", msg);
    }
    *is_watch = true;
    return srv_stream_open(sv, conn, path, first);
}

static enum MHD_Result get(srv_server_t *sv, struct MHD_Connection *conn, int method,
                           const char *path, bool coll_only, bool *is_watch)
{
    const char *w = arg(conn, "watch");
    if (w && (strcmp(w, "1") == 0 || strcmp(w, "true") == 0))
        return watch(sv, conn, method, path, is_watch);
    bool listing = coll_only || arg(conn, "limit") || arg(conn, "continue");
    srv_obj_t *o = listing ? NULL : srv_store_get(&sv->store, path);
    if (o)
        return reply_obj(sv, conn, method, 200, o);
    /* A collection that ever had a member stays listable (possibly empty). */
    srv_coll_t *c = srv_store_coll(&sv->store, path);
    if (!c && !coll_only)
        return srv_reply_error(sv, conn, method, 404, "not-found", "no object or collection here");
    return list(sv, conn, method, path, c);
}

static enum MHD_Result conflict(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                const char *path, uint64_t expect)
{
    const srv_obj_t *o = srv_store_get(&sv->store, path);
    char msg[160];
    snprintf(msg, sizeof(msg), "expected version %llu, the object is at version %llu",
             (unsigned long long)expect, (unsigned long long)(o ? o->version : 0));
    return srv_reply_error(sv, conn, method, 409, "conflict", msg);
}

static enum MHD_Result write_obj(srv_server_t *sv, struct MHD_Connection *conn, int method,
                                 const char *path, const char *body, size_t len)
{
    enum srv_op op = method == SRV_M_PATCH    ? SRV_OP_PATCH
                     : method == SRV_M_DELETE ? SRV_OP_DELETE
                                              : SRV_OP_PUT;
    uint64_t expect = 0;
    const char *vs = arg(conn, "version");
    if (vs && !parse_u64(vs, &expect))
        return srv_reply_error(sv, conn, method, 400, "bad-version",
                               "version must be the expected object version (0 = must not exist)");
    json_t *doc = NULL;
    if (op != SRV_OP_DELETE) {
        json_error_t je;
        if (!(doc = json_loadb(body, len, JSON_DECODE_ANY, &je))) {
            char msg[256];
            sv->bad_json++;
            snprintf(msg, sizeof(msg), "malformed JSON body at line %d column %d: %s", je.line,
                     je.column, je.text);
            return srv_reply_error(sv, conn, method, 400, "bad-json", msg);
        }
    }
    srv_obj_t *o;
    int status = srv_store_write(&sv->store, op, path, doc, vs ? (int64_t)expect : -1, &o);
    json_decref(doc);
    if (status == 409)
        return conflict(sv, conn, method, path, expect);
    if (status == 404)
        return srv_reply_error(sv, conn, method, 404, "not-found", "no object here");
    if (status == 204)
        return srv_reply(sv, conn, method, 204, NULL, "", 0);
    if (!o)
        return srv_reply_error(sv, conn, method, 500, "no-memory", "out of memory");
    return reply_obj(sv, conn, method, (unsigned)status, o);
}

enum MHD_Result srv_api_serve(srv_server_t *sv, struct MHD_Connection *conn, int method,
                              const char *url, const char *body, size_t len, bool *is_watch)
{
    char path[520];
    size_t n = strlen(url);
    bool coll_only = n > 4 && url[n - 1] == '/';
    if (n >= sizeof(path) - 1)
        n = sizeof(path) - 2; /* too long: fails the check below */
    memcpy(path, url, n);
    path[n - (coll_only ? 1 : 0)] = '\0';
    if (!srv_path_valid(path)) {
        sv->bad_path++;
        return srv_reply_error(sv, conn, method, 400, "bad-path",
                               "a path is /v1/ then 1 to 16 segments of letters, digits and . _ ~ "
                               "- (512 bytes at most)");
    }
    if (method == SRV_M_GET || method == SRV_M_HEAD)
        return get(sv, conn, method, path, coll_only, is_watch);
    if (coll_only) {
        sv->bad_path++;
        return srv_reply_error(sv, conn, method, 400, "bad-path",
                               "writes name an object, not a collection (drop the trailing /)");
    }
    return write_obj(sv, conn, method, path, body, len);
}
