/* The one atomic write-then-rename of squall's output files (see squall/file.h). */
#include "squall/file.h"

#include <sys/resource.h>
#include <errno.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "squall/err.h"

/* Fills the open temporary file, makes it durable and closes it. Returns 0, or SQ_EIO with the
 * reason in *why; f is closed either way. */
static int fill_and_close(FILE *f, int (*fill)(FILE *f, void *ctx), void *ctx, const char **why)
{
    errno = 0;
    int rc = fill(f, ctx);
    if (rc == 0 && ferror(f))
        rc = SQ_EIO;
    if (rc) {
        /* A stream error carries its errno; any other failure is the fill's own code. */
        *why = ferror(f) && errno ? strerror(errno) : sq_strerror(rc);
        fclose(f);
        return SQ_EIO;
    }
    int fd = fileno(f);
    if (fflush(f) != 0 || fsync(fd) != 0 || fchmod(fd, 0644) != 0) {
        *why = strerror(errno);
        fclose(f);
        return SQ_EIO;
    }
    if (fclose(f) != 0) {
        *why = strerror(errno);
        return SQ_EIO;
    }
    return 0;
}

int file_write_atomic(const char *path, int (*fill)(FILE *f, void *ctx), void *ctx, out_t *o)
{
    size_t n = strlen(path) + sizeof ".tmp-XXXXXX";
    char *tmp = malloc(n);
    if (!tmp) {
        out_error(o, "cannot write %s: %s", path, strerror(ENOMEM));
        return SQ_EIO;
    }
    snprintf(tmp, n, "%s.tmp-XXXXXX", path);
    const char *why = NULL;
    int rc = SQ_EIO;
    int fd = mkstemp(tmp);
    FILE *f = fd >= 0 ? fdopen(fd, "w") : NULL;
    if (!f) {
        why = strerror(errno);
        if (fd >= 0)
            close(fd);
    } else if (fill_and_close(f, fill, ctx, &why) == 0) {
        rc = rename(tmp, path) == 0 ? 0 : SQ_EIO;
        if (rc)
            why = strerror(errno);
    }
    if (rc) {
        if (fd >= 0)
            unlink(tmp);
        out_error(o, "cannot write %s: %s", path, why);
    }
    free(tmp);
    return rc;
}

uint64_t file_raise_limit(void)
{
    struct rlimit rl;
    if (getrlimit(RLIMIT_NOFILE, &rl) != 0)
        return 0;
    if (rl.rlim_cur < rl.rlim_max) {
        rl.rlim_cur = rl.rlim_max;
        setrlimit(RLIMIT_NOFILE, &rl);
        getrlimit(RLIMIT_NOFILE, &rl);
    }
    return rl.rlim_cur == RLIM_INFINITY ? UINT64_MAX : (uint64_t)rl.rlim_cur;
}

uint64_t file_system_free_parse(const char *text)
{
    unsigned long long alloc, unused, max;
    if (!text || sscanf(text, "%llu %llu %llu", &alloc, &unused, &max) != 3)
        return 0;
    uint64_t in_use = alloc > unused ? (uint64_t)(alloc - unused) : 0;
    return max > in_use ? (uint64_t)max - in_use : 0;
}

uint64_t file_system_free(void)
{
    char buf[128];
    FILE *f = fopen("/proc/sys/fs/file-nr", "re");
    size_t n = f ? fread(buf, 1, sizeof buf - 1, f) : 0;
    if (f)
        fclose(f);
    buf[n] = '\0';
    uint64_t left = n ? file_system_free_parse(buf) : 0;
    return left ? left : UINT64_MAX;
}
