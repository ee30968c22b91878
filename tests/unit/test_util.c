/* Unit tests for the shared helpers in src/util/: the value parsers (durations, rates,
 * percentages, numbers) and the duration writer, the terminal tables, the did-you-mean suggestion,
 * the clocks and the atomic file write. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <dirent.h>
#include <errno.h>
#include <stdbool.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cmocka.h>
#include <uv.h>

#include "squall/clock.h"
#include "squall/err.h"
#include "squall/file.h"
#include "squall/out.h"
#include "squall/suggest.h"
#include "squall/table.h"
#include "squall/value.h"

#include "pyref.h"

/* cmocka 1.1.5 has no assert_double_equal; this one names both values when it fails. */
#define assert_double_equal(a, b, tol) assert_near((a), (b), (tol), #a, __LINE__)

static void assert_near(double a, double b, double tol, const char *what, int line)
{
    if (!(a - b <= tol && b - a <= tol))
        fail_msg("line %d: %s = %.17g, expected %.17g (within %g)", line, what, a, b, tol);
}

/* Durations. The units are the SI second and its decimal submultiples (ms = 1e-3 s, us and µs
 * = 1e-6 s, ns = 1e-9 s), and the minute and hour accepted for use with the SI (1 min = 60 s,
 * 1 h = 3600 s): BIPM, The International System of Units, 9th ed. (2019), Tables 7 and 8.
 * Expected values are that arithmetic, written out in ns. */
static void test_duration(void **state)
{
    (void)state;
    static const struct {
        const char *text;
        int64_t ns;
    } ok[] = {
        {"0", 0},
        {"250ms", 250000000},
        {"10s", INT64_C(10000000000)},
        {"5m", INT64_C(300000000000)},
        {"1h", INT64_C(3600000000000)},
        {"1.5s", 1500000000},
        {"500us", 500000},
        {"500\xc2\xb5s", 500000},
        {"1ns", 1},
        {"1.1s", 1100000000}, /* exact: 1.1 is not representable as a double */
        {"1m30s", INT64_C(90000000000)},
        {"2m15s", INT64_C(135000000000)},     /* 2 * 60 + 15 = 135 s */
        {"1h30m", INT64_C(5400000000000)},    /* 3600 + 30 * 60 = 5400 s */
        {"1h0m0.5s", INT64_C(3600500000000)}, /* 3600.5 s */
        {"1.5m", INT64_C(90000000000)},       /* 1.5 * 60 = 90 s */
        {"0.25h", INT64_C(900000000000)},     /* 0.25 * 3600 = 900 s */
        {"1s500ms", 1500000000},              /* parts add up whatever their order */
        {"0.000000001s", 1},
        /* INT64_MAX ns = 9223372036854775807 ns, the largest representable duration. */
        {"9223372036854775807ns", INT64_MAX},
    };
    for (size_t i = 0; i < sizeof ok / sizeof ok[0]; i++) {
        int64_t v = -1;
        int rc = value_parse_duration(ok[i].text, &v);
        if (rc != 0 || v != ok[i].ns)
            fail_msg("duration '%s': rc %d, %lld ns, expected %lld ns", ok[i].text, rc,
                     (long long)v, (long long)ok[i].ns);
    }
    static const struct {
        const char *text;
        int rc;
    } bad[] = {
        {"", SQ_EPARSE},
        {"10", SQ_EPARSE}, /* a number without its unit */
        {"2m15", SQ_EPARSE},
        {"10 s", SQ_EPARSE},
        {"1h 30m", SQ_EPARSE},
        {" 1s", SQ_EPARSE},
        {"1s ", SQ_EPARSE},
        {"s", SQ_EPARSE},
        {"m15s", SQ_EPARSE},
        {"1.s", SQ_EPARSE},
        {".5s", SQ_EPARSE},
        {"1,5s", SQ_EPARSE},
        {"+1s", SQ_EPARSE},
        {"1e3ms", SQ_EPARSE},
        {"10sec", SQ_EPARSE},
        {"1d", SQ_EPARSE},
        {"inf", SQ_EPARSE},
        {"nans", SQ_EPARSE},
        {"bogus", SQ_EPARSE},
        {"-5s", SQ_ERANGE},
        {"1.5ns", SQ_ERANGE},
        {"9223372036854775808ns", SQ_ERANGE},
        {"3000000h", SQ_ERANGE},                 /* 3e6 h = 1.08e22 ns > INT64_MAX (9.2e18) */
        {"9223372036854775807ns1ns", SQ_ERANGE}, /* the sum passes INT64_MAX */
        {"0x10s", SQ_EPARSE},
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        int64_t v = 42;
        int rc = value_parse_duration(bad[i].text, &v);
        if (rc != bad[i].rc)
            fail_msg("duration '%s': got %d, expected %d", bad[i].text, rc, bad[i].rc);
        assert_true(v == 42);
    }
}

/* Rates are per second, per minute (60 s) or per hour (3600 s); percentages are hundredths. */
static void test_rate_percent(void **state)
{
    (void)state;
    double v;
    assert_int_equal(value_parse_rate("500/s", &v), 0);
    assert_true(v == 500);
    assert_int_equal(value_parse_rate("30/m", &v), 0);
    assert_true(v == 0.5); /* 30 per 60 s */
    assert_int_equal(value_parse_rate("90/min", &v), 0);
    assert_true(v == 1.5); /* 90 per 60 s */
    assert_int_equal(value_parse_rate("2/h", &v), 0);
    assert_double_equal(v, 2.0 / 3600, 1e-15);
    assert_int_equal(value_parse_rate("0", &v), 0);
    assert_true(v == 0);
    assert_int_equal(value_parse_rate("1e3/s", &v), 0);
    assert_true(v == 1000);
    assert_int_equal(value_parse_rate("1e9/s", &v), 0); /* VALUE_RATE_MAX itself */
    assert_true(v == VALUE_RATE_MAX);
    v = 7;
    assert_int_equal(value_parse_rate("500", &v), SQ_EPARSE);
    assert_int_equal(value_parse_rate("500/d", &v), SQ_EPARSE);
    assert_int_equal(value_parse_rate("500 /s", &v), SQ_EPARSE);
    assert_int_equal(value_parse_rate("-1/s", &v), SQ_ERANGE);
    assert_int_equal(value_parse_rate("2e9/s", &v), SQ_ERANGE); /* above VALUE_RATE_MAX 1e9 */
    assert_int_equal(value_parse_rate("inf/s", &v), SQ_EPARSE);
    assert_true(v == 7);
    assert_int_equal(value_parse_percent("5%", &v), 0);
    assert_true(v == 0.05);
    assert_int_equal(value_parse_percent("0.1%", &v), 0);
    assert_double_equal(v, 0.001, 1e-15);
    assert_int_equal(value_parse_percent("100%", &v), 0);
    assert_true(v == 1);
    v = 7;
    assert_int_equal(value_parse_percent("100.5%", &v), SQ_ERANGE);
    assert_int_equal(value_parse_percent("5", &v), SQ_EPARSE);
    assert_int_equal(value_parse_percent("5 %", &v), SQ_EPARSE);
    assert_int_equal(value_parse_percent("-5%", &v), SQ_ERANGE);
    assert_true(v == 7);
}

static void test_int_number(void **state)
{
    (void)state;
    int64_t n;
    assert_int_equal(value_parse_int("16", 1, 100, &n), 0);
    assert_true(n == 16);
    assert_int_equal(value_parse_int("-3", -5, 5, &n), 0);
    assert_true(n == -3);
    n = 7;
    assert_int_equal(value_parse_int("0", 1, 100, &n), SQ_ERANGE);
    assert_int_equal(value_parse_int("1.5", 1, 100, &n), SQ_EPARSE);
    assert_int_equal(value_parse_int("+3", 1, 100, &n), SQ_EPARSE);
    assert_int_equal(value_parse_int("3 ", 1, 100, &n), SQ_EPARSE);
    assert_int_equal(value_parse_int("", 1, 100, &n), SQ_EPARSE);
    assert_int_equal(value_parse_int("99999999999999999999", 0, INT64_MAX, &n), SQ_ERANGE);
    assert_true(n == 7);
    double d;
    assert_int_equal(value_parse_number("0.25", 0, 1, &d), 0);
    assert_true(d == 0.25);
    assert_int_equal(value_parse_number("1e3", 0, 1e4, &d), 0);
    assert_true(d == 1000);
    assert_int_equal(value_parse_number("-0.5", -1, 1, &d), 0);
    assert_true(d == -0.5);
    d = 7;
    assert_int_equal(value_parse_number("2", 0, 1, &d), SQ_ERANGE);
    assert_int_equal(value_parse_number("0x1p3", 0, 100, &d), SQ_EPARSE);
    assert_int_equal(value_parse_number("inf", 0, 1e308, &d), SQ_EPARSE);
    assert_int_equal(value_parse_number("nan", 0, 1, &d), SQ_EPARSE);
    assert_int_equal(value_parse_number("1e999", 0, 1e308, &d), SQ_ERANGE);
    assert_int_equal(value_parse_number("1 ", 0, 10, &d), SQ_EPARSE);
    assert_true(d == 7);
}

/* Did you mean. Distances are Levenshtein's (V. I. Levenshtein, "Binary codes capable of
 * correcting deletions, insertions and reversals", Soviet Physics Doklady 10(8), 1966): the
 * textbook pair kitten -> sitting is 3 edits (k->s, e->i, +g; a common worked example, quoted
 * from memory), and a swap of two letters costs 2. The thresholds are the ones suggest.h states. */
static void test_suggest(void **state)
{
    (void)state;
    const char *const kitten[] = {"kitten", NULL};
    /* 3 edits, and 3 are allowed for 7 letters ((7 + 2) / 3). */
    assert_ptr_equal(suggest_closest("sitting", kitten), kitten[0]);
    /* sittings is 4 edits away; 8 letters allow 3. */
    assert_null(suggest_closest("sittings", kitten));
    const char *const cmds[] = {"check", "run", "serve", "merge", "demo", NULL};
    assert_string_equal(suggest_closest("chek", cmds), "check");  /* one deletion */
    assert_string_equal(suggest_closest("chekc", cmds), "check"); /* a swap: 2 of 2 allowed */
    assert_string_equal(suggest_closest("mrege", cmds), "merge");
    assert_string_equal(suggest_closest("serve", cmds), "serve"); /* exact */
    assert_null(suggest_closest("zzzz", cmds));                   /* 4 edits from run */
    assert_null(suggest_closest("xyzzy", cmds));
    /* Ties go to the word listed first; a typed prefix of 2+ characters counts as 1 edit. */
    const char *const animals[] = {"bat", "hat", NULL};
    assert_ptr_equal(suggest_closest("cat", animals), animals[0]);
    const char *const opts[] = {"--confirm-target", "--connections", NULL};
    assert_ptr_equal(suggest_closest("--conn", opts), opts[1]);
    const char *const none[] = {NULL};
    assert_null(suggest_closest("run", none));
    /* Over 63 characters only the prefix rule applies: one changed letter is not found. */
    char typed[80], valid[80];
    memset(typed, 'a', 70);
    typed[70] = '\0';
    memcpy(valid, typed, 71);
    valid[69] = 'b';
    const char *const longs[] = {valid, NULL};
    assert_null(suggest_closest(typed, longs));
    typed[60] = '\0'; /* now a 60-letter prefix of valid */
    assert_ptr_equal(suggest_closest(typed, longs), valid);
}

/* The incremental form compares prefix + name and returns the name as offered. */
static void test_suggest_offer(void **state)
{
    (void)state;
    static const char *const names[] = {"quiet", "out", "set", "help"};
    suggest_t s;
    suggest_init(&s, "--quite");
    for (int i = 0; i < 4; i++)
        suggest_offer(&s, "--", names[i]);
    assert_ptr_equal(suggest_best(&s), names[0]); /* --quite -> --quiet: 2 of 3 allowed */
    suggest_init(&s, "--sett");
    for (int i = 0; i < 4; i++)
        suggest_offer(&s, "--", names[i]);
    assert_ptr_equal(suggest_best(&s), names[2]);
    suggest_init(&s, "--verbose");
    for (int i = 0; i < 4; i++)
        suggest_offer(&s, "--", names[i]);
    assert_null(suggest_best(&s));
    /* Without a prefix the same call is suggest_closest over the names. */
    suggest_init(&s, "hepl");
    for (int i = 0; i < 4; i++)
        suggest_offer(&s, NULL, names[i]);
    assert_ptr_equal(suggest_best(&s), names[3]);
}

/* The clocks against libuv's readings of the same clocks, by order only (no duration is
 * asserted). uv_hrtime() is nanoseconds "relative to an arbitrary time in the past" (libuv docs,
 * misc.rst), read from CLOCK_MONOTONIC on Linux (libuv 1.44, src/unix, UV_CLOCK_PRECISE): a
 * reading of ours taken between two of its readings lies between them, which it would not on
 * another base. uv_gettimeofday() is gettimeofday(2), wall time in microseconds, the clock that
 * CLOCK_REALTIME reads in nanoseconds (POSIX.1-2017, clock_gettime). */
static void test_clock(void **state)
{
    (void)state;
    for (int i = 0; i < 1000; i++) {
        uint64_t a = uv_hrtime();
        int64_t m = clock_mono_ns();
        uint64_t b = uv_hrtime();
        if (!((int64_t)a <= m && m <= (int64_t)b))
            fail_msg("uv_hrtime %llu, clock_mono_ns %lld, uv_hrtime %llu", (unsigned long long)a,
                     (long long)m, (unsigned long long)b);
    }
    uv_timeval64_t t0, t1;
    assert_int_equal(uv_gettimeofday(&t0), 0);
    int64_t r = clock_real_ns();
    assert_int_equal(uv_gettimeofday(&t1), 0);
    int64_t lo = (t0.tv_sec * 1000000 + t0.tv_usec) * 1000;
    int64_t hi = (t1.tv_sec * 1000000 + t1.tv_usec + 1) * 1000;
    if (!(lo <= r && r < hi))
        fail_msg("gettimeofday %lld ns, clock_real_ns %lld, gettimeofday %lld ns", (long long)lo,
                 (long long)r, (long long)hi);
}

/* ---- file_write_atomic: checked against POSIX.1-2017 rename(): "If the link named by the new
 * argument exists, it shall be removed and old renamed to new. In this case, a link named new
 * shall remain visible to other threads throughout the renaming operation and refer either to
 * the file referred to by new or old before the operation began." So while the contents are
 * written the old file is still whole at its name, afterwards the name is a new file (a new
 * inode: a descriptor opened on the old file still reads the old text), and on failure the
 * directory holds exactly what it held before. */

typedef struct {
    char dir[64], path[128];
    const char *text;   /* what fill writes */
    int fail;           /* what fill returns after writing */
    const char *during; /* what PATH must hold while fill runs (NULL: not checked) */
    bool absent;        /* PATH must not exist while fill runs */
    int entries_during; /* files in dir while fill runs */
} fixture_t;

static char *read_text(const char *path)
{
    static char buf[256];
    FILE *f = fopen(path, "r");
    if (!f)
        return NULL;
    size_t n = fread(buf, 1, sizeof buf - 1, f);
    buf[n] = '\0';
    fclose(f);
    return buf;
}

static void write_text(const char *path, const char *text)
{
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fputs(text, f);
    assert_int_equal(fclose(f), 0);
}

/* Number of entries in dir, "." and ".." excluded. */
static int entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    int n = 0;
    for (struct dirent *e; (e = readdir(d));)
        n += strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0;
    closedir(d);
    return n;
}

static int fill_fixture(FILE *f, void *ctx)
{
    fixture_t *fx = ctx;
    fputs(fx->text, f);
    fflush(f);
    const char *now = read_text(fx->path);
    if (fx->during)
        assert_string_equal(now, fx->during);
    if (fx->absent)
        assert_null(now);
    fx->entries_during = entries(fx->dir);
    return fx->fail;
}

static void fixture_init(fixture_t *fx)
{
    memset(fx, 0, sizeof *fx);
    snprintf(fx->dir, sizeof fx->dir, "/tmp/squall-util-XXXXXX");
    assert_non_null(mkdtemp(fx->dir));
    snprintf(fx->path, sizeof fx->path, "%s/report.html", fx->dir);
}

static void fixture_close(fixture_t *fx)
{
    DIR *d = opendir(fx->dir);
    assert_non_null(d);
    char p[512];
    for (struct dirent *e; (e = readdir(d));) {
        if (strcmp(e->d_name, ".") == 0 || strcmp(e->d_name, "..") == 0)
            continue;
        snprintf(p, sizeof p, "%s/%s", fx->dir, e->d_name);
        if (unlink(p) != 0)
            assert_int_equal(rmdir(p), 0);
    }
    closedir(d);
    assert_int_equal(rmdir(fx->dir), 0);
}

static void test_file_new_and_replace(void **state)
{
    (void)state;
    fixture_t fx;
    fixture_init(&fx);
    out_t *o = out_new_capture();
    /* A new file: absent while written, its temporary beside it in the same directory. */
    fx.text = "first\n";
    fx.absent = true;
    assert_int_equal(file_write_atomic(fx.path, fill_fixture, &fx, o), 0);
    assert_int_equal(fx.entries_during, 1);
    assert_string_equal(read_text(fx.path), "first\n");
    assert_int_equal(entries(fx.dir), 1);
    struct stat st;
    assert_int_equal(stat(fx.path, &st), 0);
    assert_int_equal(st.st_mode & 0777, 0644);
    ino_t first = st.st_ino;
    /* Replacing: the old file stays whole at its name until the rename. */
    FILE *old = fopen(fx.path, "r");
    assert_non_null(old);
    fx.text = "second, longer\n";
    fx.absent = false;
    fx.during = "first\n";
    assert_int_equal(file_write_atomic(fx.path, fill_fixture, &fx, o), 0);
    assert_int_equal(fx.entries_during, 2);
    assert_string_equal(read_text(fx.path), "second, longer\n");
    assert_int_equal(entries(fx.dir), 1);
    assert_int_equal(stat(fx.path, &st), 0);
    assert_true(st.st_ino != first);
    char buf[32] = "";
    assert_non_null(fgets(buf, sizeof buf, old)); /* the old file itself was not rewritten */
    assert_string_equal(buf, "first\n");
    fclose(old);
    assert_string_equal(out_captured_diag(o), "");
    out_free(o);
    fixture_close(&fx);
}

/* /proc/sys/fs/file-nr holds "allocated  free-allocated  maximum" (proc(5)); since Linux 2.6 the
 * middle number is always 0. The first line is this machine's file as read on 2026-12-02. */
static void test_file_system_free(void **state)
{
    (void)state;
    assert_int_equal(file_system_free_parse("11890\t0\t2466116\n"), 2466116 - 11890);
    assert_int_equal(file_system_free_parse("1000 200 5000"), 5000 - 800);
    assert_int_equal(file_system_free_parse("9000 0 5000"), 0); /* over the maximum: none left */
    assert_int_equal(file_system_free_parse("12 0"), 0);
    assert_int_equal(file_system_free_parse("x y z"), 0);
    assert_int_equal(file_system_free_parse(NULL), 0);
    uint64_t now = file_system_free(); /* this machine's: some left, or unknown */
    assert_true(now > 0);
}

static void test_file_failures(void **state)
{
    (void)state;
    fixture_t fx;
    fixture_init(&fx);
    out_t *o = out_new_capture();
    char want[512];
    /* The fill fails after writing part of the text: the old file stays, no temporary is left,
     * and the reason is the fill's own code. */
    write_text(fx.path, "old\n");
    fx.text = "half of the new";
    fx.during = "old\n";
    fx.fail = SQ_ENOMEM;
    assert_int_equal(file_write_atomic(fx.path, fill_fixture, &fx, o), SQ_EIO);
    assert_int_equal(fx.entries_during, 2);
    assert_string_equal(read_text(fx.path), "old\n");
    assert_int_equal(entries(fx.dir), 1);
    snprintf(want, sizeof want, "squall: error: cannot write %s: out of memory\n", fx.path);
    assert_string_equal(out_captured_diag(o), want);
    out_free(o);
    /* The rename fails (the name is a directory that is not empty): the temporary goes too. */
    o = out_new_capture();
    assert_int_equal(unlink(fx.path), 0);
    assert_int_equal(mkdir(fx.path, 0755), 0);
    char inner[256];
    snprintf(inner, sizeof inner, "%s/keep", fx.path);
    write_text(inner, "x");
    fx.fail = 0;
    fx.during = NULL;
    fx.text = "new\n";
    assert_int_equal(file_write_atomic(fx.path, fill_fixture, &fx, o), SQ_EIO);
    assert_int_equal(entries(fx.dir), 1);
    assert_int_equal(entries(fx.path), 1);
    snprintf(want, sizeof want, "squall: error: cannot write %s: %s\n", fx.path, strerror(EISDIR));
    assert_string_equal(out_captured_diag(o), want);
    out_free(o);
    assert_int_equal(unlink(inner), 0);
    /* The directory does not exist: nothing is created and the reason is the system's. */
    o = out_new_capture();
    char missing[256];
    snprintf(missing, sizeof missing, "%s/no-such-dir/report.html", fx.dir);
    assert_int_equal(file_write_atomic(missing, fill_fixture, &fx, o), SQ_EIO);
    snprintf(want, sizeof want, "squall: error: cannot write %s: %s\n", missing, strerror(ENOENT));
    assert_string_equal(out_captured_diag(o), want);
    assert_int_equal(entries(fx.dir), 1);
    out_free(o);
    fixture_close(&fx);
}

/* value_format_duration writes what a plan would: the unit a person picks (the largest that
 * gives a value >= 1 with at most three decimals), and value_parse_duration (checked above
 * against BIPM's definitions) reads every text back to the same nanoseconds. */
static void test_format_duration(void **state)
{
    (void)state;
    static const struct {
        int64_t ns;
        const char *text;
    } cases[] = {
        {0, "0"},
        {1, "1ns"},
        {999, "999ns"},
        {1000, "1us"},
        {12500, "12.5us"},
        {1234567, "1234.567us"},
        {250000000, "250ms"},
        {1000000000, "1s"},
        {1500000000, "1.5s"},
        {1000500000, "1000.5ms"},
        {INT64_C(90000000000), "90s"},
        {INT64_C(120000000000), "2m"},
        {INT64_C(7200000000000), "2h"},
        {INT64_C(5400000000000), "90m"},
    };
    char buf[40];
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        assert_string_equal(value_format_duration(cases[i].ns, buf, sizeof buf), cases[i].text);
        int64_t back = -1;
        assert_int_equal(value_parse_duration(buf, &back), 0);
        assert_int_equal(back, cases[i].ns);
    }
    /* A bounded sweep of values that are not round: each reads back exactly. */
    uint64_t x = 88172645463325252u; /* xorshift64 (Marsaglia 2003) */
    for (int i = 0; i < 2000; i++) {
        x ^= x << 13, x ^= x >> 7, x ^= x << 17;
        int64_t ns = (int64_t)(x % INT64_C(100000000000000));
        int64_t back = -1;
        value_format_duration(ns, buf, sizeof buf);
        if (value_parse_duration(buf, &back) != 0 || back != ns)
            fail_msg("%lld ns -> '%s' -> %lld ns", (long long)ns, buf, (long long)back);
    }
}

/* The same cells laid out by util-linux column(1) (-t, tab-separated input, two-space output
 * separator, -R for the right-aligned columns): the reference for table_print's layout. */
static char *column_layout(const char *tsv, const char *right)
{
    char cmd[128];
    snprintf(cmd, sizeof cmd, "column -t -s '\t' -o '  ' -R %s", right);
    return pyref_command(cmd, tsv);
}

static void test_table(void **state)
{
    (void)state;
    static const table_col_t cols[] = {{"phase", TABLE_LEFT},
                                       {"class", TABLE_LEFT},
                                       {"requests", TABLE_RIGHT},
                                       {"p99", TABLE_RIGHT}};
    static const char *const rows[][4] = {
        {"reconnect-storm", "list-gateways/all-pages", "8", "0.95"},
        {"spread", "renew", "120000", "12.40"},
        {"s", "r\xc3\xa9new", "1", "-"}, /* UTF-8: one column per character */
    };
    table_t *t = table_new(cols, 4);
    assert_non_null(t);
    char tsv[1024] = "phase\tclass\trequests\tp99\n";
    for (size_t i = 0; i < 3; i++) {
        assert_int_equal(table_add(t, rows[i]), 0);
        size_t at = strlen(tsv);
        snprintf(tsv + at, sizeof tsv - at, "%s\t%s\t%s\t%s\n", rows[i][0], rows[i][1], rows[i][2],
                 rows[i][3]);
    }
    assert_int_equal(table_rows(t), 3);
    assert_int_equal(table_width(t, 1), strlen("list-gateways/all-pages"));
    out_t *o = out_new_capture();
    table_print(t, o);
    assert_string_equal(out_captured_results(o), column_layout(tsv, "3,4"));
    /* The exact first row, as a person reads it. */
    assert_non_null(strstr(out_captured_results(o),
                           "reconnect-storm  list-gateways/all-pages         8   0.95\n"));
    out_free(o);

    /* A note starts at its column and widens nothing; a left-aligned last column has no
     * trailing blanks. */
    static const table_col_t two[] = {{"verdict", TABLE_LEFT}, {"objective", TABLE_LEFT}};
    table_t *u = table_new(two, 2);
    const char *r1[] = {"TOO-FEW", "p99 of response <= 1s"};
    assert_int_equal(table_add(u, r1), 0);
    assert_int_equal(table_note(u, 1, "32 samples, needs 100 to resolve it, a long note"), 0);
    table_min_width(u, 0, 9);
    o = out_new_capture();
    table_print(u, o);
    assert_string_equal(out_captured_results(o), "verdict    objective\n"
                                                 "TOO-FEW    p99 of response <= 1s\n"
                                                 "           32 samples, needs 100 to resolve it, "
                                                 "a long note\n");
    out_free(o);
    table_free(u);
    table_free(t);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_duration),
        cmocka_unit_test(test_format_duration),
        cmocka_unit_test(test_table),
        cmocka_unit_test(test_rate_percent),
        cmocka_unit_test(test_int_number),
        cmocka_unit_test(test_suggest),
        cmocka_unit_test(test_suggest_offer),
        cmocka_unit_test(test_clock),
        cmocka_unit_test(test_file_new_and_replace),
        cmocka_unit_test(test_file_failures),
        cmocka_unit_test(test_file_system_free),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
