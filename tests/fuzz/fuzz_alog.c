/* libFuzzer target for the log readers (src/alog/): the first byte picks the configuration
 * (format, time unit, duration unit, time at the end), the rest is the log, read through a
 * memfd exactly as a file. Every record must satisfy the reader's promises (alog.h); a broken
 * promise aborts, which libFuzzer reports with the input. */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>

#include "squall/alog.h"

static void check(const alog_record_t *rec, uint64_t prev_line)
{
    if (!alog_method_ok(rec->method, strlen(rec->method)) || rec->path[0] != '/' ||
        rec->line <= prev_line || rec->t_ns < 0 || rec->resolution_ns <= 0 ||
        (rec->status != 0 && (rec->status < 100 || rec->status > 999)) || rec->duration_ns < -1 ||
        rec->bytes < -1 || (rec->body == NULL && rec->body_len != 0))
        abort();
    for (const char *s = rec->path; *s; s++)
        if ((unsigned char)*s <= 0x20 || (unsigned char)*s >= 0x7f)
            abort();
    for (const char *s = rec->client; *s; s++)
        if ((unsigned char)*s <= 0x20 || (unsigned char)*s >= 0x7f)
            abort();
}

static void read_all(alog_t *r)
{
    alog_record_t rec;
    uint64_t prev = 0;
    while (alog_next(r, &rec) == 1) {
        check(&rec, prev);
        prev = rec.line;
    }
    const alog_stats_t *st = alog_stats(r);
    if (st->records + st->malformed + st->blank > st->lines || st->n_samples > ALOG_MAX_SAMPLES)
        abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static int mfd = -1;
    if (size < 1)
        return 0;
    if (mfd < 0 && (mfd = memfd_create("fuzz-log", MFD_CLOEXEC)) < 0)
        abort();
    if (ftruncate(mfd, 0) ||
        (size > 1 && pwrite(mfd, data + 1, size - 1, 0) != (ssize_t)(size - 1)))
        abort();
    alog_config_t c;
    alog_config_init(&c);
    c.format = (enum alog_format)(data[0] & 3);
    c.time_at_end = data[0] & 4;
    c.ndjson.time_kind = (enum alog_time_kind)((data[0] >> 3) % 6);
    c.ndjson.duration_unit = (enum alog_unit)(data[0] >> 6);
    char err[600];
    alog_t *r;
    int fd = dup(mfd);
    if (fd < 0)
        abort();
    if (alog_open_fd(fd, "fuzz", &c, &r, err, sizeof err) != 0)
        return 0;
    read_all(r);
    if (alog_rewind(r) == 0) /* a second pass must read the same */
        read_all(r);
    alog_close(r);
    return 0;
}
