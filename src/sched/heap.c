/* The scheduler's min-heap of (time, id) events: O(log n) per change, no allocation. */
#include <stdlib.h>

#include "sched_int.h"
#include "squall/err.h"

static bool before(const sched_ev_t *x, const sched_ev_t *y)
{
    return x->t < y->t || (x->t == y->t && x->id < y->id);
}

static void swap(sched_ev_t *x, sched_ev_t *y)
{
    sched_ev_t tmp = *x;
    *x = *y;
    *y = tmp;
}

static void sift_up(sched_heap_t *h, size_t i)
{
    while (i > 0 && before(&h->a[i], &h->a[(i - 1) / 2])) {
        swap(&h->a[i], &h->a[(i - 1) / 2]);
        i = (i - 1) / 2;
    }
}

static void sift_down(sched_heap_t *h, size_t i)
{
    for (;;) {
        size_t l = 2 * i + 1, r = l + 1, m = i;
        if (l < h->n && before(&h->a[l], &h->a[m]))
            m = l;
        if (r < h->n && before(&h->a[r], &h->a[m]))
            m = r;
        if (m == i)
            return;
        swap(&h->a[i], &h->a[m]);
        i = m;
    }
}

int sched_heap_init(sched_heap_t *h, size_t cap)
{
    h->n = 0;
    h->cap = cap;
    h->a = calloc(cap ? cap : 1, sizeof(sched_ev_t));
    return h->a ? 0 : SQ_ENOMEM;
}

void sched_heap_close(sched_heap_t *h)
{
    free(h->a);
    h->a = NULL;
    h->n = h->cap = 0;
}

void sched_heap_push(sched_heap_t *h, int64_t t, int id)
{
    if (h->n == h->cap)
        return; /* cannot happen: one entry per client or agent */
    h->a[h->n] = (sched_ev_t){.t = t, .id = id};
    sift_up(h, h->n++);
}

bool sched_heap_top(const sched_heap_t *h, sched_ev_t *ev)
{
    if (h->n == 0)
        return false;
    *ev = h->a[0];
    return true;
}

void sched_heap_pop(sched_heap_t *h)
{
    if (h->n == 0)
        return;
    h->a[0] = h->a[--h->n];
    sift_down(h, 0);
}

void sched_heap_retime_top(sched_heap_t *h, int64_t t)
{
    if (h->n == 0)
        return;
    h->a[0].t = t;
    sift_down(h, 0);
}
