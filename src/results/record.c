/* Recording one finished request into its cell: the only place where a completion becomes
 * counts and histogram samples. */
#include "squall/results.h"

static void add(results_cell_t *c, enum results_metric m, int64_t v)
{
    hist_t *h = results_cell_hist(c, m);
    if (h)
        hist_record(h, v < 0 ? 0 : v);
}

void results_record(results_cell_t *c, const results_sample_t *s)
{
    if (!c)
        return;
    results_counters_t *k = results_cell_counters(c);
    k->count++;
    k->bytes_in += s->bytes_in;
    k->bytes_out += s->bytes_out;
    if (s->status > 0)
        results_status_add(k, s->status, 1);
    if (!s->done_ns)
        return; /* counted, not timed */
    add(c, RESULTS_M_RESPONSE, s->done_ns - s->intended_ns);
    if (s->sent_ns) {
        add(c, RESULTS_M_SERVICE, s->done_ns - s->sent_ns);
        if (s->with_lag)
            add(c, RESULTS_M_LAG, s->sent_ns - s->intended_ns);
    }
    if (s->connect_ns > 0)
        add(c, RESULTS_M_CONNECT, s->connect_ns);
    if (s->tls_ns > 0)
        add(c, RESULTS_M_TLS, s->tls_ns);
    if (s->first_byte_ns > 0)
        add(c, RESULTS_M_FIRST_BYTE, s->first_byte_ns);
}

void results_status_add(results_counters_t *k, int code, int64_t n)
{
    if (code < 100 || code > 999 || n <= 0)
        return;
    for (size_t i = 0; i < RESULTS_STATUS_MAX; i++)
        if (k->status[i].code == code || k->status[i].code == 0) {
            k->status[i].code = code;
            k->status[i].n += n;
            return;
        }
    k->status_other += n;
}
