/* Watch framing and event fields: NDJSON (ndjson-spec 1.0) and server-sent events (WHATWG HTML,
 * "Server-sent events", section "Interpreting an event stream" and its examples), fed whole,
 * byte by byte, at every two-way split and in random slices: the events must not depend on
 * where the slices fall. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/rng.h"
#include "squall/watch.h"

#define MAX_EV 32

/* What a framer dispatched, as "data" or "data|id=ID|type=TYPE" strings. */
typedef struct {
    char ev[MAX_EV][256];
    int n;
    bool sse;
} seen_t;

static void on_event(void *user, const watch_event_t *ev)
{
    seen_t *s = user;
    assert_true(s->n < MAX_EV);
    if (s->sse)
        snprintf(s->ev[s->n++], sizeof s->ev[0], "%.*s|id=%.*s|type=%.*s", (int)ev->len, ev->data,
                 (int)ev->id_len, ev->id, (int)ev->type_len, ev->type);
    else
        snprintf(s->ev[s->n++], sizeof s->ev[0], "%.*s", (int)ev->len, ev->data);
}

/* Frames `in` cut at the given slice lengths (0-terminated list; the rest goes last). */
static void frame_slices(enum watch_framing fr, const char *in, size_t len, const size_t *cuts,
                         size_t max_event, seen_t *s, watch_framer_stats_t *st)
{
    memset(s, 0, sizeof(*s));
    s->sse = fr == WATCH_FRAME_SSE;
    watch_framer_t f;
    watch_framer_init(&f, fr, max_event, on_event, s);
    size_t off = 0;
    for (size_t i = 0; cuts && cuts[i] && off < len; i++) {
        size_t n = cuts[i] < len - off ? cuts[i] : len - off;
        assert_int_equal(watch_framer_feed(&f, in + off, n), 0);
        off += n;
    }
    assert_int_equal(watch_framer_feed(&f, in + off, len - off), 0);
    if (st)
        *st = f.st;
    watch_framer_end(&f);
    if (st)
        st->events = f.st.events;
    watch_framer_close(&f);
}

static void assert_seen(const seen_t *s, const char *const *want, int n)
{
    if (s->n != n)
        fail_msg("expected %d events, got %d (first: '%s')", n, s->n, s->n ? s->ev[0] : "");
    for (int i = 0; i < n; i++)
        assert_string_equal(s->ev[i], want[i]);
}

/* Every way of slicing the input gives the expected events: whole, one byte at a time, every
 * two-way split, and 200 random slicings (fixed seed). */
static void check_all_slicings(enum watch_framing fr, const char *in, const char *const *want, int n)
{
    size_t len = strlen(in);
    seen_t s;
    frame_slices(fr, in, len, NULL, 0, &s, NULL);
    assert_seen(&s, want, n);
    size_t ones[1024];
    for (size_t i = 0; i < len && i < 1023; i++)
        ones[i] = 1;
    ones[len < 1023 ? len : 1023] = 0;
    frame_slices(fr, in, len, ones, 0, &s, NULL);
    assert_seen(&s, want, n);
    for (size_t cut = 1; cut < len; cut++) {
        size_t c[2] = {cut, 0};
        frame_slices(fr, in, len, c, 0, &s, NULL);
        assert_seen(&s, want, n);
    }
    rng_t rng;
    rng_seed(&rng, 42);
    for (int k = 0; k < 200; k++) {
        size_t c[64];
        for (int i = 0; i < 63; i++)
            c[i] = 1 + rng_below(&rng, 7);
        c[63] = 0;
        frame_slices(fr, in, len, c, 0, &s, NULL);
        assert_seen(&s, want, n);
    }
}

/* ndjson-spec 1.0: each JSON text ends with LF, optionally preceded by CR; empty lines may be
 * ignored. A last line without its LF is still an event at the end of the body. */
static void test_ndjson(void **state)
{
    (void)state;
    const char *in = "{\"version\":1}\n{\"version\":2}\r\n\n\r\n{\"a\":\"x\\ny\"}\n{\"version\":3}";
    const char *want[] = {"{\"version\":1}", "{\"version\":2}", "{\"a\":\"x\\ny\"}",
                          "{\"version\":3}"};
    check_all_slicings(WATCH_FRAME_NDJSON, in, want, 4);
}

/* A line longer than max_event is skipped whole and counted; the lines around it survive. */
static void test_ndjson_oversize(void **state)
{
    (void)state;
    char in[400];
    snprintf(in, sizeof in, "{\"v\":1}\n{\"pad\":\"%0200d\"}\n{\"v\":2}\n", 0);
    const char *want[] = {"{\"v\":1}", "{\"v\":2}"};
    for (size_t cut = 1; cut < strlen(in); cut += 7) {
        seen_t s;
        watch_framer_stats_t st;
        size_t c[2] = {cut, 0};
        frame_slices(WATCH_FRAME_NDJSON, in, strlen(in), c, 64, &s, &st);
        assert_seen(&s, want, 2);
        assert_int_equal(st.oversize, 1);
    }
}

/* WHATWG HTML "Server-sent events", the examples of "Interpreting an event stream" (quoted from
 * memory of the spec text; each expectation re-derived from the parsing rules):
 * the stock-ticker example joins three data lines with LF. */
static void test_sse_spec_examples(void **state)
{
    (void)state;
    const char *ticker = "data: YHOO\ndata: +2\ndata: 10\n\n";
    const char *w1[] = {"YHOO\n+2\n10|id=|type=message"};
    check_all_slicings(WATCH_FRAME_SSE, ticker, w1, 1);

    /* A comment, ids (an empty id resets the last event ID), and only one leading space
     * stripped from a value. */
    const char *ids = ": test stream\n\ndata: first event\nid: 1\n\ndata:second event\nid\n\ndata: "
                      " third event\n\n";
    const char *w2[] = {"first event|id=1|type=message", "second event|id=|type=message",
                        " third event|id=|type=message"};
    check_all_slicings(WATCH_FRAME_SSE, ids, w2, 3);

    /* "data" alone gives an empty data line: the first event is "", the second "\n"; the last,
     * cut off at the end of the stream, is discarded. */
    const char *empty = "data\n\ndata\ndata\n\ndata:";
    const char *w3[] = {"|id=|type=message", "\n|id=|type=message"};
    check_all_slicings(WATCH_FRAME_SSE, empty, w3, 2);

    /* "data:test" and "data: test" are the same event. */
    const char *space = "data:test\n\ndata: test\n\n";
    const char *w4[] = {"test|id=|type=message", "test|id=|type=message"};
    check_all_slicings(WATCH_FRAME_SSE, space, w4, 2);
}

/* Lines end with CRLF, LF or CR, mixed; `event` sets the type for one event only; an unknown
 * field and a non-digit retry are ignored; a valid retry is kept. Derived from WHATWG HTML,
 * "Interpreting an event stream": the field name is everything before the first colon, so
 * `data : x` names the field "data " (with its space), which matches no known field and is
 * ignored; a `retry` value is used only if it consists of ASCII digits. */
static void test_sse_line_ends_and_fields(void **state)
{
    (void)state;
    const char *in = "event: put\r\ndata: {\"version\":7}\r\nid: 7\r\n\r\n"
                     "data : x\rretry: one thousand\r\r"
                     "data: a\ndata: b\r\n\n"
                     "retry: 2500\n: keep-alive\n\n";
    const char *want[] = {"{\"version\":7}|id=7|type=put", "a\nb|id=7|type=message"};
    check_all_slicings(WATCH_FRAME_SSE, in, want, 2);
    seen_t s;
    watch_framer_stats_t st;
    frame_slices(WATCH_FRAME_SSE, in, strlen(in), NULL, 0, &s, &st);
    assert_int_equal(st.retry_ms, 2500);
    frame_slices(WATCH_FRAME_SSE, "retry: one thousand\n\n", 21, NULL, 0, &s, &st);
    assert_int_equal(st.retry_ms, -1);
}

/* Raw framing: every slice is one event, its bytes as they came. */
static void test_raw(void **state)
{
    (void)state;
    seen_t s;
    size_t c[3] = {3, 2, 0};
    frame_slices(WATCH_FRAME_RAW, "abcdefg", 7, c, 0, &s, NULL);
    const char *want[] = {"abc", "de", "fg"};
    assert_seen(&s, want, 3);
}

/* Fields: the version at the top level (integer or string), the stamp inside "object" (the
 * embedded target's event shape), the error event, and text that is not JSON. */
static void test_fields(void **state)
{
    (void)state;
    watch_fields_t f;
    const char *ev = "{\"path\":\"/v1/sites/north/gateways/gw-1\",\"version\":42,"
                     "\"object\":{\"stamp\":1700000000123456789}}";
    assert_int_equal(watch_event_fields(ev, strlen(ev), "version", "stamp", &f), 0);
    assert_true(f.has_version && f.version_numeric);
    assert_true(f.version_num == 42);
    assert_string_equal(f.version, "42");
    assert_true(f.has_stamp);
    assert_true(f.stamp_ns == INT64_C(1700000000123456789));
    assert_false(f.is_error);

    const char *sv = "{\"resourceVersion\":\"00123\",\"stamp\":5}";
    assert_int_equal(watch_event_fields(sv, strlen(sv), "resourceVersion", "stamp", &f), 0);
    assert_string_equal(f.version, "00123");
    assert_true(f.version_numeric && f.version_num == 123);
    assert_true(f.has_stamp && f.stamp_ns == 5);

    const char *err = "{\"type\":\"error\",\"code\":\"slow-watcher\"}";
    assert_int_equal(watch_event_fields(err, strlen(err), "version", NULL, &f), 0);
    assert_true(f.is_error);
    assert_false(f.has_version);

    assert_int_equal(watch_event_fields("not json", 8, "version", "stamp", &f), SQ_EPARSE);
    assert_false(f.has_version || f.has_stamp);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_ndjson),
        cmocka_unit_test(test_ndjson_oversize),
        cmocka_unit_test(test_sse_spec_examples),
        cmocka_unit_test(test_sse_line_ends_and_fields),
        cmocka_unit_test(test_raw),
        cmocka_unit_test(test_fields),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
