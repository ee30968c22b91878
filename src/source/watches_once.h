/* Watch streams opened one at a time for another source (a replay's recorded watches): each is
 * opened when asked on the watches' own engine, framed and recorded per class like any watch
 * (events, bytes, open latency; the phase's "watches" section), and closed by squall after its
 * hold time (libcurl's timeout of the request). It is never reopened: an early end by the
 * server is counted as a drop, a refusal under its outcome. */
#ifndef SQUALL_SRC_WATCHES_ONCE_H
#define SQUALL_SRC_WATCHES_ONCE_H

#include "squall/source.h"

typedef struct watches_set watches_t;

/* For phase ctx->phase, at most `streams` open at once (capped at 1,024 connections; more wait in
 * the engine's queue, which their open latency shows); checks the open-files limit as a watch
 * phase does. No I/O. */
int watches_once_new(const src_ctx_t *ctx, int streams, watches_t **out);
/* The phase begins: makes the engine. */
int watches_once_start(watches_t *ws);
/* Opens a stream of watch class cls on path now (intended start intended_ns), closed after
 * hold_ns (at least 1 ms). SQ_ESTOPPED after watches_once_stop. */
int watches_once_open(watches_t *ws, int cls, const char *path, int64_t intended_ns,
                      int64_t hold_ns);
/* Streams open now (0 for NULL). */
int watches_once_open_now(const watches_t *ws);
/* Closes every stream and puts the phase's figures in the "watches" section. NULL is allowed. */
void watches_once_stop(watches_t *ws);
void watches_once_free(watches_t *ws);

#endif
