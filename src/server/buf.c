/* A growable byte buffer for response bodies and stream queues of the embedded target. */
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "server_int.h"

static int reserve(srv_buf_t *b, size_t extra)
{
    if (b->len + extra + 1 <= b->cap)
        return 0;
    size_t cap = b->cap ? b->cap : 256;
    while (cap < b->len + extra + 1)
        cap *= 2;
    char *p = realloc(b->p, cap);
    if (!p)
        return SQ_ENOMEM;
    b->p = p;
    b->cap = cap;
    return 0;
}

int srv_buf_add(srv_buf_t *b, const char *s, size_t n)
{
    if (reserve(b, n) < 0)
        return SQ_ENOMEM;
    memcpy(b->p + b->len, s, n);
    b->len += n;
    b->p[b->len] = '\0';
    return 0;
}

int srv_buf_str(srv_buf_t *b, const char *s)
{
    return srv_buf_add(b, s, strlen(s));
}

int srv_buf_printf(srv_buf_t *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int n = vsnprintf(NULL, 0, fmt, ap);
    va_end(ap);
    if (n < 0 || reserve(b, (size_t)n) < 0)
        return SQ_ENOMEM;
    va_start(ap, fmt);
    vsnprintf(b->p + b->len, (size_t)n + 1, fmt, ap);
    va_end(ap);
    b->len += (size_t)n;
    return 0;
}

int srv_buf_json_str(srv_buf_t *b, const char *s)
{
    /* Paths are restricted to URL-safe characters, but messages may hold anything. */
    json_t *j = json_string(s);
    if (!j)
        return srv_buf_str(b, "\"\"");
    char *t = json_dumps(j, JSON_ENCODE_ANY);
    json_decref(j);
    if (!t)
        return SQ_ENOMEM;
    int rc = srv_buf_str(b, t);
    free(t);
    return rc;
}

void srv_buf_free(srv_buf_t *b)
{
    free(b->p);
    b->p = NULL;
    b->len = b->cap = 0;
}
