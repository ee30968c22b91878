/* squall profile: a recorded traffic log turned into an editable plan.
 *
 * prof_analyze() reads a log three times through the alog reader (memory grows with the
 * distinct path shapes, clients and seconds of the log, never with its lines):
 *   1. shapes: every path's segments go into a trie; segments that vary become variables, by
 *      their look (numbers, prefixed numbers like gw-17, UUIDs, long hex or mixed tokens) or,
 *      for plain words, when three or more siblings lead to the same sub-shapes, or more than 64
 *      differ under one parent;
 *   2. classes and keys: each request falls into a class (method, kind, shape): watch when its
 *      query carries the watch marker, list when it carries a page limit or continuation or its
 *      shape is a collection (a shape with variable children), get for other GETs, write for
 *      POST / PUT / PATCH / DELETE. Each key (client, method, path) keeps the mean and spread of
 *      its inter-arrival gaps;
 *   3. phases and rates: keys that repeat regularly form fleets, by class and period; each
 *      fleet's phases (time modulo the period) go through the Rayleigh test; everything not sent
 *      by a fleet or a watch gives per-second counts for the rate steps and the index of
 *      dispersion.
 * prof_write_plan() writes the plan, with YAML comments saying what was measured.
 *
 * Glossary: "shape" = a path with varying segments replaced by variables; "key" = one client's
 * requests to one path with one method; "fleet" = keys of one class repeating at one period;
 * "residual" = requests neither from a fleet nor watches: the open-loop part of the plan. */
#ifndef SQUALL_PROFILE_H
#define SQUALL_PROFILE_H

#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "squall/alog.h"
#include "squall/out.h"

typedef struct {
    alog_config_t log;
    const char *target_url;  /* written into the plan; default http://127.0.0.1:7070 */
    const char *phase_name;  /* default "recorded" */
    const char *watch_param; /* the query parameter that marks a watch; default "watch" */
    int64_t bin_ns;          /* width of the bins the rate steps are made of; default 10 s */
    double tolerance;        /* adjacent bins whose rates differ by less merge; default 0.10 */
    double alpha;            /* significance of the dispersion and Rayleigh decisions; 0.001 */
    int min_agents;          /* fewer periodic clients of a class are no fleet; default 3 */
} prof_config_t;

void prof_config_init(prof_config_t *c);

typedef struct prof prof_t;

/* Reads the log at `path` (three passes). Returns 0 and the analysis, or SQ_EIO / SQ_EPARSE
 * (the log cannot be read or is refused: one line on o naming it), SQ_EINVAL (nothing in it a
 * plan can send), SQ_ENOMEM. Notes (malformed lines, left-out methods, limits reached) go to o
 * as warnings. */
int prof_analyze(const char *path, const prof_config_t *cfg, prof_t **out, out_t *o);
/* The plan as YAML; 0 or SQ_EIO. */
int prof_write_plan(const prof_t *p, FILE *f);
void prof_free(prof_t *p);

/* ---- the statistics, for tests --------------------------------------------------------- */

/* Rayleigh test of uniformity of n angles (radians) (Mardia & Jupp, "Directional Statistics",
 * Wiley 2000, §6.3; the p-value approximation of Zar, "Biostatistical Analysis", the Rayleigh
 * test in its chapter on circular distributions):
 * R̄ = |Σ exp(iθ)| / n, Z = nR̄², p = exp(√(1 + 4n + 4(n² − (nR̄)²)) − (1 + 2n)), clamped to
 * [0, 1] (sync_rayleigh_p; 1 for n < 2). mean is the mean direction in [0, 2π). */
typedef struct {
    size_t n;
    double r_bar, z, p, mean;
} prof_rayleigh_t;
void prof_rayleigh(const double *theta, size_t n, prof_rayleigh_t *out);

/* Index of dispersion of k counts (Cox & Lewis, "The Statistical Analysis of Series of Events",
 * Methuen 1966): d = s²/mean with the unbiased s²; under a Poisson process x2 = (k − 1)·d is
 * chi-square with k − 1 degrees of freedom; p_low = P(χ² ≤ x2) (small: too regular for
 * Poisson), p_high = 1 − p_low (small: burstier). Zero counts everywhere give d = 0, p_low 0. */
typedef struct {
    size_t k;
    double mean, var, d, x2, df, p_low, p_high;
} prof_dispersion_t;
void prof_dispersion(const uint32_t *counts, size_t k, prof_dispersion_t *out);
/* The chi-square distribution function P(χ²_df ≤ x), the regularized lower incomplete gamma
 * P(df/2, x/2) (series and continued fraction, Abramowitz & Stegun 6.5.29 and 6.5.31). */
double prof_chi2_cdf(double x, double df);

#endif
