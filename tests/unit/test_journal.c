/* Unit tests for the journal: what is alive after creates, failures and deletes; every line a
 * JSON text (checked by jansson, per the NDJSON spec 1.0); a torn last line reported and
 * skipped; reopening after a torn line starts a fresh line; a file without a header refused. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "squall/err.h"
#include "squall/journal.h"
#include "squall/out.h"

static char *tmp_path(void)
{
    static char path[64];
    snprintf(path, sizeof path, "/tmp/squall-test-journal-%d.ndjson", (int)getpid());
    unlink(path);
    return path;
}

static void append_raw(const char *path, const char *text)
{
    FILE *f = fopen(path, "a");
    assert_non_null(f);
    fputs(text, f);
    fclose(f);
}

/* gw-1 created, gw-2 created then deleted, gw-3 only put (no answer), gw-4 put then failed. */
static void write_sample(const char *path, out_t *o)
{
    journal_t *j;
    assert_int_equal(journal_open(path, "http://127.0.0.1:7070", o, &j), 0);
    const char *g[] = {"/v1/gateways/gw-1", "/v1/gateways/gw-2", "/v1/gateways/gw-3",
                       "/v1/gateways/gw-4"};
    for (int i = 0; i < 4; i++)
        assert_int_equal(journal_add(j, JOURNAL_PUT, g[i], "register", 0), 0);
    assert_int_equal(journal_add(j, JOURNAL_CREATED, g[0], "register", 17), 0);
    assert_int_equal(journal_add(j, JOURNAL_CREATED, g[1], "register", 18), 0);
    assert_int_equal(journal_add(j, JOURNAL_FAILED, g[3], "register", 0), 0);
    assert_int_equal(journal_add(j, JOURNAL_DELETED, g[1], "retire", 0), 0);
    assert_int_equal(journal_close(j), 0);
}

static void test_alive(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    char *path = tmp_path();
    write_sample(path, o);
    journal_alive_t a;
    assert_int_equal(journal_read(path, &a, o), 0);
    assert_string_equal(a.target, "http://127.0.0.1:7070");
    assert_int_equal(a.n, 2);
    assert_string_equal(a.paths[0], "/v1/gateways/gw-1");
    assert_true(a.confirmed[0]);
    assert_string_equal(a.paths[1], "/v1/gateways/gw-3");
    assert_false(a.confirmed[1]);
    assert_string_equal(a.classes[0], "register");
    assert_int_equal(a.records, 9);
    assert_int_equal(a.torn, 0);
    assert_int_equal(a.created, 2);
    assert_int_equal(a.deleted, 1);
    journal_alive_close(&a);
    assert_int_equal(out_errors(o), 0);
    unlink(path);
    out_free(o);
}

/* NDJSON 1.0: each line one JSON text; jansson parses each, and the created line of gw-1 carries
 * its version. */
static void test_lines_are_json(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    char *path = tmp_path();
    write_sample(path, o);
    FILE *f = fopen(path, "r");
    char line[1024];
    int n = 0, versions = 0;
    while (fgets(line, sizeof line, f)) {
        size_t len = strlen(line);
        assert_true(len > 1 && line[len - 1] == '\n');
        json_error_t err;
        json_t *v = json_loads(line, 0, &err);
        assert_non_null(v);
        assert_true(json_is_object(v));
        json_t *ver = json_object_get(v, "version");
        if (ver) {
            assert_int_equal(json_integer_value(ver), versions ? 18 : 17);
            versions++;
        }
        json_decref(v);
        n++;
    }
    fclose(f);
    assert_int_equal(n, 9);
    assert_int_equal(versions, 2);
    unlink(path);
    out_free(o);
}

/* A crash mid-write leaves half a record without its newline: reported, skipped, not fatal. */
static void test_torn_last_line(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    char *path = tmp_path();
    write_sample(path, o);
    append_raw(path, "{\"op\":\"deleted\",\"path\":\"/v1/gatew");
    journal_alive_t a;
    assert_int_equal(journal_read(path, &a, o), 0);
    assert_int_equal(a.n, 2);
    assert_int_equal(a.torn, 1);
    assert_non_null(strstr(out_captured_diag(o), ":10: torn last line skipped"));
    journal_alive_close(&a);

    /* Appending again first ends the torn line, so the new record stands on its own line; the
     * torn text is then a malformed line in the middle, still skipped. */
    journal_t *j;
    assert_int_equal(journal_open(path, "ignored: not a new file", o, &j), 0);
    assert_int_equal(journal_add(j, JOURNAL_DELETED, "/v1/gateways/gw-3", "cleanup", 0), 0);
    assert_int_equal(journal_close(j), 0);
    assert_int_equal(journal_read(path, &a, o), 0);
    assert_int_equal(a.n, 1);
    assert_string_equal(a.paths[0], "/v1/gateways/gw-1");
    assert_string_equal(a.target, "http://127.0.0.1:7070");
    assert_non_null(strstr(out_captured_diag(o), ":10: malformed line skipped"));
    journal_alive_close(&a);
    assert_int_equal(out_errors(o), 0);
    unlink(path);
    out_free(o);
}

static void test_not_a_journal(void **state)
{
    (void)state;
    out_t *o = out_new_capture();
    char *path = tmp_path();
    append_raw(path, "{\"op\":\"put\",\"path\":\"/x\"}\n");
    journal_alive_t a;
    assert_int_equal(journal_read(path, &a, o), SQ_EPARSE);
    assert_non_null(strstr(out_captured_diag(o), "not a squall journal"));
    unlink(path);
    assert_int_equal(journal_read(path, &a, o), SQ_EIO);
    out_free(o);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_alive),
        cmocka_unit_test(test_lines_are_json),
        cmocka_unit_test(test_torn_last_line),
        cmocka_unit_test(test_not_a_journal),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
