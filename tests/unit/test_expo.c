/* Unit tests for the exposition parser (src/expo/): the worked examples of the Prometheus
 * "Exposition formats" page (text-based format, its example block) and of the OpenMetrics 1.0
 * specification (its summary/gauge/counter example and the exemplar line of "Exemplars"), and the
 * case corpus in tests/data/expo/: every Prometheus case is also fed to Debian's promtool
 * ("promtool check metrics": exit 1 is a parse error, 0 or 3 parsed), which must agree with the
 * case's name (ok-/bad-) and with squall. The OpenMetrics cases are checked against a real
 * prometheus server by tests/integration/metrics_scrape.sh. */
#include <dirent.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>

#include <cmocka.h>

#include "squall/err.h"
#include "squall/expo.h"

#define MAX_KEPT 64

typedef struct {
    char name[MAX_KEPT][96], family[MAX_KEPT][96], suffix[MAX_KEPT][16], labels[MAX_KEPT][256];
    enum expo_type type[MAX_KEPT];
    double value[MAX_KEPT];
    int64_t time_ms[MAX_KEPT];
    bool has_time[MAX_KEPT];
    size_t n;
} kept_t;

static int keep(const expo_sample_t *s, void *ud)
{
    kept_t *k = ud;
    if (k->n == MAX_KEPT)
        return 0;
    size_t i = k->n++;
    snprintf(k->name[i], sizeof k->name[i], "%s", s->name);
    snprintf(k->family[i], sizeof k->family[i], "%s", s->family);
    snprintf(k->suffix[i], sizeof k->suffix[i], "%s", s->suffix);
    k->labels[i][0] = '\0';
    for (size_t j = 0; j < s->n_labels; j++) {
        size_t used = strlen(k->labels[i]);
        snprintf(k->labels[i] + used, sizeof k->labels[i] - used, "%s%s=%s", j ? "," : "",
                 s->labels[j].name, s->labels[j].value);
    }
    k->type[i] = s->type;
    k->value[i] = s->value;
    k->has_time[i] = s->has_time;
    k->time_ms[i] = s->time_ms;
    return 0;
}

static char *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    assert_non_null(f);
    char *buf = malloc(1 << 20);
    assert_non_null(buf);
    *len = fread(buf, 1, 1 << 20, f);
    fclose(f);
    return buf;
}

static void parse_file(const char *rel, enum expo_format fmt, kept_t *k)
{
    char path[512], err[256];
    size_t len;
    snprintf(path, sizeof path, "%s/tests/data/expo/%s", SRCDIR, rel);
    char *buf = slurp(path, &len);
    int rc = expo_parse(buf, len, fmt, keep, k, err, sizeof err);
    if (rc != 0)
        fprintf(stderr, "%s: %s\n", rel, err);
    assert_int_equal(rc, 0);
    free(buf);
}

static size_t find(const kept_t *k, const char *name, const char *labels)
{
    for (size_t i = 0; i < k->n; i++)
        if (strcmp(k->name[i], name) == 0 && (labels == NULL || strcmp(k->labels[i], labels) == 0))
            return i;
    fail_msg("no sample %s {%s}", name, labels ? labels : "");
    return 0;
}

/* The Prometheus page's example block, value by value as the page explains it. */
static void test_prometheus_doc_example(void **state)
{
    (void)state;
    kept_t k = {0};
    parse_file("prom/ok-doc-example.txt", EXPO_PROMETHEUS, &k);
    assert_int_equal(k.n, 2 + 1 + 1 + 1 + 8 + 7);
    size_t i = find(&k, "http_requests_total", "method=post,code=400");
    assert_true(k.value[i] == 3 && k.has_time[i] && k.time_ms[i] == 1395066363000);
    assert_int_equal(k.type[i], EXPO_COUNTER);
    /* "Escaping in label values": C:\DIR\FILE.TXT and a line feed and quotes. */
    i = find(&k, "msdos_file_access_time_seconds",
             "path=C:\\DIR\\FILE.TXT,error=Cannot find file:\n\"FILE.TXT\"");
    assert_true(k.value[i] == 1.458255915e9 && !k.has_time[i]);
    i = find(&k, "something_weird", NULL);
    assert_true(isinf(k.value[i]) && k.value[i] > 0 && k.time_ms[i] == -3982045);
    i = find(&k, "http_request_duration_seconds_bucket", "le=+Inf");
    assert_string_equal(k.family[i], "http_request_duration_seconds");
    assert_string_equal(k.suffix[i], "_bucket");
    assert_int_equal(k.type[i], EXPO_HISTOGRAM);
    assert_true(k.value[i] == 144320);
    i = find(&k, "rpc_duration_seconds", "quantile=0.99");
    assert_int_equal(k.type[i], EXPO_SUMMARY);
    assert_string_equal(k.suffix[i], "");
    i = find(&k, "rpc_duration_seconds_sum", NULL);
    assert_true(k.value[i] == 1.7560473e+07);
    assert_string_equal(k.family[i], "rpc_duration_seconds");
}

/* The OpenMetrics example: families with UNIT, suffixes by type, timestamps in seconds. */
static void test_openmetrics_example(void **state)
{
    (void)state;
    kept_t k = {0};
    parse_file("om/ok-spec-example.txt", EXPO_OPENMETRICS, &k);
    assert_int_equal(k.n, 8);
    size_t i = find(&k, "process_cpu_seconds_total", NULL);
    assert_string_equal(k.family[i], "process_cpu_seconds");
    assert_string_equal(k.suffix[i], "_total");
    assert_int_equal(k.type[i], EXPO_COUNTER);
    assert_true(k.value[i] == 4.20072246e+06);
    i = find(&k, "acme_http_router_request_seconds_count", "path=/api/v2,method=POST");
    assert_true(k.value[i] == 34.0);
    assert_int_equal(k.type[i], EXPO_SUMMARY);
    kept_t e = {0};
    parse_file("om/ok-histogram-exemplar.txt", EXPO_OPENMETRICS, &e);
    assert_int_equal(e.n, 4);
    assert_true(e.value[0] == 8 && !e.has_time[0]); /* the exemplar's time is not the sample's */
    kept_t t = {0};
    parse_file("om/ok-timestamp-seconds.txt", EXPO_OPENMETRICS, &t);
    assert_true(t.has_time[0] && t.time_ms[0] == INT64_C(1520879607789));
}

/* promtool's verdict on a file: true when it parsed (exit 0: clean, 3: lint remarks). */
static bool promtool_parses(const char *path)
{
    char cmd[1100];
    snprintf(cmd, sizeof cmd, "promtool check metrics < '%s' > /dev/null 2>&1", path);
    int st = system(cmd);
    assert_true(WIFEXITED(st));
    int rc = WEXITSTATUS(st);
    if (rc == 127)
        fail_msg("promtool not found: tools/setup installs Debian's prometheus package");
    assert_true(rc == 0 || rc == 1 || rc == 3);
    return rc != 1;
}

static void corpus(const char *dir, enum expo_format fmt, bool with_promtool)
{
    char path[512], err[256];
    snprintf(path, sizeof path, "%s/tests/data/expo/%s", SRCDIR, dir);
    DIR *d = opendir(path);
    assert_non_null(d);
    size_t n = 0;
    for (struct dirent *e; (e = readdir(d)) != NULL;) {
        if (strstr(e->d_name, ".txt") == NULL)
            continue;
        bool ok = strncmp(e->d_name, "ok-", 3) == 0;
        assert_true(ok || strncmp(e->d_name, "bad-", 4) == 0);
        char file[800];
        size_t len;
        snprintf(file, sizeof file, "%s/%s", path, e->d_name);
        char *buf = slurp(file, &len);
        int rc = expo_parse(buf, len, fmt, NULL, NULL, err, sizeof err);
        free(buf);
        if ((rc == 0) != ok)
            fail_msg("%s/%s: squall %s (%s)", dir, e->d_name, rc == 0 ? "parsed" : "refused", err);
        if (!ok)
            assert_true(strncmp(err, "line ", 5) == 0); /* says where */
        if (with_promtool && promtool_parses(file) != ok)
            fail_msg("%s/%s: promtool disagrees with the case's name", dir, e->d_name);
        n++;
    }
    closedir(d);
    assert_true(n >= 10);
}

static void test_prometheus_corpus_against_promtool(void **state)
{
    (void)state;
    corpus("prom", EXPO_PROMETHEUS, true);
}

static void test_openmetrics_corpus(void **state)
{
    (void)state;
    corpus("om", EXPO_OPENMETRICS, false);
}

/* Errors name their line; a callback's return stops the parse; limits hold. */
static int stop_at_second(const expo_sample_t *s, void *ud)
{
    (void)s;
    return ++*(int *)ud == 2 ? 42 : 0;
}

static void test_errors_and_limits(void **state)
{
    (void)state;
    char err[256];
    const char *t = "a 1\nb 2\nc{x=\"1\" 3\n";
    assert_int_equal(expo_parse(t, strlen(t), EXPO_PROMETHEUS, NULL, NULL, err, sizeof err),
                     SQ_EPARSE);
    assert_true(strncmp(err, "line 3: ", 8) == 0);
    int calls = 0;
    assert_int_equal(expo_parse(t, strlen(t), EXPO_PROMETHEUS, stop_at_second, &calls, err, 256),
                     42);
    char many[4096] = "gw{";
    for (int i = 0; i <= EXPO_MAX_LABELS; i++)
        snprintf(many + strlen(many), sizeof many - strlen(many), "l%d=\"v\",", i);
    strcat(many, "} 1\n");
    assert_int_equal(expo_parse(many, strlen(many), EXPO_PROMETHEUS, NULL, NULL, err, 256),
                     SQ_EPARSE);
    assert_non_null(strstr(err, "more than"));
    assert_int_equal(expo_format_of("application/openmetrics-text; version=1.0.0"),
                     EXPO_OPENMETRICS);
    assert_int_equal(expo_format_of("text/plain; version=0.0.4"), EXPO_PROMETHEUS);
    assert_int_equal(expo_format_of(NULL), EXPO_PROMETHEUS);
}

/* Many families: the family table grows and keeps each family's type. */
static int count_counters(const expo_sample_t *s, void *ud)
{
    if (s->type == EXPO_COUNTER && strcmp(s->suffix, "_total") == 0)
        ++*(int *)ud;
    return 0;
}

static void test_many_families(void **state)
{
    (void)state;
    size_t cap = 1 << 20, len = 0;
    char *buf = malloc(cap);
    assert_non_null(buf);
    for (int i = 0; i < 5000; i++)
        len += (size_t)snprintf(buf + len, cap - len,
                                "# TYPE gw%d counter\ngw%d_total{site=\"s%d\"} %d\n", i, i, i, i);
    len += (size_t)snprintf(buf + len, cap - len, "# EOF\n");
    int n = 0;
    char err[256];
    assert_int_equal(expo_parse(buf, len, EXPO_OPENMETRICS, count_counters, &n, err, 256), 0);
    assert_int_equal(n, 5000);
    free(buf);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_prometheus_doc_example),
        cmocka_unit_test(test_openmetrics_example),
        cmocka_unit_test(test_prometheus_corpus_against_promtool),
        cmocka_unit_test(test_openmetrics_corpus),
        cmocka_unit_test(test_errors_and_limits),
        cmocka_unit_test(test_many_families),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
