/* The log reader: lines from a plain or gzip file through one fixed buffer, the probe that
 * detects and vets the format before anything is returned, and the malformed-line accounting. */
#include <errno.h>
#include <fcntl.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>
#include <zlib.h>

#include "alog_int.h"
#include "squall/err.h"

#define BUF_SIZE   (256 * 1024) /* > ALOG_MAX_LINE, so a whole line always fits */
#define SAMPLE_LEN 240

struct alog {
    int fd;
    gzFile gz;
    char *name;
    alog_config_t cfg;
    char *fields[8]; /* copies of the NDJSON field names */
    char *buf;
    size_t start, end; /* unread bytes of buf */
    bool eof, failed, skipping;
    alog_parse_t parse;
    alog_stats_t st;
    char samples[ALOG_MAX_SAMPLES][SAMPLE_LEN];
    char err[300];
};

/* ---- bytes and lines ------------------------------------------------------------------- */

/* Refills buf after moving the unread bytes to its front. 1 read, 0 end, -1 error. */
static int fill(alog_t *r)
{
    if (r->eof)
        return 0;
    memmove(r->buf, r->buf + r->start, r->end - r->start);
    r->end -= r->start;
    r->start = 0;
    size_t room = BUF_SIZE - r->end;
    ssize_t got;
    if (r->gz) {
        got = gzread(r->gz, r->buf + r->end, (unsigned)room);
        int zerr = Z_OK;
        const char *msg = got <= 0 ? gzerror(r->gz, &zerr) : "";
        /* zlib gives a truncated file's data first, then 0 with Z_BUF_ERROR ("input file ended
         * in the middle of a gzip stream", zlib.h on gzread): an error for us. */
        if (got < 0 || zerr == Z_BUF_ERROR) {
            snprintf(r->err, sizeof r->err, "%s: gzip: %s", r->name, msg);
            got = -1;
        }
    } else {
        do
            got = read(r->fd, r->buf + r->end, room);
        while (got < 0 && errno == EINTR);
        if (got < 0)
            snprintf(r->err, sizeof r->err, "%s: %s", r->name, strerror(errno));
    }
    if (got < 0) {
        r->failed = r->eof = true;
        return -1;
    }
    if (got == 0)
        r->eof = true;
    r->end += (size_t)got;
    return got > 0;
}

/* The next line without its '\n' (and '\r'): 1, or 0 at the end, -1 on error. *overlong when it
 * was longer than ALOG_MAX_LINE (its bytes were skipped, never stored). */
static int next_line(alog_t *r, const char **line, size_t *n, bool *overlong)
{
    *overlong = false;
    for (;;) {
        char *s = r->buf + r->start;
        char *nl = memchr(s, '\n', r->end - r->start);
        if (nl) {
            r->start = (size_t)(nl - r->buf) + 1;
            if (r->skipping) {
                r->skipping = false;
                *overlong = true;
                return 1;
            }
            *line = s;
            *n = (size_t)(nl - s);
            if (*n > 0 && s[*n - 1] == '\r')
                (*n)--;
            *overlong = *n > ALOG_MAX_LINE;
            return 1;
        }
        if (r->end - r->start > ALOG_MAX_LINE + 1) { /* no newline in reach: skip to the next */
            r->skipping = true;
            r->start = r->end;
        }
        int rc = fill(r);
        if (rc < 0)
            return -1;
        if (rc == 0) {
            if (r->start == r->end && !r->skipping)
                return 0;
            /* A last line without '\n'. */
            *overlong = r->skipping;
            r->skipping = false;
            *line = r->buf + r->start;
            *n = r->end - r->start;
            r->start = r->end;
            if (*n > 0 && (*line)[*n - 1] == '\r')
                (*n)--;
            return 1;
        }
    }
}

/* ---- parsing and accounting ------------------------------------------------------------ */

static int parse(alog_t *r, enum alog_format f, const char *line, size_t n, alog_record_t *rec)
{
    if (f == ALOG_NDJSON)
        return alog_parse_ndjson(&r->parse, &r->cfg, line, n, rec);
    return alog_parse_clf(&r->parse, line, n, f == ALOG_COMBINED, rec);
}

static bool blank(const char *s, size_t n)
{
    for (size_t i = 0; i < n; i++)
        if (s[i] != ' ' && s[i] != '\t')
            return false;
    return true;
}

static void malformed(alog_t *r, const char *why)
{
    r->st.malformed++;
    if (r->st.n_samples < ALOG_MAX_SAMPLES) {
        char *d = r->samples[r->st.n_samples];
        snprintf(d, SAMPLE_LEN, "line %llu: %s", (unsigned long long)r->st.lines, why);
        r->st.samples[r->st.n_samples++] = d;
    }
}

int alog_next(alog_t *r, alog_record_t *rec)
{
    const char *line;
    size_t n;
    bool overlong;
    int rc;
    if (r->failed) /* after a read error the reader stays at the end */
        return 0;
    while ((rc = next_line(r, &line, &n, &overlong)) == 1) {
        r->st.lines++;
        if (overlong) {
            malformed(r, "line too long (expected at most 65536 bytes)");
            continue;
        }
        if (blank(line, n)) {
            r->st.blank++;
            continue;
        }
        if (parse(r, r->st.format, line, n, rec) == 0) {
            rec->line = r->st.lines;
            r->st.records++;
            return 1;
        }
        malformed(r, r->parse.why);
    }
    return rc < 0 ? SQ_EIO : 0;
}

/* ---- open: detect, vet, rewind --------------------------------------------------------- */

static const char *expects(const alog_t *r, enum alog_format f, char *buf, size_t len)
{
    if (f == ALOG_COMMON)
        return "Common Log Format: %h %l %u %t \"%r\" %>s %b";
    if (f == ALOG_COMBINED)
        return "Combined Log Format: %h %l %u %t \"%r\" %>s %b \"%{Referer}i\" "
               "\"%{User-agent}i\"";
    const alog_ndjson_t *j = &r->cfg.ndjson;
    snprintf(buf, len, "NDJSON: one JSON object per line with fields '%s', '%s' and '%s'",
             j->time ? j->time : "", j->method ? j->method : "", j->path ? j->path : "");
    return buf;
}

typedef struct {
    enum alog_format f[3];
    int n;
    uint64_t ok[3], nonblank;
    uint64_t bad_line[3]; /* first line each format refused, 0 if none */
    char bad_why[3][200], bad_text[3][140];
} probe_t;

static void probe_line(alog_t *r, probe_t *pr, const char *line, size_t n, bool overlong)
{
    alog_record_t rec;
    pr->nonblank++;
    for (int c = 0; c < pr->n; c++) {
        if (!overlong && parse(r, pr->f[c], line, n, &rec) == 0) {
            pr->ok[c]++;
        } else if (!pr->bad_line[c]) {
            pr->bad_line[c] = r->st.lines;
            snprintf(pr->bad_why[c], sizeof pr->bad_why[c], "%s",
                     overlong ? "line too long" : r->parse.why);
            alog_escape(pr->bad_text[c], sizeof pr->bad_text[c], line, n, 120);
        }
    }
}

static int refuse(alog_t *r, const probe_t *pr, int best, char *err, size_t len)
{
    char ex[200];
    const char *what = expects(r, pr->f[best], ex, sizeof ex);
    if (pr->n > 1)
        snprintf(err, len,
                 "%s: not a log squall reads: no format parses half of the first %llu lines "
                 "(best: %llu lines as %s); line %llu: '%s': %s",
                 r->name, (unsigned long long)pr->nonblank, (unsigned long long)pr->ok[best], what,
                 (unsigned long long)pr->bad_line[best], pr->bad_text[best], pr->bad_why[best]);
    else
        snprintf(err, len,
                 "%s: %llu of the first %llu lines are malformed (expected %s); line %llu: "
                 "'%s': %s",
                 r->name, (unsigned long long)(pr->nonblank - pr->ok[best]),
                 (unsigned long long)pr->nonblank, what, (unsigned long long)pr->bad_line[best],
                 pr->bad_text[best], pr->bad_why[best]);
    return SQ_EPARSE;
}

/* Reads up to ALOG_PROBE_LINES non-blank lines with every candidate format, keeps the best, and
 * refuses the log when it parses fewer than half of them. */
static int probe(alog_t *r, char *err, size_t len)
{
    probe_t pr = {.n = 1, .f = {r->cfg.format}};
    if (r->cfg.format == ALOG_AUTO)
        pr = (probe_t){.n = 3, .f = {ALOG_COMBINED, ALOG_COMMON, ALOG_NDJSON}};
    const char *line;
    size_t n;
    bool overlong;
    int rc;
    while (pr.nonblank < ALOG_PROBE_LINES && (rc = next_line(r, &line, &n, &overlong)) == 1) {
        r->st.lines++;
        if (overlong || !blank(line, n))
            probe_line(r, &pr, line, n, overlong);
    }
    if (r->failed) {
        snprintf(err, len, "%s", r->err);
        return SQ_EIO;
    }
    int best = 0;
    for (int c = 1; c < pr.n; c++)
        if (pr.ok[c] > pr.ok[best])
            best = c;
    r->st.format = pr.f[best];
    if (pr.nonblank > 0 && pr.ok[best] * 2 < pr.nonblank)
        return refuse(r, &pr, best, err, len);
    if (alog_rewind(r)) {
        snprintf(err, len, "%s", r->err);
        return SQ_EIO;
    }
    return 0;
}

int alog_rewind(alog_t *r)
{
    if (r->gz ? gzrewind(r->gz) != 0 : lseek(r->fd, 0, SEEK_SET) < 0) {
        snprintf(r->err, sizeof r->err, "%s: cannot read it again from the start", r->name);
        return SQ_EIO;
    }
    r->start = r->end = 0;
    r->eof = r->failed = r->skipping = false;
    r->parse.clf_text[0] = '\0';
    enum alog_format f = r->st.format;
    bool gz = r->st.gzip;
    memset(&r->st, 0, sizeof r->st);
    r->st.format = f;
    r->st.gzip = gz;
    return 0;
}

/* Copies the configuration's strings so the caller's may go away. */
static int copy_config(alog_t *r, const alog_config_t *cfg)
{
    r->cfg = *cfg;
    const char **f[] = {&r->cfg.ndjson.time,   &r->cfg.ndjson.method,   &r->cfg.ndjson.path,
                        &r->cfg.ndjson.status, &r->cfg.ndjson.duration, &r->cfg.ndjson.client,
                        &r->cfg.ndjson.bytes,  &r->cfg.ndjson.body};
    for (size_t i = 0; i < 8; i++) {
        if (!*f[i])
            continue;
        if (!(r->fields[i] = strdup(*f[i])))
            return SQ_ENOMEM;
        *f[i] = r->fields[i];
    }
    return 0;
}

/* Reads the first bytes for the gzip magic (RFC 1952 §2.3.1: ID1 31, ID2 139) and puts zlib in
 * front of the descriptor when it is there. */
static int open_source(alog_t *r, char *err, size_t len)
{
    unsigned char magic[2];
    if (lseek(r->fd, 0, SEEK_SET) < 0) {
        snprintf(err, len, "%s: cannot read it twice (a pipe?): give a file", r->name);
        return SQ_EIO;
    }
    ssize_t got = pread(r->fd, magic, 2, 0);
    if (got < 0) {
        snprintf(err, len, "%s: %s", r->name, strerror(errno));
        return SQ_EIO;
    }
    if (got == 2 && magic[0] == 0x1f && magic[1] == 0x8b) {
        r->gz = gzdopen(r->fd, "rb");
        if (!r->gz)
            return SQ_ENOMEM;
        r->fd = -1; /* zlib owns it now */
        gzbuffer(r->gz, 128 * 1024);
        r->st.gzip = true;
    }
    return 0;
}

int alog_open_fd(int fd, const char *name, const alog_config_t *cfg, alog_t **out, char *err,
                 size_t len)
{
    *out = NULL;
    alog_t *r = calloc(1, sizeof *r);
    if (!r) {
        close(fd);
        return SQ_ENOMEM;
    }
    r->fd = fd;
    r->name = strdup(name ? name : "log");
    r->buf = malloc(BUF_SIZE);
    r->parse.s = malloc(ALOG_SCRATCH);
    r->parse.cap = ALOG_SCRATCH;
    int rc = !r->name || !r->buf || !r->parse.s ? SQ_ENOMEM : copy_config(r, cfg);
    if (rc == 0)
        rc = open_source(r, err, len);
    if (rc == 0)
        rc = probe(r, err, len);
    if (rc) {
        if (rc == SQ_ENOMEM)
            snprintf(err, len, "%s: out of memory", name ? name : "log");
        alog_close(r);
        return rc;
    }
    *out = r;
    return 0;
}

int alog_open(const char *path, const alog_config_t *cfg, alog_t **out, char *err, size_t len)
{
    *out = NULL;
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0) {
        snprintf(err, len, "%s: %s", path, strerror(errno));
        return SQ_EIO;
    }
    return alog_open_fd(fd, path, cfg, out, err, len);
}

const alog_stats_t *alog_stats(const alog_t *r)
{
    return &r->st;
}

const char *alog_error(const alog_t *r)
{
    return r->err;
}

void alog_close(alog_t *r)
{
    if (!r)
        return;
    if (r->gz)
        gzclose(r->gz);
    else if (r->fd >= 0)
        close(r->fd);
    for (size_t i = 0; i < 8; i++)
        free(r->fields[i]);
    free(r->parse.s);
    free(r->buf);
    free(r->name);
    free(r);
}
