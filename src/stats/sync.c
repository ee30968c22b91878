/* The synchronisation gauge (sync.h): phase concentration of a fleet action's sends per window
 * of one period, as running sums that never allocate. */
#include <math.h>

#include "squall/err.h"
#include "squall/sync.h"

int sync_acc_init(sync_acc_t *a, int64_t base_ns, int64_t period_ns)
{
    if (period_ns < 1 || period_ns > INT64_MAX / SYNC_BINS)
        return SQ_EINVAL;
    *a = (sync_acc_t){.base_ns = base_ns, .period_ns = period_ns};
    return 0;
}

/* (t − base) mod P in [0, P) without overflow for any t and base: the difference is taken in
 * unsigned arithmetic (exact modulo 2^64) and reduced through P's residues. */
static int64_t phase_offset(int64_t base, int64_t period, int64_t t)
{
    uint64_t p = (uint64_t)period;
    if (t >= base)
        return (int64_t)(((uint64_t)t - (uint64_t)base) % p);
    uint64_t back = ((uint64_t)base - (uint64_t)t) % p;
    return back ? (int64_t)(p - back) : 0;
}

/* Neumaier's compensated summation (Neumaier, ZAMM 54, 1974): the error of each addition is kept
 * in *err, so a window of millions of sends still sums to the last few ulps. */
static void add_compensated(double *sum, double *err, double x)
{
    double s = *sum + x;
    if (fabs(*sum) >= fabs(x))
        *err += (*sum - s) + x;
    else
        *err += (x - s) + *sum;
    *sum = s;
}

void sync_acc_add(sync_acc_t *a, int64_t t_ns)
{
    int64_t off = phase_offset(a->base_ns, a->period_ns, t_ns);
    /* The phase from an exact integer offset: off and P are below 2^63, their ratio is rounded
     * once, so instants a whole number of periods apart get the same phase. */
    double theta = 2.0 * M_PI * ((double)off / (double)a->period_ns);
    add_compensated(&a->cos_sum, &a->cos_err, cos(theta));
    add_compensated(&a->sin_sum, &a->sin_err, sin(theta));
    a->bins[off * SYNC_BINS / a->period_ns]++;
    a->n++;
}

void sync_acc_merge(sync_acc_t *into, const sync_acc_t *from)
{
    add_compensated(&into->cos_sum, &into->cos_err, from->cos_sum);
    add_compensated(&into->cos_sum, &into->cos_err, from->cos_err);
    add_compensated(&into->sin_sum, &into->sin_err, from->sin_sum);
    add_compensated(&into->sin_sum, &into->sin_err, from->sin_err);
    for (int i = 0; i < SYNC_BINS; i++)
        into->bins[i] += from->bins[i];
    into->n += from->n;
}

double sync_rayleigh_p(uint64_t n, double r_bar)
{
    if (n < 2)
        return 1.0;
    double nn = (double)n, rn = nn * fmin(fmax(r_bar, 0.0), 1.0);
    /* Zar's p = exp(√A − B), A = 1 + 4n + 4(n² − R_n²), B = 1 + 2n. Since B² = 1 + 4n + 4n²,
     * √A − B = (A − B²)/(√A + B) = −4R_n²/(√A + B): the same value without subtracting two
     * numbers near 2n, which loses digits for large n. */
    double a = 1.0 + 4.0 * nn + 4.0 * (nn - rn) * (nn + rn);
    double p = exp(-4.0 * rn * rn / (sqrt(a) + 1.0 + 2.0 * nn));
    return fmin(fmax(p, 0.0), 1.0);
}

void sync_acc_gauge(const sync_acc_t *a, sync_gauge_t *out)
{
    *out = (sync_gauge_t){.n = a->n, .p = 1.0};
    if (a->n == 0)
        return;
    double nn = (double)a->n;
    double c = a->cos_sum + a->cos_err, s = a->sin_sum + a->sin_err;
    out->r_bar = fmin(hypot(c, s) / nn, 1.0);
    out->z = nn * out->r_bar * out->r_bar;
    out->p = sync_rayleigh_p(a->n, out->r_bar);
    uint64_t peak = 0;
    for (int i = 0; i < SYNC_BINS; i++)
        peak = a->bins[i] > peak ? a->bins[i] : peak;
    out->peak_to_mean = (double)peak * SYNC_BINS / nn;
}

int64_t sync_window_of(int64_t base_ns, int64_t period_ns, int64_t t_ns)
{
    /* floor((t − base) / P) = ((t − base) − offset) / P, with the offset in [0, P). The
     * difference is formed in unsigned arithmetic and read back as signed, which holds when
     * |t − base| < 2^63 (instants of one run). */
    int64_t diff = (int64_t)((uint64_t)t_ns - (uint64_t)base_ns);
    int64_t off = phase_offset(base_ns, period_ns, t_ns);
    return (diff - off) / period_ns;
}

int sync_win_init(sync_win_t *w, int64_t base_ns, int64_t period_ns)
{
    *w = (sync_win_t){.index = INT64_MIN};
    return sync_acc_init(&w->acc, base_ns, period_ns);
}

static void close_window(sync_win_t *w, bool partial, sync_window_t *closed)
{
    closed->index = w->index;
    closed->start_ns = w->acc.base_ns + w->index * w->acc.period_ns;
    closed->partial = partial;
    sync_acc_gauge(&w->acc, &closed->gauge);
    sync_acc_init(&w->acc, w->acc.base_ns, w->acc.period_ns);
    w->open = false;
    w->index++; /* a closed window never reopens */
}

int sync_win_add(sync_win_t *w, int64_t t_ns, sync_window_t *closed)
{
    int64_t k = sync_window_of(w->acc.base_ns, w->acc.period_ns, t_ns);
    int rc = 0;
    if (w->open && k < w->index)
        return SQ_ERANGE;
    if (w->open && k > w->index) {
        close_window(w, false, closed);
        rc = 1;
    }
    if (!w->open) {
        if (k < w->index)
            return SQ_ERANGE;
        w->index = k;
        w->open = true;
    }
    sync_acc_add(&w->acc, t_ns);
    return rc;
}

int sync_win_flush(sync_win_t *w, int64_t now_ns, bool force, sync_window_t *closed)
{
    if (!w->open)
        return 0;
    int64_t end = w->acc.base_ns + (w->index + 1) * w->acc.period_ns;
    if (now_ns < end && !force)
        return 0;
    close_window(w, now_ns < end, closed);
    return 1;
}
