/* Private to src/sched: a fixed-capacity binary min-heap of (time, id) events, ordered by time
 * and then id so equal times come out in a deterministic order. No allocation after init. */
#ifndef SQUALL_SCHED_INT_H
#define SQUALL_SCHED_INT_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

typedef struct {
    int64_t t;
    int id;
} sched_ev_t;

typedef struct {
    sched_ev_t *a;
    size_t n, cap;
} sched_heap_t;

int sched_heap_init(sched_heap_t *h, size_t cap);
void sched_heap_close(sched_heap_t *h);
/* Adds an event; the caller never exceeds cap (one entry per client or agent). */
void sched_heap_push(sched_heap_t *h, int64_t t, int id);
/* The earliest event, or false when empty. */
bool sched_heap_top(const sched_heap_t *h, sched_ev_t *ev);
void sched_heap_pop(sched_heap_t *h);
/* Gives the earliest event a new time and restores the order: one sift instead of pop + push. */
void sched_heap_retime_top(sched_heap_t *h, int64_t t);

#endif
