/* The weighted class picker open and closed loops share: the phase's mix as a sched_mix. */
#include <stdlib.h>

#include "src_int.h"
#include "squall/err.h"

int src_mix_init(src_mix_t *m, const plan_phase_t *pp, uint64_t seed)
{
    double *w = calloc(pp->n_mix ? pp->n_mix : 1, sizeof(*w));
    m->cls = calloc(pp->n_mix ? pp->n_mix : 1, sizeof(*m->cls));
    m->weight = calloc(pp->n_mix ? pp->n_mix : 1, sizeof(*m->weight));
    if (!w || !m->cls || !m->weight) {
        free(w);
        return SQ_ENOMEM;
    }
    double sum = 0;
    for (size_t k = 0; k < pp->n_mix; k++) {
        w[k] = pp->mix[k].weight;
        m->cls[k] = pp->mix[k].cls.index;
        sum += w[k];
    }
    for (size_t k = 0; k < pp->n_mix; k++)
        m->weight[k] = sum > 0 ? w[k] / sum : 0;
    m->n = pp->n_mix;
    m->skip_next = m->skip = 0;
    int rc = sched_mix_new(w, pp->n_mix, seed, &m->mix);
    free(w);
    return rc;
}

void src_mix_close(src_mix_t *m)
{
    sched_mix_free(m->mix);
    free(m->cls);
    free(m->weight);
    m->mix = NULL;
    m->cls = NULL;
    m->weight = NULL;
}

void src_mix_deal(src_mix_t *m, uint64_t first, uint64_t skip)
{
    m->skip_next = first;
    m->skip = skip;
}

int src_mix_pick(src_mix_t *m)
{
    for (; m->skip_next > 0; m->skip_next--)
        sched_mix_pick(m->mix);
    m->skip_next = m->skip;
    return m->cls[sched_mix_pick(m->mix)];
}

void src_mix_spread(const src_mix_t *m, double total, double *per_class)
{
    for (size_t k = 0; per_class && k < m->n; k++)
        if (m->cls[k] >= 0)
            per_class[m->cls[k]] += total * m->weight[k];
}
