/* libFuzzer target for the watch framers (src/watch/frame.c): byte 0 picks the framing (NDJSON,
 * SSE, raw) and byte 1 the largest event (16 to 4,096 bytes); the rest is a stream body, fed in
 * slices whose sizes come from the body itself. No event may pass max_event (watch.h). */
#include "fuzz_util.h"
#include "squall/watch.h"

static size_t max_event;
static enum watch_framing framing;

/* Raw framing passes slices through as they come (nothing is buffered): no bound to check. */
static void on_event(void *user, const watch_event_t *ev)
{
    (void)user;
    if ((framing != WATCH_FRAME_RAW && ev->len > max_event) || (ev->len && !ev->data))
        abort();
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 2)
        return 0;
    watch_framer_t f;
    max_event = 16 + (size_t)data[1] * 16;
    framing = (enum watch_framing)(data[0] % 3);
    watch_framer_init(&f, framing, max_event, on_event, NULL);
    const char *body = (const char *)data + 2;
    size_t left = size - 2;
    for (size_t at = 0; at < left;) {
        size_t n = 1 + (unsigned char)body[at] % 97;
        n = n < left - at ? n : left - at;
        if (watch_framer_feed(&f, body + at, n))
            abort();
        at += n;
    }
    watch_framer_end(&f);
    if (f.st.bytes != (int64_t)left)
        abort();
    watch_framer_close(&f);
    return 0;
}
