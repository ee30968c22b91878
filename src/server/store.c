/* The target's versioned object store: JSON documents at paths, collections kept sorted for
 * stable pagination, one global version counter, and the bounded event history for watches. */
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

/* ---- A string-keyed hash map: open addressing, linear probing, backward-shift deletion.
 * Keys are owned by the values (an object's or a collection's path). */
typedef struct {
    uint64_t h;
    const char *key;
    void *val;
} slot_t;

struct srv_map {
    slot_t *slots;
    size_t mask, n;
};

static uint64_t hash_str(const char *s)
{
    uint64_t h = 1469598103934665603ULL; /* FNV-1a 64 (common practice) */
    for (; *s; s++)
        h = (h ^ (unsigned char)*s) * 1099511628211ULL;
    return h ? h : 1;
}

static srv_map_t *map_new(void)
{
    srv_map_t *m = calloc(1, sizeof(*m));
    if (!m)
        return NULL;
    m->slots = calloc(1024, sizeof(slot_t));
    if (!m->slots) {
        free(m);
        return NULL;
    }
    m->mask = 1023;
    return m;
}

static size_t map_find(const srv_map_t *m, const char *key, uint64_t h)
{
    size_t i = h & m->mask;
    while (m->slots[i].h && (m->slots[i].h != h || strcmp(m->slots[i].key, key) != 0))
        i = (i + 1) & m->mask;
    return i;
}

static void *map_get(const srv_map_t *m, const char *key)
{
    return m->slots[map_find(m, key, hash_str(key))].val;
}

static int map_grow(srv_map_t *m)
{
    size_t cap = (m->mask + 1) * 2;
    slot_t *old = m->slots, *ns = calloc(cap, sizeof(slot_t));
    if (!ns)
        return SQ_ENOMEM;
    size_t oldcap = m->mask + 1;
    m->slots = ns;
    m->mask = cap - 1;
    for (size_t i = 0; i < oldcap; i++)
        if (old[i].h)
            m->slots[map_find(m, old[i].key, old[i].h)] = old[i];
    free(old);
    return 0;
}

/* Inserts a key that is not present. */
static int map_put(srv_map_t *m, const char *key, void *val)
{
    if ((m->n + 1) * 4 > (m->mask + 1) * 3 && map_grow(m) < 0)
        return SQ_ENOMEM;
    uint64_t h = hash_str(key);
    m->slots[map_find(m, key, h)] = (slot_t){h, key, val};
    m->n++;
    return 0;
}

static void map_del(srv_map_t *m, const char *key)
{
    size_t i = map_find(m, key, hash_str(key)), j = i;
    if (!m->slots[i].h)
        return;
    for (;;) {
        j = (j + 1) & m->mask;
        if (!m->slots[j].h)
            break;
        size_t k = m->slots[j].h & m->mask;
        /* Leave an entry whose home lies cyclically in (i, j]: the hole does not break it. */
        if (i <= j ? (i < k && k <= j) : (i < k || k <= j))
            continue;
        m->slots[i] = m->slots[j];
        i = j;
    }
    m->slots[i] = (slot_t){0, NULL, NULL};
    m->n--;
}

/* ---- Objects and collections */

bool srv_path_valid(const char *path)
{
    size_t len = strlen(path);
    if (len > 512 || strncmp(path, "/v1/", 4) != 0)
        return false;
    int segs = 0;
    const char *p = path + 3;
    while (*p == '/') {
        const char *q = ++p;
        while (*q && *q != '/') {
            char c = *q;
            bool ok = (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') ||
                      c == '.' || c == '_' || c == '~' || c == '-';
            if (!ok)
                return false;
            q++;
        }
        size_t n = (size_t)(q - p);
        if (n == 0 || (n == 1 && p[0] == '.') || (n == 2 && p[0] == '.' && p[1] == '.'))
            return false;
        if (++segs > 16)
            return false;
        p = q;
    }
    return *p == '\0';
}

srv_obj_t *srv_store_get(srv_store_t *s, const char *path)
{
    return map_get(s->objs, path);
}

srv_coll_t *srv_store_coll(srv_store_t *s, const char *path)
{
    return map_get(s->colls, path);
}

srv_coll_t *srv_store_coll_add(srv_store_t *s, const char *path, size_t len)
{
    char key[520];
    memcpy(key, path, len);
    key[len] = '\0';
    srv_coll_t *c = map_get(s->colls, key);
    if (c)
        return c;
    c = calloc(1, sizeof(*c));
    if (!c || !(c->path = strdup(key)) || map_put(s->colls, c->path, c) < 0) {
        if (c)
            free(c->path);
        free(c);
        return NULL;
    }
    return c;
}

/* Position of `name` in c->items, or where it would be inserted. */
static size_t coll_lower_bound(const srv_coll_t *c, const char *name)
{
    size_t lo = 0, hi = c->n;
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (strcmp(c->items[mid]->name, name) < 0)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

size_t srv_coll_after(const srv_coll_t *c, const char *name)
{
    size_t i = coll_lower_bound(c, name);
    return (i < c->n && strcmp(c->items[i]->name, name) == 0) ? i + 1 : i;
}

static int coll_insert(srv_coll_t *c, srv_obj_t *o)
{
    if (c->n == c->cap) {
        size_t cap = c->cap ? c->cap * 2 : 16;
        srv_obj_t **p = realloc(c->items, cap * sizeof(*p));
        if (!p)
            return SQ_ENOMEM;
        c->items = p;
        c->cap = cap;
    }
    size_t i = coll_lower_bound(c, o->name);
    memmove(c->items + i + 1, c->items + i, (c->n - i) * sizeof(*c->items));
    c->items[i] = o;
    c->n++;
    return 0;
}

static void coll_remove(srv_coll_t *c, const srv_obj_t *o)
{
    size_t i = coll_lower_bound(c, o->name);
    if (i < c->n && c->items[i] == o) {
        memmove(c->items + i, c->items + i + 1, (c->n - i - 1) * sizeof(*c->items));
        c->n--;
    }
}

/* Rebuilds the cached item text {"path":..,"version":..,"object":..}. */
static int obj_render(srv_obj_t *o)
{
    char *doc = json_dumps(o->doc, JSON_ENCODE_ANY | JSON_COMPACT);
    if (!doc)
        return SQ_ENOMEM;
    srv_buf_t b = {0};
    int rc = srv_buf_str(&b, "{\"path\":");
    rc |= srv_buf_json_str(&b, o->path);
    rc |=
        srv_buf_printf(&b, ",\"version\":%llu,\"object\":%s}", (unsigned long long)o->version, doc);
    free(doc);
    if (rc < 0) {
        srv_buf_free(&b);
        return SQ_ENOMEM;
    }
    free(o->item);
    o->item = b.p;
    o->item_len = b.len;
    return 0;
}

static void obj_free(srv_obj_t *o)
{
    json_decref(o->doc);
    free(o->item);
    free(o->path);
    free(o);
}

static srv_obj_t *obj_new(srv_store_t *s, const char *path)
{
    const char *slash = strrchr(path, '/');
    srv_coll_t *c = srv_store_coll_add(s, path, (size_t)(slash - path));
    srv_obj_t *o = c ? calloc(1, sizeof(*o)) : NULL;
    if (!o || !(o->path = strdup(path)))
        goto fail;
    o->name = o->path + (slash - path) + 1;
    o->coll = c;
    if (map_put(s->objs, o->path, o) < 0)
        goto fail;
    if (coll_insert(c, o) < 0) {
        map_del(s->objs, o->path);
        goto fail;
    }
    return o;
fail:
    if (o)
        free(o->path);
    free(o);
    return NULL;
}

/* ---- History */

static void history_push(srv_store_t *s, const char *type, const srv_obj_t *o)
{
    srv_buf_t b = {0};
    if (srv_buf_printf(&b, "{\"type\":\"%s\",%s\n", type, o->item + 1) < 0)
        return; /* Out of memory: watchers miss the event; the version still advanced. */
    if (s->ring_len == s->ring_cap) {
        srv_event_t *old = &s->ring[s->ring_head];
        s->evicted_upto = old->version;
        free(old->line);
        s->ring_head = (s->ring_head + 1) % s->ring_cap;
        s->ring_len--;
    }
    srv_event_t *ev = &s->ring[(s->ring_head + s->ring_len) % s->ring_cap];
    *ev = (srv_event_t){o->version, o->coll, b.p, b.len};
    s->ring_len++;
    if (s->on_event)
        s->on_event(s->on_event_arg, ev);
}

const srv_event_t *srv_store_history_at(const srv_store_t *s, int i)
{
    return &s->ring[(s->ring_head + i) % s->ring_cap];
}

int srv_store_history_after(const srv_store_t *s, uint64_t since)
{
    if (since < s->evicted_upto)
        return -1;
    int lo = 0, hi = s->ring_len;
    while (lo < hi) {
        int mid = lo + (hi - lo) / 2;
        if (srv_store_history_at(s, mid)->version <= since)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

/* ---- Writes */

json_t *srv_merge_patch(const json_t *target, const json_t *patch)
{
    /* RFC 7386 section 2, the MergePatch pseudo-code, returning a fresh value. */
    if (!json_is_object(patch))
        return json_deep_copy(patch);
    json_t *out = json_is_object(target) ? json_deep_copy(target) : json_object();
    const char *k;
    json_t *v;
    json_object_foreach((json_t *)patch, k, v)
    {
        if (!out)
            return NULL;
        if (json_is_null(v)) {
            json_object_del(out, k);
            continue;
        }
        json_t *m = srv_merge_patch(json_object_get(out, k), v);
        if (!m || json_object_set_new(out, k, m) < 0) {
            json_decref(out);
            return NULL;
        }
    }
    return out;
}

static int do_delete(srv_store_t *s, srv_obj_t *o)
{
    o->version = ++s->version;
    if (obj_render(o) == 0)
        history_push(s, "delete", o);
    map_del(s->objs, o->path);
    coll_remove(o->coll, o);
    obj_free(o);
    s->n_objects--;
    s->deletes++;
    return 204;
}

int srv_store_write(srv_store_t *s, enum srv_op op, const char *path, json_t *body, int64_t expect,
                    srv_obj_t **obj)
{
    srv_obj_t *o = srv_store_get(s, path);
    *obj = NULL;
    if (expect >= 0 && (o ? (int64_t)o->version : 0) != expect) {
        s->conflicts++;
        return 409;
    }
    if (!o && op != SRV_OP_PUT)
        return 404;
    if (op == SRV_OP_DELETE)
        return do_delete(s, o);
    json_t *doc = op == SRV_OP_PATCH ? srv_merge_patch(o->doc, body) : json_incref(body);
    if (!doc)
        return 500;
    bool created = !o;
    if (created && !(o = obj_new(s, path))) {
        json_decref(doc);
        return 500;
    }
    json_t *old = o->doc;
    uint64_t old_version = o->version;
    o->doc = doc;
    o->version = s->version + 1;
    if (obj_render(o) < 0) {
        o->doc = old;
        o->version = old_version;
        json_decref(doc);
        if (created) {
            /* Out of memory before anything was announced: undo the insertion quietly. */
            map_del(s->objs, o->path);
            coll_remove(o->coll, o);
            obj_free(o);
        }
        return 500;
    }
    json_decref(old);
    s->version++;
    s->n_objects += created;
    *(created ? &s->creates : op == SRV_OP_PATCH ? &s->patches : &s->replaces) += 1;
    history_push(s, created ? "create" : "update", o);
    *obj = o;
    return created ? 201 : 200;
}

int srv_store_init(srv_store_t *s, int history)
{
    memset(s, 0, sizeof(*s));
    s->ring_cap = history > 0 ? history : 1;
    s->ring = calloc((size_t)s->ring_cap, sizeof(*s->ring));
    s->objs = map_new();
    s->colls = map_new();
    if (!s->ring || !s->objs || !s->colls) {
        srv_store_close(s);
        return SQ_ENOMEM;
    }
    return 0;
}

static void map_free(srv_map_t *m, void (*free_val)(void *))
{
    if (!m)
        return;
    for (size_t i = 0; i <= m->mask; i++)
        if (m->slots[i].h)
            free_val(m->slots[i].val);
    free(m->slots);
    free(m);
}

static void obj_free_v(void *v)
{
    obj_free(v);
}

static void coll_free_v(void *v)
{
    srv_coll_t *c = v;
    free(c->items);
    free(c->path);
    free(c);
}

void srv_store_close(srv_store_t *s)
{
    map_free(s->objs, obj_free_v);
    map_free(s->colls, coll_free_v);
    for (int i = 0; s->ring && i < s->ring_len; i++)
        free(s->ring[(s->ring_head + i) % s->ring_cap].line);
    free(s->ring);
    memset(s, 0, sizeof(*s));
}
