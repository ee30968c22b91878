/* libFuzzer target for templates (src/tmpl/): the input is a template text, compiled against a
 * named list and rendered twice from the same rng state; both renders must agree and fit what
 * tmpl_render_to said (tmpl.h). */
#include <string.h>

#include "fuzz_util.h"
#include "squall/err.h"
#include "squall/rng.h"
#include "squall/tmpl.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static tmpl_env_t *env;
    static const char *const sites[] = {"north", "south", "harbor"};
    if (!env && (tmpl_env_new(&env) || tmpl_env_add_list(env, "site", sites, 3)))
        abort();
    char *text = malloc(size + 1);
    if (!text)
        abort();
    memcpy(text, data, size);
    text[size] = '\0';
    tmpl_t *t = NULL;
    tmpl_error_t err;
    if (tmpl_compile(env, text, &t, &err) == 0) {
        rng_t r1, r2;
        rng_seed(&r1, size);
        rng_seed(&r2, size);
        tmpl_ctx_t c1 = {.agent = 7, .seq = 3, .phase = "steady", .rng = &r1, .now_ns = 1};
        tmpl_ctx_t c2 = c1;
        c2.rng = &r2;
        tmpl_buf_t b;
        tmpl_buf_init(&b);
        char small[64];
        size_t len = 0;
        int rc1 = tmpl_render(t, &c1, &b);
        int rc2 = tmpl_render_to(t, &c2, small, sizeof small, &len);
        if (rc1 == 0 && rc2 == 0 && (len != b.len || memcmp(small, b.data, len) != 0))
            abort();
        if (rc1 == 0 && rc2 == SQ_ELIMIT && len != b.len)
            abort();
        tmpl_buf_close(&b);
        tmpl_free(t);
    } else if (err.offset > size) {
        abort();
    }
    free(text);
    return 0;
}
