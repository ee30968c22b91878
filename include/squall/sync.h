/* The synchronisation gauge: how bunched the sends of one periodic fleet action are within its
 * period P, one window of one period at a time.
 *
 * Concepts. An instant t (int64 ns, on any clock) has the *phase* θ = 2π·((t − base) mod P)/P,
 * where base is the window grid's origin. Over the n instants of a window, the *mean resultant
 * length* R̄ = |Σ exp(iθ_k)| / n is 0 when the sends are evenly spread over the period and 1
 * when they all fall at one instant (Mardia & Jupp, "Directional Statistics", Wiley 2000, §6.3,
 * the Rayleigh test; section number from memory). The *Rayleigh test* asks whether the phases
 * could be uniform; its p-value uses Zar's approximation (see sync_rayleigh_p). The *peak-to-mean
 * ratio* is the largest count of sends in one tenth of the period over the mean count per tenth
 * (n / 10): 1 for an even spread, 10 when every send falls in one tenth.
 * A *window* w is [base + w·P, base + (w + 1)·P): the gauge of a window is computed from the
 * instants in it alone (phases within one window are their positions in it).
 * Glossary: accumulator = the O(1) sums a window keeps (Σ cos θ, Σ sin θ, ten bin counts);
 * closing it yields a sync_gauge_t. Nothing here allocates, reads a clock or touches libuv. */
#ifndef SQUALL_SYNC_H
#define SQUALL_SYNC_H

#include <stdbool.h>
#include <stdint.h>

#define SYNC_BINS 10 /* tenths of the period, for the peak-to-mean ratio */

/* One window's running sums: a small value struct the caller owns (no heap). */
typedef struct {
    int64_t base_ns, period_ns;
    uint64_t n;
    double cos_sum, cos_err, sin_sum, sin_err; /* Neumaier-compensated sums */
    uint64_t bins[SYNC_BINS];
} sync_acc_t;

/* What a closed window says. With n = 0 every figure is 0 and p is 1 (no evidence of
 * synchronisation); with n = 1, R̄ is 1 by definition and p is 1 (one send cannot show a
 * bunching): read R̄ together with p and n. */
typedef struct {
    uint64_t n;          /* sends in the window */
    double r_bar;        /* mean resultant length R̄, in [0, 1] */
    double z;            /* Rayleigh's Z = n·R̄² */
    double p;            /* Rayleigh test p-value, in [0, 1] */
    double peak_to_mean; /* max sends per tenth of the period / (n / 10); 0 when n = 0 */
} sync_gauge_t;

/* Starts an empty accumulator for phases measured from base_ns with period period_ns
 * (1 <= period_ns <= INT64_MAX / SYNC_BINS). Returns 0 or SQ_EINVAL. */
int sync_acc_init(sync_acc_t *a, int64_t base_ns, int64_t period_ns);
/* Adds one send instant (any t: its phase is (t − base) mod P, in [0, P)). O(1), no allocation. */
void sync_acc_add(sync_acc_t *a, int64_t t_ns);
/* The gauge of the instants added so far; the accumulator is unchanged. */
void sync_acc_gauge(const sync_acc_t *a, sync_gauge_t *out);
/* Adds from's instants to into (counts, compensated sums and bins): the accumulator of the union
 * of both sets, as one fed every instant would hold up to rounding. Both must measure phases on
 * the same grid (same period; bases a whole number of periods apart, e.g. one window of the
 * same run counted by two shards); into's base and period are kept. No allocation. */
void sync_acc_merge(sync_acc_t *into, const sync_acc_t *from);

/* Rayleigh test p-value for n phases with mean resultant length r_bar (0 <= r_bar <= 1), by
 * Zar's approximation (Zar, "Biostatistical Analysis", 4th ed. 1999, ch. 27, eq. 27.4; chapter
 * and equation number from memory, the formula checked against pingouin's documented example):
 * p = exp(√(1 + 4n + 4(n² − R_n²)) − (1 + 2n)), R_n = n·R̄. Clamped to [0, 1]; 1 for n < 2. */
double sync_rayleigh_p(uint64_t n, double r_bar);

/* ---- windows of one period ---------------------------------------------------------------- */

/* The window an instant falls in: floor((t − base) / P), also for t < base. */
int64_t sync_window_of(int64_t base_ns, int64_t period_ns, int64_t t_ns);

/* A closed window: its index, its start (base + index·P) and its gauge. */
typedef struct {
    int64_t index, start_ns;
    bool partial; /* closed by sync_win_flush before its end (the run stopped inside it) */
    sync_gauge_t gauge;
} sync_window_t;

/* A stream of consecutive windows fed instants in time order: a caller-owned value struct. */
typedef struct {
    sync_acc_t acc;
    int64_t index; /* the open window, or the lowest the next may be when none is open */
    bool open;     /* an instant has been added since the last close */
} sync_win_t;

/* Starts the windowing at base_ns with period period_ns; the first window opens at the first
 * instant. Returns 0 or SQ_EINVAL (as sync_acc_init). */
int sync_win_init(sync_win_t *w, int64_t base_ns, int64_t period_ns);
/* Adds one instant. If it falls in a later window than the open one, the open window is closed
 * into *closed first and 1 is returned (windows in between had no sends: their gauges are
 * those of n = 0, and the caller sees the gap in the indices); otherwise 0. An instant in an
 * earlier window than the open one (out of order) is not counted: SQ_ERANGE. No allocation. */
int sync_win_add(sync_win_t *w, int64_t t_ns, sync_window_t *closed);
/* Closes the open window if now_ns is at or past its end (returns 1, partial = false), or if
 * force is true (returns 1, partial = now_ns < its end); 0 when no window is open or it has
 * not ended. Use it at the window's end so a gauge does not wait for the next send. */
int sync_win_flush(sync_win_t *w, int64_t now_ns, bool force, sync_window_t *closed);

#endif
