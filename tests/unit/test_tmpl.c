/* Unit tests for templates: every variable, picks against uniform shares by chi-square, named
 * lists and resolvers, compile errors with their offsets, escaping, buffer growth and renders
 * that reuse the caller's buffer, and JSON bodies checked by jansson. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>

#include <cmocka.h>
#include <jansson.h>
#include <string.h>
#include <time.h>

#include "squall/err.h"
#include "squall/tmpl.h"
#include "test_stats.h" /* CHI2_2_01, CHI2_9_01: NIST/SEMATECH table, checked with scipy */

static tmpl_t *compile_ok(const tmpl_env_t *env, const char *text)
{
    tmpl_t *t = NULL;
    tmpl_error_t err = {0};
    int rc = tmpl_compile(env, text, &t, &err);
    if (rc != 0)
        fail_msg("compile '%s': %s at %zu", text, err.msg, err.offset);
    return t;
}

/* Renders into a fresh buffer and returns a copy of the text (caller frees). */
static char *render(const tmpl_t *t, const tmpl_ctx_t *ctx)
{
    tmpl_buf_t b;
    tmpl_buf_init(&b);
    assert_int_equal(tmpl_render(t, ctx, &b), 0);
    assert_int_equal(strlen(b.data), b.len);
    char *s = strdup(b.data);
    tmpl_buf_close(&b);
    return s;
}

static void expect(const tmpl_env_t *env, const char *text, const tmpl_ctx_t *ctx, const char *want)
{
    tmpl_t *t = compile_ok(env, text);
    char *got = render(t, ctx);
    assert_string_equal(got, want);
    free(got);
    tmpl_free(t);
}

static void test_plain_variables(void **state)
{
    (void)state;
    tmpl_ctx_t ctx = {.agent = 42, .seq = 7, .phase = "steady", .now_ns = 1764633603450000123};
    expect(NULL, "/v1/leases/{{agent}}", &ctx, "/v1/leases/42");
    expect(NULL, "gw-{{seq}}", &ctx, "gw-7");
    expect(NULL, "gw-{{ seq:05 }}/{{agent:03}}", &ctx, "gw-00007/042");
    expect(NULL, "{{phase}}:{{now_ns}}:{{now_ms}}", &ctx,
           "steady:1764633603450000123:1764633603450");
    expect(NULL, "no references at all", &ctx, "no references at all");
    expect(NULL, "", &ctx, "");
    ctx.agent = -3;
    ctx.seq = UINT64_MAX;
    ctx.phase = NULL;
    expect(NULL, "{{agent:04}} {{seq}} [{{phase}}]", &ctx, "-0003 18446744073709551615 []");
    tmpl_t *t = compile_ok(NULL, "static");
    assert_true(tmpl_is_constant(t));
    assert_false(tmpl_uses_rng(t));
    assert_string_equal(tmpl_text(t), "static");
    tmpl_free(t);
    t = compile_ok(NULL, "x{{agent}}");
    assert_false(tmpl_is_constant(t));
    tmpl_free(t);
}

/* now_ns with no fixed instant reads CLOCK_REALTIME once per render: the value lies between two
 * clock_gettime readings taken around the render (the system clock is the reference), and two
 * references in one template show the same instant. */
static void test_now_from_clock(void **state)
{
    (void)state;
    tmpl_t *t = compile_ok(NULL, "{{now_ns}} {{now_ns}} {{now_ms}}");
    tmpl_ctx_t ctx = {0};
    struct timespec a, b;
    clock_gettime(CLOCK_REALTIME, &a);
    char *s = render(t, &ctx);
    clock_gettime(CLOCK_REALTIME, &b);
    long long n1, n2, ms;
    assert_int_equal(sscanf(s, "%lld %lld %lld", &n1, &n2, &ms), 3);
    long long lo = (long long)a.tv_sec * 1000000000 + a.tv_nsec;
    long long hi = (long long)b.tv_sec * 1000000000 + b.tv_nsec;
    assert_true(n1 >= lo && n1 <= hi);
    assert_int_equal(n1, n2);
    assert_int_equal(ms, n1 / 1000000);
    free(s);
    tmpl_free(t);
}

/* Escaping: {{{{ writes {{; a lone }} and JSON's own braces stay as written. */
static void test_escaping(void **state)
{
    (void)state;
    tmpl_ctx_t ctx = {.agent = 1};
    expect(NULL, "{{{{agent}}", &ctx, "{{agent}}");
    expect(NULL, "a}}b{{{{", &ctx, "a}}b{{");
    expect(NULL, "{\"a\":{\"b\":{{agent}}}}", &ctx, "{\"a\":{\"b\":1}}");
    expect(NULL, "{{{{{{agent}}", &ctx, "{{1");
}

/* {{pick:[a,b,c]}} picks each item with equal chance: chi-square of 30,000 renders, df 2,
 * critical 9.210 at .01 (NIST/SEMATECH table). */
static void test_pick_list(void **state)
{
    (void)state;
    rng_t rng;
    rng_seed(&rng, 17);
    tmpl_ctx_t ctx = {.rng = &rng};
    tmpl_t *t = compile_ok(NULL, "t-{{pick:[ alpha, b ,c]}}");
    assert_true(tmpl_uses_rng(t));
    char buf[64];
    size_t len;
    double obs[3] = {0};
    for (int i = 0; i < 30000; i++) {
        assert_int_equal(tmpl_render_to(t, &ctx, buf, sizeof(buf), &len), 0);
        if (strcmp(buf, "t-alpha") == 0)
            obs[0]++;
        else if (strcmp(buf, "t-b") == 0)
            obs[1]++;
        else if (strcmp(buf, "t-c") == 0)
            obs[2]++;
        else
            fail_msg("unexpected render '%s'", buf);
    }
    double chi = 0;
    for (int i = 0; i < 3; i++)
        chi += (obs[i] - 10000) * (obs[i] - 10000) / 10000;
    printf("pick list: %g/%g/%g, X2 %.3f (critical 9.210)\n", obs[0], obs[1], obs[2], chi);
    assert_true(chi < CHI2_2_01);
    ctx.rng = NULL;
    assert_int_equal(tmpl_render_to(t, &ctx, buf, sizeof(buf), &len), SQ_EINVAL);
    tmpl_free(t);
}

/* {{pick:1..10}} covers exactly 1..10, uniformly (chi-square df 9, 21.666); wide and negative
 * ranges stay inside their bounds. */
static void test_pick_range(void **state)
{
    (void)state;
    rng_t rng;
    rng_seed(&rng, 23);
    tmpl_ctx_t ctx = {.rng = &rng};
    tmpl_t *t = compile_ok(NULL, "{{pick:1..10}}");
    char buf[32];
    size_t len;
    double obs[10] = {0};
    for (int i = 0; i < 20000; i++) {
        assert_int_equal(tmpl_render_to(t, &ctx, buf, sizeof(buf), &len), 0);
        long v = strtol(buf, NULL, 10);
        assert_true(v >= 1 && v <= 10);
        obs[v - 1]++;
    }
    double chi = 0;
    for (int i = 0; i < 10; i++)
        chi += (obs[i] - 2000) * (obs[i] - 2000) / 2000;
    printf("pick range 1..10: X2 %.3f (critical 21.666)\n", chi);
    assert_true(chi < CHI2_9_01);
    tmpl_free(t);
    t = compile_ok(NULL, "{{pick:-5..-5}} {{pick:-1000000000000000000..1000000000000000000}}");
    for (int i = 0; i < 100; i++) {
        assert_int_equal(tmpl_render_to(t, &ctx, buf, sizeof(buf), &len), 0);
        long long a, b;
        assert_int_equal(sscanf(buf, "%lld %lld", &a, &b), 2);
        assert_int_equal(a, -5);
        assert_true(b >= -1000000000000000000LL && b <= 1000000000000000000LL);
    }
    tmpl_free(t);
}

/* A resolver that writes "obj-ARG-AGENT", as an object pool would. */
static int pool_resolve(void *user, const char *arg, size_t arg_len, const tmpl_ctx_t *ctx,
                        char *dst, size_t cap, size_t *len)
{
    int *calls = user;
    (*calls)++;
    char tmp[64];
    int n = snprintf(tmp, sizeof(tmp), "obj-%.*s-%lld", (int)arg_len, arg, (long long)ctx->agent);
    *len = (size_t)n;
    if (dst && (size_t)n <= cap)
        memcpy(dst, tmp, (size_t)n);
    return 0;
}

static int failing_resolve(void *user, const char *arg, size_t arg_len, const tmpl_ctx_t *ctx,
                           char *dst, size_t cap, size_t *len)
{
    (void)user, (void)arg, (void)arg_len, (void)ctx, (void)dst, (void)cap;
    *len = 0;
    return SQ_ENOTFOUND;
}

/* Named lists from the plan's vars, and resolvers (a "pick" one for an object pool). */
static void test_env(void **state)
{
    (void)state;
    tmpl_env_t *env;
    assert_int_equal(tmpl_env_new(&env), 0);
    const char *sites[] = {"north", "south", "harbor"};
    assert_int_equal(tmpl_env_add_list(env, "site", sites, 3), 0);
    assert_int_equal(tmpl_env_add_list(env, "site", sites, 3), SQ_EEXISTS);
    assert_int_equal(tmpl_env_add_list(env, "agent", sites, 3), SQ_EEXISTS);
    assert_int_equal(tmpl_env_add_list(env, "9lives", sites, 3), SQ_EINVAL);
    assert_int_equal(tmpl_env_add_list(env, "empty", sites, 0), SQ_EINVAL);
    int calls = 0;
    assert_int_equal(tmpl_env_add_resolver(env, "pick", pool_resolve, &calls), 0);
    assert_int_equal(tmpl_env_add_resolver(env, "gone", failing_resolve, NULL), 0);
    assert_int_equal(tmpl_env_add_resolver(env, "seq", pool_resolve, &calls), SQ_EEXISTS);

    rng_t rng;
    rng_seed(&rng, 1);
    tmpl_ctx_t ctx = {.agent = 9, .rng = &rng};
    tmpl_t *t = compile_ok(env, "/v1/sites/{{site}}/gateways/{{pick}}?n={{pick:gateways}}");
    int seen[3] = {0};
    tmpl_buf_t b;
    tmpl_buf_init(&b);
    for (int i = 0; i < 300; i++) {
        assert_int_equal(tmpl_render(t, &ctx, &b), 0);
        int hit = 0;
        for (int k = 0; k < 3; k++) {
            char want[96];
            snprintf(want, sizeof(want), "/v1/sites/%s/gateways/obj--9?n=obj-gateways-9", sites[k]);
            if (strcmp(b.data, want) == 0)
                seen[k]++, hit = 1;
        }
        if (!hit)
            fail_msg("unexpected render '%s'", b.data);
    }
    tmpl_buf_close(&b);
    assert_true(seen[0] > 0 && seen[1] > 0 && seen[2] > 0);
    /* Two resolver references per render, and the first render (into an empty buffer) ran
     * twice to grow it. */
    assert_int_equal(calls, 602);
    tmpl_free(t);

    /* A list added after a template was compiled does not disturb it. */
    t = compile_ok(env, "{{site}}");
    const char *more[] = {"x"};
    for (int i = 0; i < 20; i++) {
        char name[16];
        snprintf(name, sizeof(name), "v%d", i);
        assert_int_equal(tmpl_env_add_list(env, name, more, 1), 0);
    }
    char *s = render(t, &ctx);
    assert_true(strcmp(s, "north") == 0 || strcmp(s, "south") == 0 || strcmp(s, "harbor") == 0);
    free(s);
    tmpl_free(t);

    t = compile_ok(env, "a{{gone:x}}b");
    tmpl_buf_init(&b);
    assert_int_equal(tmpl_render(t, &ctx, &b), SQ_ENOTFOUND);
    tmpl_buf_close(&b);
    tmpl_free(t);
    tmpl_env_free(env);
}

/* Compile errors name the byte offset of the mistake and say what was expected. */
static void test_errors(void **state)
{
    (void)state;
    tmpl_env_t *env;
    assert_int_equal(tmpl_env_new(&env), 0);
    const char *sites[] = {"north"};
    assert_int_equal(tmpl_env_add_list(env, "site", sites, 1), 0);
    static const struct {
        const char *text;
        size_t offset;
        const char *msg;
    } cases[] = {
        {"/v1/{{agent", 4, "not closed"},
        {"/v1/{{}}", 6, "empty reference"},
        {"/v1/{{  }}", 6, "empty reference"},
        {"/x/{{sight}}", 5, "unknown variable 'sight'"},
        {"/x/{{si te}}", 7, "cannot be part of a variable name"},
        {"/x/{{:05}}", 5, "cannot be part"},
        {"{{agent:5}}", 8, "a width is written :0N"},
        {"{{agent:021}}", 8, "a width"},
        {"{{seq:}}", 5, "nothing after ':'"},
        {"{{now_ns:3}}", 8, "now_ns takes no argument"},
        {"{{phase:x}}", 7, "phase takes no argument"},
        {"{{pick:[a,,b]}}", 10, "empty item"},
        {"{{pick:[]}}", 8, "empty item"},
        {"{{pick:[a,b}}", 11, "ends with ']'"},
        {"{{pick:[a]b]}}", 9, "']' inside"},
        {"{{pick:5..1}}", 7, "low bound is above"},
        {"{{pick:1..x}}", 10, "integer"},
        {"{{pick:..3}}", 7, "integer"},
        {"{{pick:1..2000000000000000000}}", 10, "integer"},
        {"{{pick:abc}}", 7, "a list [a,b,c] or a range"},
        {"{{pick}}", 2, "pool of existing objects"},
        {"{{site:x}}", 6, "takes no argument"},
        {"ok {{agent}} then {{bad!}}", 23, "'!' cannot be part"},
    };
    for (size_t i = 0; i < sizeof(cases) / sizeof(cases[0]); i++) {
        tmpl_t *t = (tmpl_t *)0x1;
        tmpl_error_t err = {0};
        int rc = tmpl_compile(env, cases[i].text, &t, &err);
        if (rc != SQ_EPARSE || err.offset != cases[i].offset || !strstr(err.msg, cases[i].msg))
            fail_msg("'%s': rc %d offset %zu msg '%s' (wanted %zu, '%s')", cases[i].text, rc,
                     err.offset, err.msg, cases[i].offset, cases[i].msg);
        assert_ptr_equal(t, (tmpl_t *)0x1); /* untouched on failure */
    }
    tmpl_t *t;
    assert_int_equal(tmpl_compile(NULL, "{{site}}", &t, NULL), SQ_EPARSE); /* no env, no err */
    tmpl_env_free(env);
}

/* Too small a buffer: render_to reports the length needed; tmpl_render grows once and repeats
 * the same picks; a big enough buffer is reused with no reallocation (same pointer, same
 * capacity) render after render. */
static void test_buffers(void **state)
{
    (void)state;
    tmpl_t *t = compile_ok(NULL, "/v1/sites/{{pick:[north,south,harbor]}}/gw-{{seq:08}}");
    rng_t rng, copy;
    rng_seed(&rng, 99);
    copy = rng;
    tmpl_ctx_t ctx = {.seq = 12, .rng = &rng};
    char small[8];
    size_t need;
    assert_int_equal(tmpl_render_to(t, &ctx, small, sizeof(small), &need), SQ_ELIMIT);
    rng = copy;
    char big[128];
    size_t len;
    assert_int_equal(tmpl_render_to(t, &ctx, big, sizeof(big), &len), 0);
    assert_int_equal(len, need);
    assert_int_equal(strlen(big), len);
    assert_int_equal(tmpl_render_to(t, &ctx, big, len, &len), SQ_ELIMIT); /* no room for NUL */

    rng = copy;
    tmpl_buf_t b;
    tmpl_buf_init(&b);
    char tiny_seed[4] = "abc";
    b.data = strdup(tiny_seed);
    b.cap = 4;
    assert_int_equal(tmpl_render(t, &ctx, &b), 0); /* grows, renders again with the same pick */
    rng_t after_grow = rng;
    rng = copy;
    assert_int_equal(tmpl_render_to(t, &ctx, big, sizeof(big), &len), 0);
    assert_string_equal(b.data, big);
    assert_memory_equal(&rng, &after_grow, sizeof(rng)); /* the rng advanced by one render */
    assert_true(b.cap >= 2 * (b.len + 1));

    char *data = b.data;
    size_t cap = b.cap;
    for (int i = 0; i < 1000; i++) {
        ctx.seq = (uint64_t)i;
        assert_int_equal(tmpl_render(t, &ctx, &b), 0);
        assert_ptr_equal(b.data, data);
        assert_int_equal(b.cap, cap);
    }
    char want[64];
    assert_int_equal(sscanf(b.data, "/v1/sites/%63[a-z]/gw-", want), 1);
    assert_non_null(strstr(b.data, "/gw-00000999"));
    tmpl_buf_close(&b);
    tmpl_free(t);
}

/* A JSON body renders as the author wrote it, values as-is: jansson parses the result and finds
 * the holder string and the integer stamp. */
static void test_json_body(void **state)
{
    (void)state;
    tmpl_t *t = compile_ok(NULL, "{\"holder\":\"agent-{{agent}}\",\"stamp\":{{now_ns}},"
                                 "\"phase\":\"{{phase}}\",\"n\":{{pick:100..100}}}");
    rng_t rng;
    rng_seed(&rng, 3);
    tmpl_ctx_t ctx = {
        .agent = 1234, .phase = "storm", .rng = &rng, .now_ns = INT64_C(1764633603450000123)};
    char *s = render(t, &ctx);
    json_error_t jerr;
    json_t *j = json_loads(s, 0, &jerr);
    if (!j)
        fail_msg("jansson rejected '%s': %s", s, jerr.text);
    assert_string_equal(json_string_value(json_object_get(j, "holder")), "agent-1234");
    assert_int_equal(json_integer_value(json_object_get(j, "stamp")), INT64_C(1764633603450000123));
    assert_string_equal(json_string_value(json_object_get(j, "phase")), "storm");
    assert_int_equal(json_integer_value(json_object_get(j, "n")), 100);
    json_decref(j);
    free(s);
    tmpl_free(t);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_plain_variables), cmocka_unit_test(test_now_from_clock),
        cmocka_unit_test(test_escaping),        cmocka_unit_test(test_pick_list),
        cmocka_unit_test(test_pick_range),      cmocka_unit_test(test_env),
        cmocka_unit_test(test_errors),          cmocka_unit_test(test_buffers),
        cmocka_unit_test(test_json_body),       cmocka_unit_test(test_critical_values_match_scipy),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
