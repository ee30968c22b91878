/* libFuzzer target for the plan loader (src/plan/): the input is a plan file, loaded as `squall
 * check` loads one. Errors are expected; a crash, a leak or a timeout is a finding. */
#include "fuzz_util.h"
#include "squall/out.h"
#include "squall/plan.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_file(data, size);
    out_t *o = out_new_capture();
    if (!o)
        abort();
    plan_t *p = NULL;
    int rc = plan_load(path, NULL, 0, &p, o);
    if ((rc == 0) != (p != NULL))
        abort(); /* plan.h: *out is set exactly on success */
    plan_free(p);
    out_free(o);
    return 0;
}
