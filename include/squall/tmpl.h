/* Templates: request paths and bodies compiled once, rendered per request without allocation.
 *
 * A template is text with references in double braces, e.g.
 *     /v1/sites/{{site}}/gateways/gw-{{seq:05}}
 *     {"holder":"{{agent}}","stamp":{{now_ns}}}
 * Compiling splits it into segments (literal runs and variable references); rendering writes
 * the segments into a caller's buffer. Values are written as they are, never quoted or escaped:
 * in a JSON body the plan author writes the quotes.
 *
 * References (spaces just inside the braces are allowed: `{{ site }}`):
 *   {{agent}}        the agent or closed-loop client index (tmpl_ctx_t.agent)
 *   {{seq}}          the request's sequence number within its class (tmpl_ctx_t.seq, kept by the
 *                    caller per class, from 0), so names like gw-{{seq}} come out contiguous
 *   {{agent:06}}     either of the two zero-padded to a width (1..20): `:0` then digits
 *   {{now_ns}}       CLOCK_REALTIME in ns; {{now_ms}} in ms. One clock reading per render, so
 *                    every such reference in a template shows the same instant
 *   {{phase}}        the phase name (tmpl_ctx_t.phase)
 *   {{pick:[a,b,c]}} one item, uniformly, per reference per render (items trimmed of spaces;
 *                    an item cannot contain ',' ']' or "}}")
 *   {{pick:1..500}}  an integer in the inclusive range, uniformly (|bounds| <= 1e18)
 *   {{NAME}}         a list registered under NAME (e.g. the plan's vars): one item, uniformly,
 *                    per reference per render
 *   {{NAME:ARG}}     a resolver registered under NAME, given ARG (may be empty: {{NAME}}); a
 *                    resolver named "pick" serves {{pick}} and {{pick:ARG}} when ARG is neither
 *                    a [list] nor a range (e.g. an existing object from a pool)
 * Escaping: `{{{{` writes a literal `{{`. Nothing else is special; a lone `}}` is literal.
 * Names: a letter or '_', then letters, digits, '_' or '-'. Built-in names cannot be registered.
 *
 * Errors: compile failures fill a tmpl_error_t with the byte offset in the template text (0 is
 * the first byte) and a message, so the plan module can report FILE:LINE:COL. */
#ifndef SQUALL_TMPL_H
#define SQUALL_TMPL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/rng.h"

typedef struct tmpl_env tmpl_env_t;
typedef struct tmpl tmpl_t;

typedef struct {
    size_t offset; /* byte offset of the problem in the template text */
    char msg[160];
} tmpl_error_t;

/* Per-render inputs; a small value struct the caller fills for each request. */
typedef struct {
    int64_t agent;     /* agent or client index */
    uint64_t seq;      /* sequence number within the request class */
    const char *phase; /* NULL renders as "" */
    rng_t *rng;        /* required when the template picks (tmpl_uses_rng) */
    int64_t now_ns;    /* 0: read CLOCK_REALTIME once per render; else this instant */
} tmpl_ctx_t;

/* A resolver writes its value for `arg` into dst (at most cap bytes) and sets *len to the full
 * length (dst is NULL when cap is 0); when *len > cap the renderer grows the buffer and calls it
 * again, so a resolver runs once per reference per render, twice when the buffer grew. It must not
 * allocate on the hot path. Returns 0 or a negative code (the render then fails with it). */
typedef int (*tmpl_resolve_fn)(void *user, const char *arg, size_t arg_len, const tmpl_ctx_t *ctx,
                               char *dst, size_t cap, size_t *len);

/* A registry of named lists and resolvers. It must outlive every template compiled against it;
 * entries can be added at any time (templates already compiled keep theirs). */
int tmpl_env_new(tmpl_env_t **out);
void tmpl_env_free(tmpl_env_t *env);
/* Copies name and the n >= 1 items. SQ_EINVAL for a bad name or no items, SQ_EEXISTS when the
 * name is built in or already registered, SQ_ENOMEM. */
int tmpl_env_add_list(tmpl_env_t *env, const char *name, const char *const *items, size_t n);
int tmpl_env_add_resolver(tmpl_env_t *env, const char *name, tmpl_resolve_fn fn, void *user);

/* Compiles text (copied). env may be NULL when no named list or resolver is used. On failure
 * returns SQ_EPARSE (err filled; err may be NULL) or SQ_ENOMEM, and *out is untouched. */
int tmpl_compile(const tmpl_env_t *env, const char *text, tmpl_t **out, tmpl_error_t *err);
void tmpl_free(tmpl_t *t);
/* True when the template has no references: render it once. */
bool tmpl_is_constant(const tmpl_t *t);
/* True when rendering needs ctx->rng (a pick or a named list). */
bool tmpl_uses_rng(const tmpl_t *t);
/* The template's source text. */
const char *tmpl_text(const tmpl_t *t);

/* Renders into dst, which holds cap bytes. Always sets *len to the rendered length (without the
 * terminating NUL). Returns 0 when len + 1 <= cap (dst then holds the NUL-terminated text),
 * SQ_ELIMIT when dst is too small (its contents are then unspecified), SQ_EINVAL when the
 * template picks and ctx->rng is NULL, or a resolver's code. Never allocates. */
int tmpl_render_to(const tmpl_t *t, const tmpl_ctx_t *ctx, char *dst, size_t cap, size_t *len);

/* A caller-owned growable buffer, reused across renders. */
typedef struct {
    char *data;
    size_t len, cap;
} tmpl_buf_t;

void tmpl_buf_init(tmpl_buf_t *b);
void tmpl_buf_close(tmpl_buf_t *b);
/* Renders into b: no allocation when b is big enough; otherwise b grows (to at least twice the
 * length needed) and the template is rendered again, with the rng state restored first so the
 * picks are the same. Returns 0, SQ_ENOMEM, or tmpl_render_to's codes. */
int tmpl_render(const tmpl_t *t, const tmpl_ctx_t *ctx, tmpl_buf_t *b);

#endif
