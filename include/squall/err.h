/* squall's own error codes.
 *
 * Functions return 0 on success or one of these negative codes. The list below is the only
 * place a code is defined: it yields the enum and the text sq_strerror() returns. Detail (which
 * file, which line, which value) never lives in the code itself; it goes to the caller's out_t
 * or error buffer. */
#ifndef SQUALL_ERR_H
#define SQUALL_ERR_H

#define SQ_ERR_MAP(X)                                                                             \
    X(NOMEM, "out of memory")                                                                      \
    X(IO, "input/output error")                                                                    \
    X(PARSE, "malformed input")                                                                    \
    X(INVAL, "invalid argument")                                                                   \
    X(RANGE, "value out of range")                                                                 \
    X(VERSION, "unsupported format version")                                                       \
    X(NOTFOUND, "not found")                                                                       \
    X(EXISTS, "already exists")                                                                    \
    X(MISMATCH, "incompatible inputs")                                                             \
    X(UNREACHABLE, "target unreachable")                                                           \
    X(LIMIT, "limit reached")                                                                      \
    X(LIBCURL, "libcurl failed")                                                                   \
    X(LIBUV, "libuv failed")                                                                       \
    X(STOPPED, "already stopped")                                                                  \
    X(INTERNAL, "internal error")

enum sq_err {
    SQ_OK = 0,
#define SQ_ERR_ENUM(name, text) SQ_E##name,
    SQ__ERR_FIRST = -1000,
    SQ_ERR_MAP(SQ_ERR_ENUM)
#undef SQ_ERR_ENUM
};

/* The text for a code from the list above; "success" for 0, "unknown error" otherwise. */
const char *sq_strerror(int code);

/* Process exit codes, documented in README.md ("Exit codes"). */
#define SQ_EXIT_MAP(X)                                                                            \
    X(OK, 0, "PASS: the planned load was offered and every objective held")                        \
    X(OBJECTIVES, 1, "FAIL: an objective did not hold")                                            \
    X(USAGE, 2, "usage or plan error: nothing was sent")                                           \
    X(BRAKE, 3, "stopped early by a brake")                                                        \
    X(UNREACHABLE, 4, "target unreachable")                                                        \
    X(INTERRUPTED, 5, "interrupted by a signal")                                                   \
    X(FAILURE, 6, "internal or input/output failure (e.g. results could not be written)")          \
    X(INCONCLUSIVE, 7,                                                                             \
      "INCONCLUSIVE: the evidence cannot support a pass: squall could not offer the planned "     \
      "load, a percentile had too few samples, or the run stopped early (the summary says which)")

enum sq_exit {
#define SQ_EXIT_ENUM(name, value, text) SQ_EXIT_##name = value,
    SQ_EXIT_MAP(SQ_EXIT_ENUM)
#undef SQ_EXIT_ENUM
};

#endif
