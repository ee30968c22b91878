/* Benchmark of the log readers (src/alog/): writes a synthetic log of N lines, then parses a log
 * on one core and reports lines per second and the process's peak resident memory.
 *     alog-bench gen common|combined|ndjson N FILE [gz]
 *     alog-bench parse FILE
 * Run by tools/bench/alog.sh, which writes the figures into RESULTS.md. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <time.h>
#include <zlib.h>

#include "squall/alog.h"
#include "squall/rng.h"

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + ts.tv_nsec / 1e9;
}

/* One line of a day at about 1,000 requests/s of sensor gateways (our invented setting). */
static int log_line(char *b, size_t len, const char *fmt, uint64_t i, rng_t *g)
{
    static const char *const sites[] = {"north", "south", "harbor", "ridge"};
    static const char *const methods[] = {"GET", "GET", "GET", "PUT", "POST", "DELETE"};
    static const char *const months[] = {"Jan", "Feb", "Mar", "Apr", "May", "Jun",
                                         "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"};
    uint64_t ms = UINT64_C(1700000000000) + i + rng_below(g, 3);
    time_t t = (time_t)(ms / 1000);
    struct tm tm;
    gmtime_r(&t, &tm);
    const char *site = sites[rng_below(g, 4)], *m = methods[rng_below(g, 6)];
    unsigned gw = (unsigned)rng_below(g, 5000), st = rng_below(g, 50) ? 200 : 503;
    unsigned size = (unsigned)rng_below(g, 4000);
    if (strcmp(fmt, "ndjson") == 0)
        return snprintf(b, len,
                        "{\"msec\":%llu.%03llu,\"method\":\"%s\",\"uri\":\"/v1/sites/%s/gateways/"
                        "gw-%u?v=%u\",\"status\":%u,\"request_time\":0.%03u,\"client\":\"10.1.%u."
                        "%u\",\"bytes\":%u}\n",
                        (unsigned long long)(ms / 1000), (unsigned long long)(ms % 1000), m, site,
                        gw, size, st, size % 1000, gw / 250, gw % 250, size);
    int n = snprintf(b, len,
                     "10.1.%u.%u - gw-%u [%02d/%s/%04d:%02d:%02d:%02d +0000] \"%s "
                     "/v1/sites/%s/gateways/gw-%u HTTP/1.1\" %u %u",
                     gw / 250, gw % 250, gw, tm.tm_mday, months[tm.tm_mon], tm.tm_year + 1900,
                     tm.tm_hour, tm.tm_min, tm.tm_sec, m, site, gw, st, size);
    if (strcmp(fmt, "combined") == 0)
        n += snprintf(b + n, len - (size_t)n, " \"-\" \"gateway-agent/2.%u (site %s)\"", gw % 7,
                      site);
    return n + snprintf(b + n, len - (size_t)n, "\n");
}

static int gen(const char *fmt, uint64_t n, const char *path, bool gz)
{
    FILE *f = gz ? NULL : fopen(path, "w");
    gzFile z = gz ? gzopen(path, "wb1") : NULL;
    if (!f && !z)
        return perror(path), 1;
    rng_t g;
    rng_seed(&g, 1);
    char b[512];
    for (uint64_t i = 0; i < n; i++) {
        int k = log_line(b, sizeof b, fmt, i, &g);
        if (z ? gzwrite(z, b, (unsigned)k) != k : fwrite(b, 1, (size_t)k, f) != (size_t)k)
            return fprintf(stderr, "%s: write failed\n", path), 1;
    }
    return (z ? gzclose(z) != Z_OK : fclose(f) != 0) ? 1 : 0;
}

static int parse_log(const char *path)
{
    alog_config_t c;
    alog_config_init(&c);
    char err[600];
    const char *opts[][2] = {
        {"field", "time=msec"}, {"field", "path=uri"}, {"field", "duration=request_time"}};
    for (size_t i = 0; i < 3; i++)
        if (alog_config_set(&c, opts[i][0], opts[i][1], err, sizeof err))
            return fprintf(stderr, "%s\n", err), 1;
    double t0 = now_s();
    alog_t *r;
    if (alog_open(path, &c, &r, err, sizeof err))
        return fprintf(stderr, "%s\n", err), 1;
    alog_record_t rec;
    uint64_t sum = 0;
    int rc;
    while ((rc = alog_next(r, &rec)) == 1)
        sum += (uint64_t)rec.status + (uint64_t)rec.path[1]; /* touch the record */
    double dt = now_s() - t0;
    const alog_stats_t *st = alog_stats(r);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    printf("format=%s gzip=%d lines=%llu records=%llu malformed=%llu seconds=%.3f "
           "lines_per_s=%.0f peak_rss_kib=%ld check=%llu\n",
           alog_format_name(st->format), st->gzip, (unsigned long long)st->lines,
           (unsigned long long)st->records, (unsigned long long)st->malformed, dt,
           (double)st->lines / dt, ru.ru_maxrss, (unsigned long long)sum);
    alog_close(r);
    return rc < 0;
}

int main(int argc, char **argv)
{
    if (argc >= 5 && strcmp(argv[1], "gen") == 0)
        return gen(argv[2], strtoull(argv[3], NULL, 10), argv[4],
                   argc > 5 && strcmp(argv[5], "gz") == 0);
    if (argc == 3 && strcmp(argv[1], "parse") == 0)
        return parse_log(argv[2]);
    fprintf(stderr, "usage: alog-bench gen common|combined|ndjson N FILE [gz] | parse FILE\n");
    return 2;
}
