/* The open-loop part of a profile: the rate over time as steps (adjacent bins merged while they
 * agree), and even or Poisson arrivals by the index of dispersion of counts within the steps. */
#include <math.h>
#include <stdlib.h>

#include "prof_int.h"

/* Merges bins of `bin` seconds into steps: a bin joins the running step while its rate is within
 * the tolerance of the step's (relative, or three Poisson standard deviations of the bin's rate,
 * whichever is wider, so noise alone does not split a steady rate); a last bin shorter than half
 * a bin always joins. Steps hold their count in .rate until prof_rates divides. */
static size_t make_steps(prof_t *p, size_t bin, prof_step_t *out)
{
    size_t n = 0;
    double sum = 0;
    int64_t len = 0;
    for (size_t b = 0; b * bin < p->n_sec; b++) {
        size_t from = b * bin, to = from + bin < p->n_sec ? from + bin : p->n_sec;
        double bs = 0;
        for (size_t i = from; i < to; i++)
            bs += p->sec[i];
        double blen = (double)(to - from), br = bs / blen;
        if (len > 0 && 2 * (to - from) >= bin) {
            double r = sum / (double)len;
            double tol = fmax(p->cfg.tolerance * r, 3 * sqrt(fmax(r, 1.0 / blen) / blen));
            if (fabs(br - r) > tol) {
                out[n++] = (prof_step_t){sum, len};
                sum = 0;
                len = 0;
            }
        }
        sum += bs;
        len += (int64_t)(to - from);
    }
    if (len > 0)
        out[n++] = (prof_step_t){sum, len};
    return n;
}

/* Counts in windows long enough for about 5 starts each within every step, pooled: the sum of
 * the steps' (k - 1)·d is chi-square with the sum of their k - 1 under a Poisson process. */
static void dispersion(prof_t *p)
{
    double x2 = 0, df = 0, longest = 0;
    size_t from = 0, k_all = 0;
    uint32_t *w = malloc(p->n_sec * sizeof *w);
    if (!w)
        return;
    for (size_t s = 0; s < p->n_steps; s++) {
        const prof_step_t *st = &p->steps[s];
        size_t win = st->rate > 0 ? (size_t)ceil(5 / st->rate) : 1, k = 0;
        win = win < 1 ? 1 : win;
        for (size_t i = from; i + win <= from + (size_t)st->for_s; i += win) {
            w[k] = 0;
            for (size_t j = i; j < i + win; j++)
                w[k] += p->sec[j];
            k++;
        }
        prof_dispersion_t d;
        prof_dispersion(w, k, &d);
        if (k >= 2 && d.mean > 0) {
            x2 += d.x2;
            df += d.df;
            k_all += k;
        }
        if ((double)st->for_s > longest) {
            longest = (double)st->for_s;
            p->disp_interval_s = (int)win;
        }
        from += (size_t)st->for_s;
    }
    free(w);
    p->disp = (prof_dispersion_t){.k = k_all, .x2 = x2, .df = df, .p_low = 1, .p_high = 1};
    if (df > 0) {
        p->disp.d = x2 / df;
        p->disp.p_low = prof_chi2_cdf(x2, df);
        p->disp.p_high = 1 - p->disp.p_low;
    }
    /* Too regular for Poisson (lower tail) means even; otherwise Poisson, also when burstier,
     * which no arrival process of a plan reproduces (the comment says so). */
    p->poisson = !(df > 0 && p->disp.p_low < p->cfg.alpha);
}

void prof_rates(prof_t *p)
{
    if (p->residual == 0)
        return;
    size_t bin = (size_t)(p->cfg.bin_ns / INT64_C(1000000000));
    bin = bin < 1 ? 1 : bin;
    p->steps = malloc((p->n_sec / bin + 2) * sizeof *p->steps);
    if (!p->steps)
        return;
    p->n_steps = make_steps(p, bin, p->steps);
    /* The seconds the starts fell in may exceed the phase's duration by the partly covered
     * first and last second: the last step gives them back. */
    int64_t extra = (int64_t)p->n_sec - prof_span_s(p);
    prof_step_t *last = &p->steps[p->n_steps - 1];
    if (extra > 0 && last->for_s > extra)
        last->for_s -= extra;
    for (size_t i = 0; i < p->n_steps; i++)
        p->steps[i].rate /= (double)p->steps[i].for_s;
    dispersion(p);
}
