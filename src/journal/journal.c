/* The journal file: records appended to an own buffer and written with write(2) (creates'
 * intents at once, the rest at least once a second), and read back into the set of objects
 * still alive, skipping a torn last line. */
#include <errno.h>
#include <fcntl.h>
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "squall/journal.h"
#include "squall/value.h"
#include "squall/pool.h"

#define BUF_CAP 65536

struct journal {
    int fd;
    char *path;
    out_t *o;
    char buf[BUF_CAP];
    size_t len;
    int err; /* first write error */
};

static const char *const op_names[] = {"put", "created", "failed", "deleted"};

static int write_all(journal_t *j, const char *p, size_t n)
{
    while (n > 0) {
        ssize_t w = write(j->fd, p, n);
        if (w < 0 && errno == EINTR)
            continue;
        if (w <= 0) {
            if (!j->err)
                out_error(j->o,
                          "journal %s: cannot write: %s (objects created from now on may "
                          "not be cleaned up after a crash)",
                          j->path, strerror(errno));
            j->err = SQ_EIO;
            return SQ_EIO;
        }
        p += w;
        n -= (size_t)w;
    }
    return 0;
}

int journal_flush(journal_t *j)
{
    if (!j || j->len == 0)
        return 0;
    int rc = write_all(j, j->buf, j->len);
    j->len = 0;
    return rc;
}

/* Appends one JSON line to the buffer, flushing first when it would not fit. */
static int append_line(journal_t *j, json_t *rec)
{
    char *line = json_dumps(rec, JSON_COMPACT);
    json_decref(rec);
    if (!line)
        return SQ_ENOMEM;
    size_t n = strlen(line);
    int rc = 0;
    if (j->len + n + 1 > BUF_CAP)
        rc = journal_flush(j);
    if (n + 1 > BUF_CAP) {
        rc = write_all(j, line, n);
        if (rc == 0)
            rc = write_all(j, "\n", 1);
    } else {
        memcpy(j->buf + j->len, line, n);
        j->buf[j->len + n] = '\n';
        j->len += n + 1;
    }
    free(line);
    return rc;
}

/* True when the file is not empty and its last byte is not a newline (a torn line). */
static bool ends_torn(int fd, off_t size)
{
    char c;
    return size > 0 && pread(fd, &c, 1, size - 1) == 1 && c != '\n';
}

int journal_open(const char *path, const char *target_url, out_t *o, journal_t **out)
{
    journal_t *j = calloc(1, sizeof(*j));
    if (!j || !(j->path = strdup(path))) {
        free(j);
        return SQ_ENOMEM;
    }
    j->o = o;
    j->fd = open(path, O_RDWR | O_CREAT | O_APPEND | O_CLOEXEC, 0644); /* read: a torn tail */
    struct stat st;
    if (j->fd < 0 || fstat(j->fd, &st)) {
        out_error(o, "journal %s: cannot open for writing: %s", path, strerror(errno));
        if (j->fd >= 0)
            close(j->fd);
        free(j->path);
        free(j);
        return SQ_EIO;
    }
    int rc = 0;
    if (ends_torn(j->fd, st.st_size))
        rc = write_all(j, "\n", 1);
    if (rc == 0 && st.st_size == 0) {
        rc = append_line(j, json_pack("{s:i, s:s, s:I}", "squall_journal", JOURNAL_VERSION,
                                      "target", target_url, "started_unix_ms",
                                      (json_int_t)(clock_real_ns() / 1000000)));
        if (rc == 0)
            rc = journal_flush(j);
    }
    if (rc) {
        journal_close(j);
        return rc;
    }
    *out = j;
    return 0;
}

int journal_add(journal_t *j, enum journal_op op, const char *path, const char *cls,
                uint64_t version)
{
    if (!j)
        return 0; /* no journal (a plan without creating classes): nothing to record */
    json_t *rec = json_pack("{s:s, s:s, s:s, s:I}", "op", op_names[op], "path", path, "class",
                            cls ? cls : "", "t", (json_int_t)(clock_real_ns() / 1000000));
    if (!rec)
        return SQ_ENOMEM;
    if (op == JOURNAL_CREATED && version)
        json_object_set_new(rec, "version", json_integer((json_int_t)version));
    int rc = append_line(j, rec);
    if (rc == 0 && op == JOURNAL_PUT)
        rc = journal_flush(j);
    return rc;
}

int journal_close(journal_t *j)
{
    if (!j)
        return 0;
    journal_flush(j);
    if (fsync(j->fd) && !j->err)
        j->err = SQ_EIO;
    close(j->fd);
    int rc = j->err;
    free(j->path);
    free(j);
    return rc;
}

/* ---- reading ------------------------------------------------------------------------------ */

typedef struct {
    journal_alive_t *a;
    pool_t *index; /* path -> entry (its version field is the entry's index) */
    char **paths, **classes;
    int *state; /* the last op of each entry */
    size_t n, cap;
    const char *bad_path; /* why the current line's path was refused, else NULL */
} reader_t;

static int entry_for(reader_t *rd, const char *path, const char *cls, size_t *i)
{
    long slot = pool_slot(rd->index, path);
    if (slot >= 0) {
        *i = (size_t)pool_version(rd->index, (size_t)slot);
        return 0;
    }
    if (rd->n == rd->cap) {
        size_t cap = rd->cap ? rd->cap * 2 : 256;
        char **p = realloc(rd->paths, cap * sizeof(*p));
        if (p)
            rd->paths = p;
        char **c = realloc(rd->classes, cap * sizeof(*c));
        if (c)
            rd->classes = c;
        int *s = realloc(rd->state, cap * sizeof(*s));
        if (s)
            rd->state = s;
        if (!p || !c || !s)
            return SQ_ENOMEM;
        rd->cap = cap;
    }
    rd->paths[rd->n] = strdup(path);
    rd->classes[rd->n] = strdup(cls);
    if (!rd->paths[rd->n] || !rd->classes[rd->n] || pool_add(rd->index, path, rd->n)) {
        free(rd->paths[rd->n]);
        free(rd->classes[rd->n]);
        return SQ_ENOMEM;
    }
    *i = rd->n++;
    return 0;
}

/* One record line; false when it is not a record this reader knows. */
static int read_record(reader_t *rd, json_t *rec, bool *ok)
{
    const char *op = NULL, *path = NULL, *cls = "";
    *ok = json_unpack(rec, "{s:s, s:s, s?s}", "op", &op, "path", &path, "class", &cls) == 0;
    int k = -1;
    for (int i = 0; *ok && i < 4; i++)
        if (strcmp(op, op_names[i]) == 0)
            k = i;
    if (!*ok || k < 0) {
        *ok = false;
        return 0;
    }
    /* A journal is a file anyone may have edited: its paths are checked like anything else
     * that becomes part of a request (an "@host/x" would name another host). */
    if ((rd->bad_path = value_path_problem(path)) != NULL) {
        *ok = false;
        return 0;
    }
    size_t e;
    int rc = entry_for(rd, path, cls, &e);
    if (rc)
        return rc;
    rd->state[e] = k;
    rd->a->created += k == JOURNAL_CREATED;
    rd->a->deleted += k == JOURNAL_DELETED;
    return 0;
}

static int read_line(reader_t *rd, const char *file, const char *s, size_t len, size_t lineno,
                     bool last, out_t *o)
{
    json_error_t jerr;
    json_t *rec = len ? json_loadb(s, len, 0, &jerr) : NULL;
    bool ok = false;
    int rc = 0;
    rd->bad_path = NULL;
    if (rec && lineno == 1) {
        const char *t = NULL;
        int version = 0;
        ok = json_unpack(rec, "{s:i, s:s}", "squall_journal", &version, "target", &t) == 0;
        if (ok && version != JOURNAL_VERSION) {
            out_error(o, "%s:1: journal version %d, this squall reads version %d", file, version,
                      JOURNAL_VERSION);
            json_decref(rec);
            return SQ_EPARSE;
        }
        if (ok && !(rd->a->target = strdup(t)))
            rc = SQ_ENOMEM;
    } else if (rec) {
        rc = read_record(rd, rec, &ok);
    }
    json_decref(rec);
    if (rc || ok || len == 0)
        return rc;
    if (lineno == 1) {
        out_error(o, "%s:1: not a squall journal (expected its header line)", file);
        return SQ_EPARSE;
    }
    rd->a->torn++;
    if (rd->bad_path)
        out_warn(o, "%s:%zu: line skipped: its path is not a request path (%s)", file, lineno,
                 rd->bad_path);
    else
        out_warn(o, "%s:%zu: %s line skipped%s", file, lineno, last ? "torn last" : "malformed",
                 last ? " (the writer stopped mid-line, e.g. killed)" : "");
    return 0;
}

static int read_all(const char *path, char **data, size_t *len, out_t *o)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        out_error(o, "journal %s: cannot read: %s", path, strerror(errno));
        return SQ_EIO;
    }
    size_t cap = 65536, n = 0;
    char *buf = malloc(cap);
    size_t got;
    while (buf && (got = fread(buf + n, 1, cap - n, f)) > 0) {
        n += got;
        if (n == cap) {
            char *nb = realloc(buf, cap * 2);
            if (!nb) {
                free(buf);
                buf = NULL;
            }
            buf = nb;
            cap *= 2;
        }
    }
    fclose(f);
    if (!buf)
        return SQ_ENOMEM;
    *data = buf;
    *len = n;
    return 0;
}

/* Moves the entries whose last op is put or created into *a. */
static int collect_alive(reader_t *rd)
{
    journal_alive_t *a = rd->a;
    size_t m = rd->n ? rd->n : 1;
    a->paths = calloc(m, sizeof(char *));
    a->classes = calloc(m, sizeof(char *));
    a->confirmed = calloc(m, sizeof(bool));
    if (!a->paths || !a->classes || !a->confirmed)
        return SQ_ENOMEM;
    for (size_t i = 0; i < rd->n; i++) {
        if (rd->state[i] == JOURNAL_PUT || rd->state[i] == JOURNAL_CREATED) {
            a->paths[a->n] = rd->paths[i];
            a->classes[a->n] = rd->classes[i];
            a->confirmed[a->n++] = rd->state[i] == JOURNAL_CREATED;
            rd->paths[i] = rd->classes[i] = NULL;
        }
    }
    return 0;
}

int journal_read(const char *path, journal_alive_t *a, out_t *o)
{
    memset(a, 0, sizeof(*a));
    char *data;
    size_t len;
    int rc = read_all(path, &data, &len, o);
    if (rc)
        return rc;
    reader_t rd = {.a = a};
    rc = pool_new(&rd.index);
    size_t lineno = 0;
    for (size_t at = 0; rc == 0 && at < len;) {
        char *nl = memchr(data + at, '\n', len - at);
        size_t end = nl ? (size_t)(nl - data) : len;
        a->records++;
        rc = read_line(&rd, path, data + at, end - at, ++lineno, !nl, o);
        at = end + 1;
    }
    if (rc == 0 && !a->target) {
        out_error(o, "%s: empty journal (expected its header line)", path);
        rc = SQ_EPARSE;
    }
    if (rc == 0)
        rc = collect_alive(&rd);
    for (size_t i = 0; i < rd.n; i++) {
        free(rd.paths[i]);
        free(rd.classes[i]);
    }
    free(rd.paths);
    free(rd.classes);
    free(rd.state);
    pool_free(rd.index);
    free(data);
    if (rc)
        journal_alive_close(a);
    return rc;
}

void journal_alive_close(journal_alive_t *a)
{
    for (size_t i = 0; i < a->n; i++) {
        free(a->paths[i]);
        free(a->classes[i]);
    }
    free(a->paths);
    free(a->classes);
    free(a->confirmed);
    free(a->target);
    memset(a, 0, sizeof(*a));
}

/* One input of journal_merge: its header checked against the first's target, its records
 * appended to f. */
static int merge_one(const char *in, FILE *f, char **target, out_t *o)
{
    FILE *g = fopen(in, "r");
    if (!g)
        return errno == ENOENT ? 0 : (out_error(o, "%s: %s", in, strerror(errno)), SQ_EIO);
    char *line = NULL;
    size_t cap = 0;
    int rc = 0;
    ssize_t len = getline(&line, &cap, g);
    json_t *h = len > 0 ? json_loads(line, 0, NULL) : NULL;
    const char *t = json_string_value(json_object_get(h, "target"));
    if (!t || json_integer_value(json_object_get(h, "squall_journal")) != JOURNAL_VERSION) {
        out_error(o, "%s: not a squall journal of version %d", in, JOURNAL_VERSION);
        rc = SQ_EIO;
    } else if (*target && strcmp(*target, t) != 0) {
        out_error(o, "%s: its journal's target %s is not %s: not one run's", in, t, *target);
        rc = SQ_EINVAL;
    } else if (!*target) {
        rc = (*target = strdup(t)) && fputs(line, f) >= 0 ? 0 : SQ_EIO;
    }
    while (rc == 0 && (len = getline(&line, &cap, g)) > 0)
        if (fwrite(line, 1, (size_t)len, f) != (size_t)len)
            rc = SQ_EIO;
    if (rc == 0 && ferror(g))
        rc = SQ_EIO;
    json_decref(h);
    free(line);
    fclose(g);
    return rc;
}

int journal_merge(const char *const *ins, size_t n, const char *out, out_t *o)
{
    char tmp[4096];
    snprintf(tmp, sizeof tmp, "%s.part", out);
    FILE *f = fopen(tmp, "w");
    if (!f) {
        out_error(o, "%s: %s", tmp, strerror(errno));
        return SQ_EIO;
    }
    char *target = NULL;
    int rc = 0;
    for (size_t i = 0; rc == 0 && i < n; i++)
        rc = ins[i] ? merge_one(ins[i], f, &target, o) : 0;
    if (fclose(f) != 0 && rc == 0)
        rc = SQ_EIO;
    if (rc == 0 && target && rename(tmp, out) != 0)
        rc = SQ_EIO;
    if (rc != 0 || !target)
        unlink(tmp);
    if (rc == SQ_EIO)
        out_error(o, "%s: the merged journal could not be written", out);
    free(target);
    return rc;
}
