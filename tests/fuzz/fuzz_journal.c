/* libFuzzer target for the journal reader (src/journal/journal.c): the input is a journal file.
 * Every path it reports alive must be a request path (value_path_problem): a journal is a file
 * anyone may edit, and its paths become DELETE requests. */
#include "fuzz_util.h"
#include "squall/journal.h"
#include "squall/value.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_file(data, size);
    out_t *o = out_new_capture();
    if (!o)
        abort();
    journal_alive_t a = {0};
    if (journal_read(path, &a, o) == 0) {
        if (!a.target)
            abort();
        for (size_t i = 0; i < a.n; i++)
            if (value_path_problem(a.paths[i]))
                abort();
    }
    journal_alive_close(&a);
    out_free(o);
    return 0;
}
