/* The table of traffic sources, and building the ones a phase uses. */
#include <math.h>
#include <string.h>

#include "squall/err.h"
#include "squall/source.h"

const src_ops_t *const src_table[] = {
    &src_open_ops,  &src_closed_ops,   &src_fleet_ops, &src_watches_ops,
    &src_churn_ops, &src_teardown_ops, &src_replay_ops, NULL,
};

int src_phase_new(const src_ctx_t *ctx, src_t *out, size_t *n_out)
{
    const plan_phase_t *pp =
        ctx->phase < ctx->plan->n_phases ? &ctx->plan->phases[ctx->phase] : NULL;
    *n_out = 0;
    for (size_t i = 0; src_table[i]; i++) {
        const src_ops_t *ops = src_table[i];
        /* The teardown the run adds after its last phase has no plan phase: only teardown. */
        if (pp ? !ops->used_by(ctx->plan, pp) : ops != &src_teardown_ops)
            continue;
        src_t *s = &out[*n_out];
        *s = (src_t){.ops = ops, .phase = ctx->phase};
        int rc = ops->new (ctx, &s->self);
        if (rc) {
            if (s->self)
                ops->free(s->self);
            while (*n_out > 0) {
                src_t *b = &out[--*n_out];
                b->ops->free(b->self);
            }
            return rc;
        }
        (*n_out)++;
    }
    return 0;
}

double src_expected(const src_t *s, size_t n, int64_t t0, int64_t t1, double *per_class)
{
    double sum = 0;
    for (size_t i = 0; i < n; i++) {
        if (!s[i].ops->expected)
            continue;
        double e = s[i].ops->expected(s[i].self, t0, t1, per_class);
        sum = isnan(e) || isnan(sum) ? NAN : sum + e;
    }
    return sum;
}
