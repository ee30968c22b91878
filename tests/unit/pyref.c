/* See pyref.h. */
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <cmocka.h>

#include "pyref.h"

char *pyref_command(const char *command, const char *input)
{
    char path[] = "/tmp/squall-pyref-XXXXXX";
    int fd = mkstemp(path);
    assert_true(fd >= 0);
    assert_int_equal(write(fd, input, strlen(input)), (ssize_t)strlen(input));
    close(fd);
    char cmd[1024];
    snprintf(cmd, sizeof cmd, "%s < %s", command, path);
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    static char out[1 << 16];
    size_t n = fread(out, 1, sizeof out - 1, p);
    out[n] = '\0';
    assert_int_equal(pclose(p), 0);
    unlink(path);
    return out;
}

char *pyref_run(const char *script, const char *input)
{
    char cmd[512];
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 %s/tests/unit/%s", SRCDIR, script);
    return pyref_command(cmd, input);
}
