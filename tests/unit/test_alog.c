/* Unit tests for the log readers (src/alog/): the documented example lines of the Apache httpd
 * documentation ("Log Files"), times against glibc's timegm(3), NDJSON variants, gzip written
 * by zlib itself, and the malformed corpus in tests/data/logs/ (see its README.md). */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>
#include <zlib.h>

#include <cmocka.h>

#include "squall/alog.h"
#include "squall/err.h"
#include "squall/rng.h"

#define S INT64_C(1000000000)

static char tmpdir[] = "/tmp/squall-alog-XXXXXX";

static const char *data(const char *name)
{
    static char p[512];
    snprintf(p, sizeof p, "%s/tests/data/logs/%s", SRCDIR, name);
    return p;
}

/* Writes n bytes to a fresh file in tmpdir and returns its path. */
static const char *write_tmp(const char *name, const void *s, size_t n)
{
    static char p[600];
    snprintf(p, sizeof p, "%s/%s", tmpdir, name);
    FILE *f = fopen(p, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(s, 1, n, f), n);
    fclose(f);
    return p;
}

static alog_t *open_ok(const char *path, const alog_config_t *cfg)
{
    alog_config_t def;
    alog_config_init(&def);
    char err[600] = "";
    alog_t *r = NULL;
    int rc = alog_open(path, cfg ? cfg : &def, &r, err, sizeof err);
    if (rc)
        fprintf(stderr, "alog_open: %s\n", err);
    assert_int_equal(rc, 0);
    return r;
}

/* Apache "Log Files", Common Log Format: the documented example line and its field meanings;
 * 10/Oct/2000:13:55:36 -0700 is 2000-10-10T20:55:36Z = 971211336 s (by glibc's timegm below). */
static void expect_apache_example(const alog_record_t *rec)
{
    struct tm tm = {
        .tm_year = 100, .tm_mon = 9, .tm_mday = 10, .tm_hour = 20, .tm_min = 55, .tm_sec = 36};
    assert_int_equal(rec->t_ns, (int64_t)timegm(&tm) * S);
    assert_int_equal(rec->resolution_ns, S);
    assert_string_equal(rec->method, "GET");
    assert_string_equal(rec->path, "/apache_pb.gif");
    assert_string_equal(rec->client, "frank"); /* %u when given, else %h */
    assert_int_equal(rec->status, 200);
    assert_int_equal(rec->bytes, 2326);
    assert_int_equal(rec->duration_ns, -1);
    assert_null(rec->body);
    assert_int_equal(rec->line, 1);
}

static void test_apache_examples(void **state)
{
    (void)state;
    static const struct {
        const char *file;
        enum alog_format f;
    } cases[] = {{"apache-common.log", ALOG_COMMON}, {"apache-combined.log", ALOG_COMBINED}};
    for (size_t i = 0; i < 2; i++) {
        for (int given = 0; given < 2; given++) {
            alog_config_t c;
            alog_config_init(&c);
            c.format = given ? cases[i].f : ALOG_AUTO;
            alog_t *r = open_ok(data(cases[i].file), &c);
            assert_int_equal(alog_stats(r)->format, cases[i].f); /* detected or given */
            alog_record_t rec;
            assert_int_equal(alog_next(r, &rec), 1);
            expect_apache_example(&rec);
            assert_int_equal(alog_next(r, &rec), 0);
            assert_int_equal(alog_stats(r)->records, 1);
            assert_int_equal(alog_stats(r)->malformed, 0);
            alog_close(r);
        }
    }
    /* A Combined line is not a Common one: the extra fields are text after %b. */
    alog_config_t c;
    alog_config_init(&c);
    c.format = ALOG_COMMON;
    char err[600];
    alog_t *r = (alog_t *)1;
    assert_int_equal(alog_open(data("apache-combined.log"), &c, &r, err, sizeof err), SQ_EPARSE);
    assert_null(r);
    assert_non_null(strstr(err, "expected Common Log Format: %h %l %u %t \"%r\" %>s %b"));
    assert_non_null(strstr(err, "line 1: '127.0.0.1 - frank"));
}

/* CLF times over random dates and zones against glibc's timegm(3), formatted with strftime. */
static void test_clf_times_against_timegm(void **state)
{
    (void)state;
    rng_t g;
    rng_seed(&g, 5);
    char *text = malloc(2000 * 120);
    int64_t want[2000];
    size_t o = 0;
    for (int i = 0; i < 2000; i++) {
        time_t t = (time_t)(rng_below(&g, 4102444800u));           /* 1970 .. 2100 */
        int off = ((int)rng_below(&g, 27 * 4) - 12 * 4) * 15 * 60; /* -12:00 .. +14:45 */
        time_t local = t + off;
        struct tm tm;
        gmtime_r(&local, &tm);
        if (local < 0) {
            i--;
            continue;
        }
        char stamp[64];
        strftime(stamp, sizeof stamp, "%d/%b/%Y:%H:%M:%S", &tm);
        int a = off < 0 ? -off : off;
        o += (size_t)sprintf(text + o, "h - - [%s %c%02d%02d] \"GET /x HTTP/1.1\" 204 -\n", stamp,
                             off < 0 ? '-' : '+', a / 3600, a / 60 % 60);
        want[i] = (int64_t)t * S;
    }
    alog_t *r = open_ok(write_tmp("times.log", text, o), NULL);
    alog_record_t rec;
    for (int i = 0; i < 2000; i++) {
        assert_int_equal(alog_next(r, &rec), 1);
        assert_int_equal(rec.t_ns, want[i]);
        assert_int_equal(rec.bytes, -1); /* %b '-': no body */
        assert_int_equal(rec.status, 204);
    }
    assert_int_equal(alog_next(r, &rec), 0);
    alog_close(r);
    free(text);
}

/* Zones across day and year boundaries, escapes, absolute URIs, non-ASCII bytes. */
static void test_clf_details(void **state)
{
    (void)state;
    static const char text[] =
        "a - - [31/Dec/1999:23:59:59 -0100] \"GET /y2k HTTP/1.1\" 200 1\n"
        "a - - [01/Jan/2000:00:30:00 +0530] \"PUT /v1/a\\\"b\\\\c\\x41 HTTP/1.1\" 201 0\n"
        "a - - [29/Feb/2000:12:00:00 +0000] \"GET http://staging.example:8080/x?y=1#f HTTP/1.1\" "
        "200 7\n"
        "a - - [29/Feb/2000:12:00:00 +0000] \"GET /caf\\xc3\\xa9?q=\\xff HTTP/1.1\" 200 7\n"
        "a - bob [29/Feb/2000:12:00:00 +0000] \"GET / HTTP/1.1\" 304 -\n";
    alog_t *r = open_ok(write_tmp("details.log", text, sizeof text - 1), NULL);
    alog_record_t rec;
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, INT64_C(946688399) * S); /* 2000-01-01T00:59:59Z */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, INT64_C(946666800) * S); /* 1999-12-31T19:00:00Z */
    assert_string_equal(rec.method, "PUT");
    assert_string_equal(rec.path, "/v1/a\"b\\cA");
    assert_string_equal(rec.client, "a");
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, INT64_C(951825600) * S);
    assert_string_equal(rec.path, "/x?y=1"); /* path and query only; no fragment */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_string_equal(rec.path, "/caf%C3%A9?q=%FF"); /* RFC 3986 §2.1 */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_string_equal(rec.client, "bob");
    assert_int_equal(rec.line, 5);
    assert_int_equal(alog_next(r, &rec), 0);
    alog_close(r);
}

/* The malformed corpus: counts, line numbers, the 10 kept samples, CRLF and blank lines. */
static void test_malformed_corpus(void **state)
{
    (void)state;
    alog_t *r = open_ok(data("malformed.log"), NULL);
    assert_int_equal(alog_stats(r)->format, ALOG_COMMON);
    alog_record_t rec;
    static const uint64_t good[] = {1,  2,  5,  9,  13, 16, 19, 21, 23, 24, 25, 26, 27, 28,
                                    29, 30, 31, 32, 33, 34, 35, 36, 37, 38, 39, 40, 41, 42};
    for (size_t i = 0; i < sizeof good / sizeof good[0]; i++) {
        assert_int_equal(alog_next(r, &rec), 1);
        assert_int_equal(rec.line, good[i]);
        if (rec.line == 16)
            assert_int_equal(rec.bytes, 116); /* the CR is not part of %b */
    }
    assert_int_equal(alog_next(r, &rec), 0);
    const alog_stats_t *st = alog_stats(r);
    assert_int_equal(st->lines, 42);
    assert_int_equal(st->records, 28);
    assert_int_equal(st->blank, 1);
    assert_int_equal(st->malformed, 13);
    assert_int_equal(st->n_samples, ALOG_MAX_SAMPLES);
    static const char *const first[] = {
        "line 3: ",         "line 4: bad time",       "line 6: bad time",
        "line 7: ",         "line 10: line too long", "line 11: bad time",
        "line 12: no size", "line 14: no request",    "line 15: bad time",
        "line 17: bad path"};
    for (size_t i = 0; i < ALOG_MAX_SAMPLES; i++)
        assert_memory_equal(st->samples[i], first[i], strlen(first[i]));
    /* Rewind reads the same again with fresh counts. */
    assert_int_equal(alog_rewind(r), 0);
    size_t n = 0;
    while (alog_next(r, &rec) == 1)
        n++;
    assert_int_equal(n, 28);
    assert_int_equal(alog_stats(r)->malformed, 13);
    alog_close(r);
}

static void test_refused(void **state)
{
    (void)state;
    alog_config_t c;
    alog_config_init(&c);
    char err[600];
    alog_t *r;
    assert_int_equal(alog_open(data("garbage.log"), &c, &r, err, sizeof err), SQ_EPARSE);
    assert_non_null(strstr(err, "not a log squall reads"));
    assert_non_null(strstr(err, "(best: 34 lines as Common Log Format"));
    c.format = ALOG_NDJSON;
    assert_int_equal(alog_open(data("garbage.log"), &c, &r, err, sizeof err), SQ_EPARSE);
    assert_non_null(strstr(err, "134 of the first 134 lines are malformed (expected NDJSON"));
    assert_int_equal(alog_open("/nonexistent/x.log", &c, &r, err, sizeof err), SQ_EIO);
    assert_non_null(strstr(err, "/nonexistent/x.log: No such file"));
    /* An empty log is not refused: it has no records. */
    r = open_ok(write_tmp("empty.log", "", 0), NULL);
    alog_record_t rec;
    assert_int_equal(alog_next(r, &rec), 0);
    alog_close(r);
}

static const char ndjson_text[] =
    "{\"time\":\"2000-10-10T20:55:36.125Z\",\"method\":\"GET\",\"path\":\"/v1/a?x=1\","
    "\"status\":200,\"duration\":0.0125,\"client\":\"gw-1\",\"bytes\":12}\n"
    "{\"time\":\"2000-10-10T13:55:36.5-07:00\",\"method\":\"PUT\",\"path\":\"http://h/v1/b\","
    "\"status\":\"201\",\"duration\":\"0.5\",\"client\":17,"
    "\"body\":\"{\\\"a\\\":\\\"\\u00e9\\ud83d\\ude00\\\"}\"}\n"
    "{\"time\":971211336.125,\"method\":\"DELETE\",\"path\":\"/v1/c\",\"status\":204}\n"
    "{\"method\":\"GET\",\"time\":971211336125,\"path\":\"/d\",\"extra\":[1,{\"path\":\"/no\"}]}\n"
    "  {\"time\":\"971211336125000\",\"method\":\"GET\",\"path\":\"/e\",\"client\":\"a b\"}  \n"
    "{\"time\":971211336125000001,\"method\":\"GET\",\"path\":\"/f\",\"body\":{\"k\":[1,2,null]}}\n"
    "{\"time\":971211336,\"method\":\"GET\",\"path\":\"/g\",\"status\":null,\"duration\":\"-\"}\n";

static void test_ndjson_variants(void **state)
{
    (void)state;
    alog_t *r = open_ok(write_tmp("v.ndjson", ndjson_text, sizeof ndjson_text - 1), NULL);
    assert_int_equal(alog_stats(r)->format, ALOG_NDJSON);
    alog_record_t rec;
    const int64_t t0 = INT64_C(971211336) * S; /* 2000-10-10T20:55:36Z, as in the CLF example */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 125000000);
    assert_int_equal(rec.resolution_ns, 1000000);
    assert_string_equal(rec.path, "/v1/a?x=1");
    assert_int_equal(rec.duration_ns, 12500000);
    assert_string_equal(rec.client, "gw-1");
    assert_int_equal(rec.bytes, 12);
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 500000000); /* -07:00 offset */
    assert_int_equal(rec.resolution_ns, 100000000);
    assert_string_equal(rec.path, "/v1/b");
    assert_int_equal(rec.status, 201);
    assert_int_equal(rec.duration_ns, 500000000);
    assert_string_equal(rec.client, "17");
    /* RFC 8259 §7: \u00e9 is U+00E9, the pair \ud83d\ude00 is U+1F600. */
    assert_int_equal(rec.body_len, 14);
    assert_memory_equal(rec.body, "{\"a\":\"\xc3\xa9\xf0\x9f\x98\x80\"}", 14);
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 125000000); /* unix seconds with a fraction */
    assert_int_equal(rec.resolution_ns, 1000000);
    assert_int_equal(rec.duration_ns, -1);
    assert_string_equal(rec.client, "");
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 125000000); /* 12 digits: milliseconds */
    assert_int_equal(rec.resolution_ns, 1000000);
    assert_string_equal(rec.path, "/d"); /* a "path" inside an array is not the field */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 125000000); /* 15 digits in a string: microseconds */
    assert_int_equal(rec.resolution_ns, 1000);
    assert_string_equal(rec.client, "a%20b");
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, t0 + 125000001); /* 18 digits: nanoseconds */
    assert_int_equal(rec.resolution_ns, 1);
    assert_string_equal(rec.body, "{\"k\":[1,2,null]}"); /* not a string: its JSON text */
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.status, 0);       /* null: absent */
    assert_int_equal(rec.duration_ns, -1); /* "-": absent */
    assert_int_equal(rec.line, 7);
    assert_int_equal(alog_next(r, &rec), 0);
    assert_int_equal(alog_stats(r)->malformed, 0);
    alog_close(r);
}

/* nginx's own fields: $msec (seconds, ms resolution, written when the request ends) and
 * $request_time (seconds): with time-at end the start is msec - request_time. Nested names. */
static void test_ndjson_fields(void **state)
{
    (void)state;
    static const char text[] =
        "{\"msec\":1700000000.250,\"req\":{\"verb\":\"GET\",\"uri\":\"/w?watch=1\"},"
        "\"rt\":0.125,\"addr\":\"127.0.0.1\"}\n";
    alog_config_t c;
    alog_config_init(&c);
    char err[300];
    static const char *const opts[][2] = {
        {"format", "ndjson"},      {"field", "time=msec"},   {"field", "method=req.verb"},
        {"field", "path=req.uri"}, {"field", "duration=rt"}, {"field", "client=addr"},
        {"time-unit", "s"},        {"duration-unit", "s"},   {"time-at", "end"}};
    for (size_t i = 0; i < sizeof opts / sizeof opts[0]; i++)
        assert_int_equal(alog_config_set(&c, opts[i][0], opts[i][1], err, sizeof err), 0);
    alog_t *r = open_ok(write_tmp("nginx.ndjson", text, sizeof text - 1), &c);
    alog_record_t rec;
    assert_int_equal(alog_next(r, &rec), 1);
    assert_int_equal(rec.t_ns, INT64_C(1700000000125000000));
    assert_int_equal(rec.duration_ns, 125000000);
    assert_string_equal(rec.method, "GET");
    assert_string_equal(rec.path, "/w?watch=1");
    assert_string_equal(rec.client, "127.0.0.1");
    alog_close(r);
    assert_int_equal(alog_config_set(&c, "time-unit", "fortnights", err, sizeof err), SQ_EINVAL);
    assert_string_equal(err, "time-unit: unknown value (expected one of auto, rfc3339, s, ms, us, "
                             "ns, got 'fortnights')");
    assert_int_equal(alog_config_set(&c, "field", "path=", err, sizeof err), SQ_EINVAL);
    assert_int_equal(alog_config_set(&c, "field", "colour=x", err, sizeof err), SQ_EINVAL);
}

static void test_ndjson_malformed(void **state)
{
    (void)state;
    static const char *const bad[] = {
        "{\"time\":\"2000-10-10T20:55:36Z\",\"method\":\"GET\",\"path\":\"/a\"",  /* truncated */
        "{\"time\":\"2000-13-10T20:55:36Z\",\"method\":\"GET\",\"path\":\"/a\"}", /* month 13 */
        "{\"time\":\"2000-10-10T20:55:36\",\"method\":\"GET\",\"path\":\"/a\"}",  /* no zone */
        "{\"time\":1,\"method\":\"GET\"}",                                        /* no path */
        "{\"time\":1,\"method\":\"GET\",\"path\":7}",                             /* not a string */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\"} x",                      /* trailing */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\\q\"}",                     /* escape */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\tb\"}",                     /* raw tab */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\\r\\nX: y\"}",              /* CR LF */
        "{\"time\":1,\"method\":\"GE T\",\"path\":\"/a\"}",                       /* method */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\",\"status\":42}",          /* status */
        "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\",\"duration\":-1}",        /* negative */
        "{\"time\":01,\"method\":\"GET\",\"path\":\"/a\"}",                       /* leading 0 */
        NULL, /* nested 40 deep: past the scanner's 32 levels */
    };
    size_t n = sizeof bad / sizeof bad[0];
    char deep[200] = "{\"time\":1,\"method\":\"GET\",\"path\":\"/a\",\"x\":";
    for (int i = 0; i < 40; i++)
        strcat(deep, "[");
    for (int i = 0; i < 40; i++)
        strcat(deep, "]");
    strcat(deep, "}");
    char text[8192];
    size_t o = 0;
    for (size_t i = 0; i < 2 * n; i++) /* each bad line after a good one */
        o += (size_t)snprintf(text + o, sizeof text - o, "%s\n",
                              i % 2 ? (bad[i / 2] ? bad[i / 2] : deep)
                                    : "{\"time\":1,\"method\":\"GET\",\"path\":\"/ok\"}");
    alog_config_t c;
    alog_config_init(&c);
    c.format = ALOG_NDJSON;
    alog_t *r = open_ok(write_tmp("bad.ndjson", text, o), &c);
    alog_record_t rec;
    size_t good = 0;
    while (alog_next(r, &rec) == 1) {
        assert_int_equal(rec.line % 2, 1);
        assert_string_equal(rec.path, "/ok");
        good++;
    }
    assert_int_equal(good, n);
    assert_int_equal(alog_stats(r)->malformed, n);
    assert_memory_equal(alog_stats(r)->samples[1], "line 4: bad time", 16);
    assert_memory_equal(alog_stats(r)->samples[3], "line 8: missing field", 21);
    alog_close(r);
}

/* Gzip written by zlib itself; detected by its magic bytes, not by the file name. */
static const char *write_gz(const char *name, const char *text, size_t n, int members)
{
    static char p[600];
    snprintf(p, sizeof p, "%s/%s", tmpdir, name);
    unlink(p);
    for (int m = 0; m < members; m++) {
        gzFile gz = gzopen(p, "ab");
        assert_non_null(gz);
        assert_int_equal(gzwrite(gz, text, (unsigned)n), (int)n);
        assert_int_equal(gzclose(gz), Z_OK);
    }
    return p;
}

static void test_gzip(void **state)
{
    (void)state;
    static const char line[] =
        "127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] \"GET /apache_pb.gif HTTP/1.0\" 200 2326\n";
    alog_t *r = open_ok(write_gz("plain-name.log", line, sizeof line - 1, 3), NULL);
    assert_true(alog_stats(r)->gzip);
    alog_record_t rec;
    for (int i = 0; i < 3; i++) { /* three concatenated gzip members (RFC 1952 §2.2) */
        assert_int_equal(alog_next(r, &rec), 1);
        assert_int_equal(rec.line, (uint64_t)i + 1);
        assert_int_equal(rec.bytes, 2326);
    }
    assert_int_equal(alog_next(r, &rec), 0);
    alog_close(r);
    r = open_ok(write_tmp("looks-compressed.gz", line, sizeof line - 1), NULL);
    assert_false(alog_stats(r)->gzip);
    alog_close(r);

    /* A truncated gzip file: records up to the damage, then SQ_EIO naming gzip. */
    /* Random paths, so the compressed file is large and the damage lies past the probe. */
    rng_t g;
    rng_seed(&g, 3);
    char *big = malloc(20000 * 128);
    size_t n = 0;
    for (size_t i = 0; i < 20000; i++)
        n += (size_t)sprintf(
            big + n, "h - - [10/Oct/2000:13:55:36 -0700] \"GET /%016llx HTTP/1.0\" 200 %u\n",
            (unsigned long long)rng_next(&g), (unsigned)rng_below(&g, 100000));
    const char *p = write_gz("cut.log.gz", big, n, 1);
    FILE *f = fopen(p, "rb");
    fseek(f, 0, SEEK_END);
    long size = ftell(f);
    fclose(f);
    assert_int_equal(truncate(p, size / 2), 0);
    r = open_ok(p, NULL);
    size_t got = 0;
    int rc;
    while ((rc = alog_next(r, &rec)) == 1)
        got++;
    assert_int_equal(rc, SQ_EIO);
    assert_true(got > 1000 && got < 20000);
    assert_non_null(strstr(alog_error(r), "gzip: "));
    assert_int_equal(alog_next(r, &rec), 0); /* stays at the end */
    alog_close(r);
    free(big);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_apache_examples),
        cmocka_unit_test(test_clf_times_against_timegm),
        cmocka_unit_test(test_clf_details),
        cmocka_unit_test(test_malformed_corpus),
        cmocka_unit_test(test_refused),
        cmocka_unit_test(test_ndjson_variants),
        cmocka_unit_test(test_ndjson_fields),
        cmocka_unit_test(test_ndjson_malformed),
        cmocka_unit_test(test_gzip),
    };
    if (!mkdtemp(tmpdir))
        return 1;
    int rc = cmocka_run_group_tests(tests, NULL, NULL);
    char cmd[600];
    snprintf(cmd, sizeof cmd, "rm -rf %s", tmpdir);
    if (system(cmd) != 0)
        rc = rc ? rc : 1;
    return rc;
}
