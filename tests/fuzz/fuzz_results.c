/* libFuzzer target for the results readers (src/results/): byte 0 picks the reader, the rest is
 * its file. Even: results.json, read as `squall report` reads one (results_read), then merged
 * into a fresh results as `squall merge` does. Odd: series.csv beside a valid results.json,
 * combined as `merge` combines series (results_series_merge, written to a scratch directory);
 * with bit 1 also set, read as report.html reads it, then as its series-hist.csv
 * (report_series_read, report_series_read_hist). */
#include <errno.h>
#include <string.h>
#include <sys/stat.h>

#include "fuzz_util.h"
#include "squall/report.h"
#include "squall/results.h"

static char dir[64], out_dir[96];
static results_t *good;

static void setup(out_t *o)
{
    snprintf(dir, sizeof dir, "/tmp/fuzz-results-%d", (int)getpid());
    snprintf(out_dir, sizeof out_dir, "%s/merged", dir);
    if ((mkdir(dir, 0700) && errno != EEXIST) || results_new(&good) ||
        results_write_dir(good, dir, o))
        abort();
}

static void read_results(const uint8_t *data, size_t size, out_t *o)
{
    results_t *r = NULL, *m = NULL;
    if (results_read(fuzz_file(data, size), &r, o) == 0) {
        if (results_new(&m))
            abort();
        if (results_merge(m, r, "fuzz", o) == 0)
            results_merge_finish(m, o);
    }
    results_free(m);
    results_free(r);
}

static void read_series(const uint8_t *data, size_t size, out_t *o)
{
    char path[128];
    snprintf(path, sizeof path, "%s/%s", dir, RESULTS_SERIES_FILE);
    FILE *f = fopen(path, "wb");
    if (!f || (size && fwrite(data, 1, size, f) != size) || fclose(f))
        abort();
    const char *dirs[] = {dir};
    bool written;
    results_series_merge(dirs, 1, good, out_dir, &written, o);
}

static void read_report(const uint8_t *data, size_t size, out_t *o)
{
    char path[128];
    snprintf(path, sizeof path, "%s/report-series.csv", dir);
    FILE *f = fopen(path, "wb");
    if (!f || (size && fwrite(data, 1, size, f) != size) || fclose(f))
        abort();
    report_series_t *s = NULL;
    if (report_series_read(path, &s, o) != 0 && report_series_new(&s) != 0)
        abort();
    report_series_read_hist(s, path, o);
    report_series_free(s);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    out_t *o = out_new_capture();
    if (!o)
        abort();
    if (!good)
        setup(o);
    if ((data[0] & 3) == 3)
        read_report(data + 1, size - 1, o);
    else if (data[0] & 1)
        read_series(data + 1, size - 1, o);
    else
        read_results(data + 1, size - 1, o);
    out_free(o);
    return 0;
}
