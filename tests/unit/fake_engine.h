/* The fake engine's controls and its log of requests (see fake_engine.c). */
#ifndef SQUALL_FAKE_ENGINE_H
#define SQUALL_FAKE_ENGINE_H

#include <stdbool.h>
#include <stdint.h>

#include "squall/engine.h"

#define FAKE_LOG 20000

/* How the fake answers one request. */
typedef struct {
    long status;      /* 200 unless set */
    bool refused;     /* no answer: connect-refused (three in a row: unreachable) */
    const char *body; /* kept when the request asks for its body ("" unless set) */
    /* A stream that never ends by itself: body is fed to on_data, then the request times out
     * after its timeout_ms (status 200, outcome timeout), as libcurl ends a held stream. */
    bool stream;
} fake_answer_t;

typedef struct {
    char method[8];
    char path[160];
    int64_t intended_ns, submitted_ns;
    int64_t timeout_ms; /* the request's own timeout (0 = the engine's) */
    int engine; /* which engine (1 = the first made) */
} fake_req_t;

typedef struct {
    void (*answer)(const char *method, const char *path, fake_answer_t *a);
    int64_t delay_ns; /* every answer comes this long after its submission */
    fake_req_t log[FAKE_LOG];
    int n_log, completed, engines;
    int connections; /* the last eng_set_connections */
    int held; /* requests submitted to be held (eng_req_t.hold_until_ns) */
    char headers[256]; /* the first header an engine was made with */
} fake_t;

extern fake_t fake;

#endif
