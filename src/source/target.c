/* The plan's target as engine settings: the one place where URL, HTTP version, connections,
 * streams, headers, TLS, token and timeout become what every engine of squall is built from. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "squall/err.h"
#include "squall/source.h"

/* The bearer token, from a file or the environment; never printed. *tok is malloc'd or NULL. */
static int read_token(const plan_target_t *t, out_t *o, char **tok)
{
    *tok = NULL;
    if (t->token.env) {
        const char *v = getenv(t->token.env);
        if (!v || !v[0]) {
            out_error(o, "target.token.env: environment variable %s is not set", t->token.env);
            return SQ_EINVAL;
        }
        *tok = strdup(v);
    } else if (t->token.file) {
        FILE *f = fopen(t->token.file, "r");
        char buf[8192];
        size_t n = f ? fread(buf, 1, sizeof buf - 1, f) : 0;
        if (f)
            fclose(f);
        if (!f || n == 0) {
            out_error(o, "target.token.file: cannot read a token from %s", t->token.file);
            return SQ_EIO;
        }
        while (n > 0 && (buf[n - 1] == '\n' || buf[n - 1] == '\r' || buf[n - 1] == ' '))
            n--;
        buf[n] = '\0';
        *tok = strdup(buf);
        memset(buf, 0, sizeof buf);
    } else {
        return 0;
    }
    return *tok ? 0 : SQ_ENOMEM;
}

int src_headers_new(const plan_kv_t *kv, size_t n, const char ***out, size_t *n_out)
{
    *n_out = 0;
    if (!(*out = calloc(n ? n : 1, sizeof(**out))))
        return SQ_ENOMEM;
    for (size_t i = 0; i < n; i++) {
        size_t len = strlen(kv[i].name) + strlen(kv[i].value) + 3;
        char *h = malloc(len);
        if (!h)
            return SQ_ENOMEM;
        snprintf(h, len, "%s: %s", kv[i].name, kv[i].value);
        (*out)[(*n_out)++] = h;
    }
    return 0;
}

void src_headers_free(const char **h, size_t n)
{
    for (size_t i = 0; h && i < n; i++)
        free((char *)h[i]);
    free(h);
}

/* target.headers, sent by every engine made from these settings. */
static int headers_init(src_target_t *t, const plan_target_t *pt)
{
    int rc = src_headers_new(pt->headers, pt->n_headers, &t->headers, &t->eng.n_headers);
    t->eng.headers = t->headers;
    return rc;
}

int src_target_init(src_target_t *t, const plan_t *plan, bool insecure, out_t *o)
{
    const plan_target_t *pt = &plan->target;
    memset(t, 0, sizeof(*t));
    t->eng = (eng_config_t){
        .base_url = pt->url,
        .http = pt->http == PLAN_HTTP_2 ? ENG_HTTP_2 : ENG_HTTP_1_1,
        .connections = pt->connections,
        .streams = pt->streams,
        .timeout_ms = pt->timeout_ns / 1000000,
        .max_body = pt->max_body,
        .ca_file = pt->tls.ca,
        .cert_file = pt->tls.cert,
        .key_file = pt->tls.key,
        .insecure = pt->tls.insecure || insecure,
    };
    int rc = headers_init(t, pt);
    if (rc == 0)
        rc = read_token(pt, o, &t->token);
    if (rc) {
        src_target_close(t);
        return rc;
    }
    t->eng.bearer_token = t->token;
    if (t->eng.insecure)
        out_warn(o, "TLS certificate verification is OFF: anyone on the path can read and "
                    "change this traffic");
    return 0;
}

void src_target_close(src_target_t *t)
{
    if (t->token) {
        memset(t->token, 0, strlen(t->token));
        free(t->token);
    }
    src_headers_free(t->headers, t->eng.n_headers);
    memset(t, 0, sizeof(*t));
}
