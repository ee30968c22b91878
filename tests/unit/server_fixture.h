/* The embedded server on a thread of its own for the server unit tests (test_server*.c), and a
 * small libcurl client to talk to it.
 *
 * Concepts. A *fixture* is one server on its own libuv loop and thread; a test makes one with
 * fixture_new, sets its options, starts it and stops it. A *leftover* is the fixture of a test
 * that failed: cmocka leaves a test by longjmp at a failed assertion, past its fixture_stop, so
 * the fixture lives on the heap (never in the test's stack frame, which the next test reuses)
 * and the next fixture_new, or fixture_end_all at the end of main, stops it. */
#ifndef SQUALL_TEST_SERVER_FIXTURE_H
#define SQUALL_TEST_SERVER_FIXTURE_H

#include <pthread.h>
#include <stdatomic.h>

#include <curl/curl.h>
#include <jansson.h>

#include "squall/server.h"

typedef struct {
    server_opts_t opts;
    pthread_t thread;
    uv_loop_t loop;
    uv_async_t stop;
    server_t *sv;
    atomic_int port; /* 0 until listening, -1 on failure */
    int loop_close_rc;
    out_t *out;
} fixture_t;

/* A fixture with default options on any free port (stops a leftover first). */
fixture_t *fixture_new(void);
void fixture_start(fixture_t *s);
/* Stops the server, joins its thread, checks that every libuv handle was closed, frees s. */
void fixture_stop(fixture_t *s);
/* Stops a leftover of a failed test, if any (end of main). */
void fixture_end_all(void);

/* One request; returns the status, the body in *out (caller frees; may be NULL), or minus
 * libcurl's error code (-28: timed out, with what arrived). No assertion: safe off the test's
 * thread. */
long http_try(CURL *c, int port, const char *method, const char *path, const char *body, char **out,
              long timeout_ms);
/* The same, failing the test on any transfer error but a timeout; timeout_ms bounds watches. */
long http_t(CURL *c, int port, const char *method, const char *path, const char *body, char **out,
            long timeout_ms);
long http(CURL *c, int port, const char *method, const char *path, const char *body, char **out);
/* The answer as JSON; fails the test unless its status is `want`. */
json_t *http_json(CURL *c, int port, const char *method, const char *path, const char *body,
                  long want);
json_int_t jint(const json_t *j, const char *k);

#endif
