/* The synchronisation objective, {class: renew, max-sync: 0.3}: a fleet action planned as spread
 * must not bunch beyond the bound for a whole period. Judged from results.json's "sync" section
 * (src/observe/gauge.c): the windows of one period of each fleet action, each with its sends n
 * and its mean resultant length R̄ (0 = evenly spread, 1 = all at one instant).
 *
 * Which windows count. Only whole windows (not cut by the end of the phase or of the run) with
 * enough sends that R̄ above the bound b is not chance: with phases drawn at random (a fleet that
 * is not synchronised, only jittered), Rayleigh's Z = n·R̄² is asymptotically exponential with
 * mean 1 (Mardia & Jupp 2000, the Rayleigh test; from memory), so P(R̄ > b) ≈ exp(−n·b²). A
 * window counts when that chance is at most 1 in 1,000: n ≥ ln(1000)/b², and never fewer than
 * 10 sends (judge_sync_min_sends; 77 for b = 0.3, 10 for b ≥ 0.83). The check's observed value
 * is the largest R̄ of the windows that count; it fails when that exceeds the bound. With no
 * window that counts the check is "too-few" (the run INCONCLUSIVE unless the plan accepts few
 * samples): no evidence is never a pass. */
#include <math.h>
#include <stdio.h>
#include <string.h>

#include "judge_int.h"
#include "squall/err.h"

#define CHANCE    1e-3 /* of a random (unsynchronised) window exceeding the bound */
#define MIN_SENDS 10

int64_t judge_sync_min_sends(double bound)
{
    double b = bound > 0.01 ? bound : 0.01;
    int64_t n = (int64_t)ceil(log(1.0 / CHANCE) / (b * b));
    return n > MIN_SENDS ? n : MIN_SENDS;
}

/* The largest R̄ over the windows of action a that count; how many counted, and the one. */
typedef struct {
    int64_t counted;
    double max_r;
    double at_s; /* its start, seconds from the run's start */
    int64_t n;   /* its sends */
} sync_max_t;

static void scan(const json_t *a, int64_t min_n, sync_max_t *m)
{
    size_t i;
    json_t *w;
    json_array_foreach(json_object_get(a, "windows"), i, w)
    {
        int64_t n = json_integer_value(json_object_get(w, "n"));
        json_t *rj = json_object_get(w, "r_bar"); /* null when the window had no sends */
        if (json_is_true(json_object_get(w, "partial")) || n < min_n || !json_is_number(rj))
            continue;
        double r = json_number_value(rj);
        if (!m->counted++ || r > m->max_r) {
            m->max_r = r;
            m->at_s = json_number_value(json_object_get(w, "start_s"));
            m->n = n;
        }
    }
}

static int check(judge_t *j, size_t oi, const plan_objective_t *ob, const char *text,
                 const char *cls, const char *scope, const sync_max_t *m, int64_t min_n)
{
    judge_check_t *ck = judge_add_check(j);
    const char *kc = judge_keep(j, cls), *ks = judge_keep(j, scope);
    if (!ck || !kc || !ks)
        return SQ_ENOMEM;
    char why[160] = "";
    *ck = (judge_check_t){.objective = oi, .text = text, .cls = kc, .scope = ks,
                          .observed = m->max_r, .threshold = ob->value, .unit = "r_bar",
                          .samples = m->counted};
    if (!m->counted) {
        ck->verdict = JUDGE_TOO_FEW;
        snprintf(why, sizeof why, "no whole window with at least %lld sends", (long long)min_n);
    } else if (m->max_r > ob->value) {
        ck->verdict = JUDGE_FAIL;
        snprintf(why, sizeof why, "the window at %.1f s (%lld sends) had R-bar %.3f",
                 m->at_s, (long long)m->n, m->max_r);
    } else {
        ck->verdict = JUDGE_PASS;
    }
    if (why[0] && !(ck->why = judge_keep(j, why)))
        return SQ_ENOMEM;
    return 0;
}

/* Whether action a is one the objective judges: its class, or any for "*". */
static bool wanted(const plan_objective_t *ob, const json_t *a)
{
    const char *c = json_string_value(json_object_get(a, "class"));
    return c && (!ob->cls.name || !strcmp(ob->cls.name, "*") || !strcmp(ob->cls.name, c));
}

#define MAX_CLASSES 64 /* distinct fleet classes one objective judges for the run */

int judge_sync(judge_t *j, size_t oi, const plan_objective_t *ob, const char *text,
               const results_t *res, const judge_phase_t *phases, size_t n_phases)
{
    const json_t *sync = results_section(res, "sync");
    int64_t min_n = judge_sync_min_sends(ob->value);
    const char *seen[MAX_CLASSES];
    size_t n_seen = 0;
    bool any = false;
    int rc = 0;
    for (size_t p = 0; rc == 0 && p < n_phases; p++) {
        const char *phase = phases[p].name;
        if (ob->phase.name && strcmp(ob->phase.name, phase))
            continue;
        size_t i;
        json_t *a;
        json_array_foreach(json_object_get(json_object_get(sync, phase), "actions"), i, a)
        {
            if (!wanted(ob, a) || rc)
                continue;
            const char *c = json_string_value(json_object_get(a, "class"));
            sync_max_t m = {0};
            scan(a, min_n, &m);
            rc = check(j, oi, ob, text, c, phase, &m, min_n);
            any = true;
            size_t k = 0;
            while (k < n_seen && strcmp(seen[k], c))
                k++;
            if (k == n_seen && n_seen < MAX_CLASSES)
                seen[n_seen++] = c;
        }
    }
    const char *named = ob->cls.name ? ob->cls.name : "*";
    sync_max_t none = {0};
    if (rc == 0 && !any) /* nothing gauged: no evidence either way */
        return check(j, oi, ob, text, named, ob->phase.name ? ob->phase.name : "run", &none,
                     min_n);
    for (size_t k = 0; rc == 0 && !ob->phase.name && k < n_seen; k++) {
        sync_max_t m = {0};
        for (size_t p = 0; p < n_phases; p++) {
            size_t i;
            json_t *a;
            json_array_foreach(json_object_get(json_object_get(sync, phases[p].name), "actions"),
                               i, a)
            {
                const char *c = json_string_value(json_object_get(a, "class"));
                if (c && !strcmp(c, seen[k]))
                    scan(a, min_n, &m);
            }
        }
        rc = check(j, oi, ob, text, seen[k], "run", &m, min_n);
    }
    return rc;
}
