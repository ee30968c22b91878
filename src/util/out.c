/* Human output through one object: results and leveled diagnostics, to files or captured. */
#include "squall/out.h"

#include <stdlib.h>
#include <string.h>
#include <unistd.h>

struct buf {
    char *data;
    size_t len, cap;
};

struct out {
    FILE *res, *diag; /* both NULL for a capture object */
    struct buf cres, cdiag;
    enum out_level level;
    bool tty;
    bool live_open; /* a redrawn line is on screen without its newline */
    int errors;
};

static out_t *out_alloc(void)
{
    out_t *o = calloc(1, sizeof(*o));
    if (o)
        o->level = OUT_INFO;
    return o;
}

out_t *out_new_file(FILE *res, FILE *diag)
{
    out_t *o = out_alloc();
    if (!o)
        return NULL;
    o->res = res;
    o->diag = diag;
    o->tty = diag && isatty(fileno(diag));
    return o;
}

out_t *out_new_capture(void)
{
    return out_alloc();
}

void out_free(out_t *o)
{
    if (!o)
        return;
    free(o->cres.data);
    free(o->cdiag.data);
    free(o);
}

void out_set_level(out_t *o, enum out_level level)
{
    o->level = level;
}

enum out_level out_level(const out_t *o)
{
    return o->level;
}

bool out_diag_is_tty(const out_t *o)
{
    return o->tty;
}

/* Appends formatted text to a capture buffer; on allocation failure the text is dropped, since
 * output must never be the reason a run dies. */
static void buf_vappend(struct buf *b, const char *fmt, va_list ap)
{
    va_list ap2;
    va_copy(ap2, ap);
    int n = vsnprintf(NULL, 0, fmt, ap2);
    va_end(ap2);
    if (n < 0)
        return;
    if (b->len + (size_t)n + 1 > b->cap) {
        size_t cap = b->cap ? b->cap : 256;
        while (cap < b->len + (size_t)n + 1)
            cap *= 2;
        char *d = realloc(b->data, cap);
        if (!d)
            return;
        b->data = d;
        b->cap = cap;
    }
    vsnprintf(b->data + b->len, (size_t)n + 1, fmt, ap);
    b->len += (size_t)n;
}

static void buf_append(struct buf *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    buf_vappend(b, fmt, ap);
    va_end(ap);
}

static void emit(out_t *o, bool to_res, const char *prefix, const char *fmt, va_list ap,
                 const char *suffix)
{
    FILE *fp = to_res ? o->res : o->diag;
    struct buf *b = to_res ? &o->cres : &o->cdiag;
    if (!to_res && o->live_open && fp) {
        fputs("\n", fp);
        o->live_open = false;
    }
    if (fp) {
        fputs(prefix, fp);
        vfprintf(fp, fmt, ap);
        fputs(suffix, fp);
        if (!to_res)
            fflush(fp);
    } else if (!o->res && !o->diag) {
        buf_append(b, "%s", prefix);
        buf_vappend(b, fmt, ap);
        buf_append(b, "%s", suffix);
    }
}

void out_print(out_t *o, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    emit(o, true, "", fmt, ap, "");
    va_end(ap);
}

void out_vraw(out_t *o, enum out_level level, const char *fmt, va_list ap)
{
    if (level == OUT_ERROR)
        o->errors++;
    if (level > o->level)
        return;
    emit(o, false, "", fmt, ap, "\n");
}

void out_raw(out_t *o, enum out_level level, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    out_vraw(o, level, fmt, ap);
    va_end(ap);
}

#define OUT_LEVEL_FN(fn, lvl, prefix)                                                              \
    void fn(out_t *o, const char *fmt, ...)                                                        \
    {                                                                                              \
        va_list ap;                                                                                \
        if (lvl == OUT_ERROR)                                                                      \
            o->errors++;                                                                           \
        if (lvl > o->level)                                                                        \
            return;                                                                                \
        va_start(ap, fmt);                                                                         \
        emit(o, false, prefix, fmt, ap, "\n");                                                     \
        va_end(ap);                                                                                \
    }
OUT_LEVEL_FN(out_error, OUT_ERROR, "squall: error: ")
OUT_LEVEL_FN(out_warn, OUT_WARN, "squall: warning: ")
OUT_LEVEL_FN(out_info, OUT_INFO, "")
OUT_LEVEL_FN(out_debug, OUT_DEBUG, "squall: debug: ")
#undef OUT_LEVEL_FN

void out_live(out_t *o, const char *fmt, ...)
{
    if (o->level < OUT_INFO)
        return;
    va_list ap;
    va_start(ap, fmt);
    if (o->tty && o->diag) {
        /* Carriage return and erase-to-end-of-line redraw the one status line in place. */
        fputs("\r\033[K", o->diag);
        vfprintf(o->diag, fmt, ap);
        fflush(o->diag);
        o->live_open = true;
    } else {
        emit(o, false, "", fmt, ap, "\n");
    }
    va_end(ap);
}

void out_live_end(out_t *o)
{
    if (o->live_open && o->diag) {
        fputs("\n", o->diag);
        fflush(o->diag);
    }
    o->live_open = false;
}

const char *out_captured_results(const out_t *o)
{
    return o->cres.data ? o->cres.data : "";
}

const char *out_captured_diag(const out_t *o)
{
    return o->cdiag.data ? o->cdiag.data : "";
}

int out_errors(const out_t *o)
{
    return o->errors;
}
