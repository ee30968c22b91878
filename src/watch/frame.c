/* Framing of a streamed body into events: NDJSON lines, server-sent events or raw slices, fed
 * in arbitrary slices and framed by content only. */
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/watch.h"

#define DEFAULT_MAX_EVENT (1u << 20)

void watch_framer_init(watch_framer_t *f, enum watch_framing framing, size_t max_event,
                       watch_event_cb on_event, void *user)
{
    memset(f, 0, sizeof(*f));
    f->framing = framing;
    f->max_event = max_event ? max_event : DEFAULT_MAX_EVENT;
    f->on_event = on_event;
    f->user = user;
    f->st.retry_ms = -1;
}

void watch_framer_close(watch_framer_t *f)
{
    free(f->line);
    free(f->data);
    f->line = f->data = NULL;
    f->line_cap = f->data_cap = 0;
}

/* Appends to a growable buffer; the framer's bound is checked by the callers. */
static int buf_add(char **buf, size_t *len, size_t *cap, const char *p, size_t n)
{
    if (n == 0)
        return 0;
    if (*len + n > *cap) {
        size_t c = *cap ? *cap : 256;
        while (c < *len + n)
            c *= 2;
        char *nb = realloc(*buf, c);
        if (!nb)
            return SQ_ENOMEM;
        *buf = nb;
        *cap = c;
    }
    memcpy(*buf + *len, p, n);
    *len += n;
    return 0;
}

static void dispatch(watch_framer_t *f, const char *data, size_t len)
{
    watch_event_t ev = {.data = data, .len = len};
    if (f->framing == WATCH_FRAME_SSE) {
        ev.id = f->id;
        ev.id_len = f->id_len;
        ev.type = f->type_len ? f->type : "message";
        ev.type_len = f->type_len ? f->type_len : 7;
    }
    f->st.events++;
    f->on_event(f->user, &ev);
}

/* ---- NDJSON (ndjson-spec 1.0) ---- */

static void ndjson_line(watch_framer_t *f, const char *p, size_t n)
{
    if (n > 0 && p[n - 1] == '\r')
        n--;
    if (n > 0)
        dispatch(f, p, n); /* empty lines may be ignored (ndjson-spec 1.0, "Parsing") */
}

static int ndjson_feed(watch_framer_t *f, const char *p, size_t len)
{
    while (len > 0) {
        const char *nl = memchr(p, '\n', len);
        size_t n = nl ? (size_t)(nl - p) : len;
        if (f->skipping || f->line_len + n > f->max_event) {
            if (!f->skipping)
                f->st.oversize++;
            f->skipping = true;
            f->line_len = 0;
        } else if (nl && f->line_len == 0) {
            ndjson_line(f, p, n); /* a whole line inside this slice: no copy */
        } else if (buf_add(&f->line, &f->line_len, &f->line_cap, p, n)) {
            f->line_len = 0;
            f->skipping = !nl;
            return SQ_ENOMEM;
        } else if (nl) {
            ndjson_line(f, f->line, f->line_len);
            f->line_len = 0;
        }
        if (!nl)
            break;
        f->skipping = false;
        p = nl + 1;
        len -= n + 1;
    }
    return 0;
}

/* ---- server-sent events (WHATWG HTML, "Interpreting an event stream") ---- */

static void sse_dispatch(watch_framer_t *f)
{
    bool had = f->has_data;
    bool over = f->skipping;
    f->has_data = false;
    f->skipping = false;
    if (!had) {
        /* "If the data buffer is an empty string, set the data buffer and the event type
         * buffer to the empty string and return." */
        f->data_len = 0;
        f->type_len = 0;
        return;
    }
    size_t n = f->data_len;
    if (n > 0 && f->data[n - 1] == '\n')
        n--; /* "If the data buffer's last character is a U+000A LINE FEED, remove it." */
    if (over)
        f->st.oversize++;
    else
        dispatch(f, n ? f->data : "", n);
    f->data_len = 0;
    f->type_len = 0;
}

static bool all_digits(const char *p, size_t n)
{
    if (n == 0)
        return false;
    for (size_t i = 0; i < n; i++)
        if (p[i] < '0' || p[i] > '9')
            return false;
    return true;
}

static void sse_field(watch_framer_t *f, const char *name, size_t nn, const char *v, size_t vn)
{
    if (nn == 5 && memcmp(name, "event", 5) == 0) {
        f->type_len = vn < sizeof(f->type) ? vn : sizeof(f->type) - 1;
        memcpy(f->type, v, f->type_len);
    } else if (nn == 4 && memcmp(name, "data", 4) == 0) {
        f->has_data = true;
        if (f->skipping || f->data_len + vn + 1 > f->max_event) {
            f->skipping = true; /* the event is too large: dispatched as "oversize" */
            return;
        }
        if (buf_add(&f->data, &f->data_len, &f->data_cap, v, vn) ||
            buf_add(&f->data, &f->data_len, &f->data_cap, "\n", 1))
            f->skipping = true;
    } else if (nn == 2 && memcmp(name, "id", 2) == 0) {
        if (!memchr(v, '\0', vn) && vn < sizeof(f->id)) { /* ids with NUL are ignored */
            memcpy(f->id, v, vn);
            f->id_len = vn;
            f->id[vn] = '\0';
        }
    } else if (nn == 5 && memcmp(name, "retry", 5) == 0) {
        if (all_digits(v, vn) && vn < 15) /* "If the field value consists of only digits" */
            f->st.retry_ms = strtoll(v, NULL, 10);
    } /* Any other field name is ignored. */
}

static void sse_line(watch_framer_t *f, const char *p, size_t n)
{
    if (n == 0) {
        sse_dispatch(f);
        return;
    }
    if (p[0] == ':')
        return; /* a comment */
    const char *colon = memchr(p, ':', n);
    if (!colon) {
        sse_field(f, p, n, "", 0);
        return;
    }
    size_t nn = (size_t)(colon - p);
    const char *v = colon + 1;
    size_t vn = n - nn - 1;
    if (vn > 0 && v[0] == ' ') {
        v++;
        vn--;
    }
    sse_field(f, p, nn, v, vn);
}

static int sse_feed(watch_framer_t *f, const char *p, size_t len)
{
    for (size_t i = 0; i < len; i++) {
        char c = p[i];
        if (f->after_cr) {
            f->after_cr = false;
            if (c == '\n')
                continue; /* CRLF is one line end */
        }
        if (c == '\r' || c == '\n') {
            f->after_cr = c == '\r';
            sse_line(f, f->line, f->line_len);
            f->line_len = 0;
            continue;
        }
        if (f->line_len >= f->max_event) {
            f->skipping = true; /* an over-long line poisons the event it belongs to */
            continue;
        }
        if (buf_add(&f->line, &f->line_len, &f->line_cap, &c, 1))
            return SQ_ENOMEM;
    }
    return 0;
}

int watch_framer_feed(watch_framer_t *f, const char *data, size_t len)
{
    f->st.bytes += (int64_t)len;
    switch (f->framing) {
    case WATCH_FRAME_NDJSON:
        return ndjson_feed(f, data, len);
    case WATCH_FRAME_SSE:
        return sse_feed(f, data, len);
    case WATCH_FRAME_RAW:
        if (len > 0)
            dispatch(f, data, len);
        return 0;
    }
    return SQ_EINVAL;
}

void watch_framer_end(watch_framer_t *f)
{
    if (f->framing == WATCH_FRAME_NDJSON && !f->skipping && f->line_len > 0)
        ndjson_line(f, f->line, f->line_len);
    /* SSE: "If the file ends in the middle of an event, before the final empty line, the
     * incomplete event is not dispatched." The last event ID buffer survives a reconnect. */
    f->line_len = 0;
    f->data_len = 0;
    f->type_len = 0;
    f->has_data = false;
    f->skipping = false;
    f->after_cr = false;
}
