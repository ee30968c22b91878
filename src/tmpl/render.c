/* Template rendering: segments written into a caller's buffer; the hot path never allocates,
 * and numbers are formatted by hand (no locale, no printf). */
#include <stdlib.h>
#include <string.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "tmpl_int.h"

/* Writes what fits and counts everything, so one pass both renders and measures. */
typedef struct {
    char *dst;
    size_t cap, len;
} writer_t;

static void put(writer_t *w, const char *p, size_t n)
{
    if (w->len + n <= w->cap)
        memcpy(w->dst + w->len, p, n);
    w->len += n;
}

/* Decimal, with a '-' for negatives and zero-padding of the digits to `width`. */
static void put_int(writer_t *w, int64_t v, int width)
{
    char buf[48];
    size_t i = sizeof(buf);
    uint64_t u = v < 0 ? (uint64_t)0 - (uint64_t)v : (uint64_t)v;
    do {
        buf[--i] = (char)('0' + u % 10);
        u /= 10;
    } while (u);
    while (sizeof(buf) - i < (size_t)width)
        buf[--i] = '0';
    if (v < 0)
        buf[--i] = '-';
    put(w, buf + i, sizeof(buf) - i);
}

static void put_uint(writer_t *w, uint64_t v, int width)
{
    char buf[48];
    size_t i = sizeof(buf);
    do {
        buf[--i] = (char)('0' + v % 10);
        v /= 10;
    } while (v);
    while (sizeof(buf) - i < (size_t)width)
        buf[--i] = '0';
    put(w, buf + i, sizeof(buf) - i);
}

static int put_resolved(writer_t *w, const tmpl_seg_t *s, const tmpl_ctx_t *ctx)
{
    size_t room = w->cap > w->len ? w->cap - w->len : 0, n = 0;
    int rc = s->res->fn(s->res->user, s->str.p, s->str.len, ctx, room ? w->dst + w->len : NULL,
                        room, &n);
    w->len += n;
    return rc;
}

static int put_seg(writer_t *w, const tmpl_t *t, const tmpl_seg_t *s, const tmpl_ctx_t *ctx,
                   int64_t now)
{
    const tmpl_str_t *item;
    switch (s->kind) {
    case TMPL_LIT:
        put(w, s->str.p, s->str.len);
        return 0;
    case TMPL_AGENT:
        put_int(w, ctx->agent, s->width);
        return 0;
    case TMPL_SEQ:
        put_uint(w, ctx->seq, s->width);
        return 0;
    case TMPL_NOW_NS:
        put_int(w, now, 0);
        return 0;
    case TMPL_NOW_MS:
        put_int(w, now / 1000000, 0);
        return 0;
    case TMPL_PHASE:
        put(w, ctx->phase ? ctx->phase : "", ctx->phase ? strlen(ctx->phase) : 0);
        return 0;
    case TMPL_PICK_ITEMS:
        item = &t->items[s->first + rng_below(ctx->rng, s->n)];
        put(w, item->p, item->len);
        return 0;
    case TMPL_PICK_RANGE:
        put_int(w, s->lo + (int64_t)rng_below(ctx->rng, (uint64_t)(s->hi - s->lo) + 1), 0);
        return 0;
    case TMPL_LIST:
        item = &s->list->items[rng_below(ctx->rng, s->list->n)];
        put(w, item->p, item->len);
        return 0;
    case TMPL_RESOLVER:
        return put_resolved(w, s, ctx);
    }
    return SQ_EINTERNAL;
}

int tmpl_render_to(const tmpl_t *t, const tmpl_ctx_t *ctx, char *dst, size_t cap, size_t *len)
{
    writer_t w = {.dst = dst, .cap = dst ? cap : 0, .len = 0};
    *len = 0;
    if (t->uses_rng && !ctx->rng)
        return SQ_EINVAL;
    int64_t now = t->uses_now ? (ctx->now_ns ? ctx->now_ns : clock_real_ns()) : 0;
    for (size_t i = 0; i < t->n_segs; i++) {
        int rc = put_seg(&w, t, &t->segs[i], ctx, now);
        if (rc < 0)
            return rc;
    }
    *len = w.len;
    if (w.len + 1 > w.cap)
        return SQ_ELIMIT;
    dst[w.len] = '\0';
    return 0;
}

void tmpl_buf_init(tmpl_buf_t *b)
{
    b->data = NULL;
    b->len = b->cap = 0;
}

void tmpl_buf_close(tmpl_buf_t *b)
{
    free(b->data);
    tmpl_buf_init(b);
}

int tmpl_render(const tmpl_t *t, const tmpl_ctx_t *ctx, tmpl_buf_t *b)
{
    /* A second pass must show the same instant and the same picks as the first. */
    tmpl_ctx_t c = *ctx;
    if (t->uses_now && !c.now_ns)
        c.now_ns = clock_real_ns();
    rng_t saved = c.rng ? *c.rng : (rng_t){{0}};
    int rc = 0;
    /* A resolver may answer longer the second time; a few rounds settle any sane one. */
    for (int round = 0; round < 4; round++) {
        if (round > 0 && c.rng)
            *c.rng = saved;
        rc = tmpl_render_to(t, &c, b->data, b->cap, &b->len);
        if (rc != SQ_ELIMIT)
            return rc;
        size_t cap = 2 * (b->len + 1);
        char *grown = realloc(b->data, cap);
        if (!grown)
            return SQ_ENOMEM;
        b->data = grown;
        b->cap = cap;
    }
    return rc;
}
