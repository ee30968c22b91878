/* What the fuzz targets share: the input as a file (a memfd, read through /proc/self/fd like any
 * path) and a quiet output object. */
#ifndef FUZZ_UTIL_H
#define FUZZ_UTIL_H

#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/mman.h>
#include <unistd.h>

/* Replaces the contents of this target's one memfd with data and returns its path. */
static inline const char *fuzz_file(const uint8_t *data, size_t size)
{
    static int fd = -1;
    static char path[64];
    if (fd < 0) {
        if ((fd = memfd_create("fuzz-input", MFD_CLOEXEC)) < 0)
            abort();
        snprintf(path, sizeof path, "/proc/self/fd/%d", fd);
    }
    if (ftruncate(fd, 0) || (size && pwrite(fd, data, size, 0) != (ssize_t)size))
        abort();
    return path;
}

#endif
