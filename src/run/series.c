/* The per-second view of a run: one series.csv row per class per second, and the live line. */
#include <errno.h>
#include <string.h>

#include "run_int.h"
#include "squall/err.h"

int run_series_open(runner_t *r, const char *dir)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/series.csv", dir);
    r->series = fopen(path, "w");
    if (!r->series) {
        out_error(r->o, "cannot write %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    /* Times in milliseconds; `second` counts from the start of the run. */
    fputs("second,phase,class,started,completed,rate_per_s,errors,p50_ms,p90_ms,p99_ms,max_ms\n",
          r->series);
    return 0;
}

/* ns in a JSON object as milliseconds for a CSV cell. */
static double json_ms(const json_t *o, const char *key)
{
    return (double)json_integer_value(json_object_get(o, key)) / 1e6;
}

int run_storms_csv(runner_t *r, const char *dir)
{
    json_t *storms = results_section(r->res, "storms");
    if (!storms)
        return 0;
    char path[4096];
    snprintf(path, sizeof path, "%s/storms.csv", dir);
    FILE *f = fopen(path, "w");
    if (!f) {
        out_error(r->o, "cannot write %s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    /* One row per fleet tick; tick_s counts from the start of its phase. */
    fputs("phase,class,timing,tick_s,requests,written,dispatch_spread_ms,first_written_ms,"
          "peak_in_flight,burst_ms,p50_ms,p99_ms,max_ms\n",
          f);
    const char *phase;
    json_t *ph;
    json_object_foreach(storms, phase, ph)
    {
        size_t i, k;
        json_t *a, *t;
        json_array_foreach(json_object_get(ph, "actions"), i, a)
        {
            json_array_foreach(json_object_get(a, "ticks"), k, t)
            {
                fprintf(f, "%s,%s,%s,%.3f,%lld,%lld,%.3f,%.3f,%lld,%.3f,%.3f,%.3f,%.3f\n", phase,
                        json_string_value(json_object_get(a, "class")),
                        json_string_value(json_object_get(a, "timing")), json_ms(t, "t_ns") / 1e3,
                        (long long)json_integer_value(json_object_get(t, "requests")),
                        (long long)json_integer_value(json_object_get(t, "written")),
                        json_ms(t, "dispatch_spread_ns"), json_ms(t, "first_written_ns"),
                        (long long)json_integer_value(json_object_get(t, "peak_in_flight")),
                        json_ms(t, "burst_ns"), json_ms(t, "p50_ns"), json_ms(t, "p99_ns"),
                        json_ms(t, "max_ns"));
            }
        }
    }
    return fclose(f) == 0 ? 0 : SQ_EIO;
}

void run_series_close(runner_t *r)
{
    if (r->series)
        fclose(r->series);
    r->series = NULL;
}

void run_sec_record(runner_t *r, int cls, const eng_result_t *res)
{
    run_sec_t *s = &r->sec[cls];
    int64_t v = res->done_ns - res->intended_ns;
    s->completed++;
    r->sec_completed++;
    r->total_completed++;
    if (run_is_error(res->outcome)) {
        s->errors++;
        r->sec_errors++;
        r->total_errors++;
    }
    hist_record(s->response, v);
    hist_record(r->sec_all, v);
}

static double ms(int64_t ns)
{
    return (double)ns / 1e6;
}

static void series_rows(runner_t *r, double secs)
{
    const char *phase = r->plan->phases[r->cur].name;
    for (size_t i = 0; i < r->n_classes; i++) {
        run_sec_t *s = &r->sec[i];
        if (s->started == 0 && s->completed == 0)
            continue;
        const hist_t *h = s->response;
        if (r->series)
            fprintf(r->series, "%lld,%s,%s,%lld,%lld,%.1f,%lld,%.3f,%.3f,%.3f,%.3f\n",
                    (long long)r->sec_index, phase, r->classes[i].pr->name, (long long)s->started,
                    (long long)s->completed, secs > 0 ? (double)s->completed / secs : 0.0,
                    (long long)s->errors, ms(hist_value_at(h, 50)), ms(hist_value_at(h, 90)),
                    ms(hist_value_at(h, 99)), ms(hist_max(h)));
        s->started = s->completed = s->errors = 0;
        hist_reset(s->response);
    }
    if (r->series)
        fflush(r->series);
}

static void live_line(runner_t *r, const eng_stats_t *st, double secs)
{
    if (r->opts->quiet)
        return;
    const run_phase_t *ph = &r->phases[r->cur];
    double elapsed = (double)((int64_t)uv_hrtime() - r->run_start_ns) / 1e9;
    double total = (double)r->planned_ns / 1e9;
    char limited[200] = "";
    if (r->limited_now)
        snprintf(limited, sizeof limited, "  GENERATOR-LIMITED: %s", r->limited_why);
    out_live(r->o,
             "[%s] %5.1fs/%.0fs  rate %.0f/s of %.0f/s  in flight %d  queued %d  errors %lld  "
             "p50 %.1fms  p99 %.1fms%s",
             ph->pp->name, elapsed, total, secs > 0 ? (double)r->sec_started / secs : 0.0,
             secs > 0 ? r->sec_target / secs : 0.0, st->in_flight, st->queued,
             (long long)r->sec_errors, ms(hist_value_at(r->sec_all, 50)),
             ms(hist_value_at(r->sec_all, 99)), limited);
}

void run_second(runner_t *r, bool final)
{
    eng_stats_t st;
    eng_stats(r->eng, &st, true);
    double secs = st.window_ns > 0 ? (double)st.window_ns / 1e9 : 1.0;
    int64_t lag_p99 = hist_value_at(r->sec_sched_lag, 99);
    run_health_second(r, &st, lag_p99);
    if (!final)
        live_line(r, &st, secs);
    series_rows(r, secs);
    r->sec_index++;
    r->sec_started = r->sec_completed = r->sec_errors = 0;
    r->sec_target = 0;
    hist_reset(r->sec_all);
    hist_reset(r->sec_sched_lag);
}
