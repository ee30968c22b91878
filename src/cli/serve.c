/* `squall serve`: run the embedded control-plane-like target on loopback until SIGINT or
 * SIGTERM, with faults set by flags (and later through its /admin/ paths). */
#include <arpa/inet.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/server.h"

enum {
    O_LISTEN,
    O_PUBLIC,
    O_DELAY,
    O_FAIL_RATE,
    O_FAIL_STATUS,
    O_RETRY_AFTER,
    O_STALL_AT,
    O_STALL_FOR,
    O_DROP_AT,
    O_MAX_INFLIGHT,
    O_OVER_LIMIT,
    O_BODY_LIMIT,
    O_HISTORY,
    O_STREAM_BUFFER,
    O_SEED
};

static const cli_opt_t serve_opts[] = {
    {"listen", 'l', "ADDR:PORT",
     "address to listen on (default 127.0.0.1:7070; [::1]:P for IPv6; "
     "port 0 = any free port)"},
    {"public", 0, NULL, "allow a non-loopback listen address"},
    {"delay", 0, "SPEC", "added latency: fixed:50ms, uniform:10ms..90ms or exp:20ms"},
    {"fail-rate", 0, "R", "fraction in [0, 1] of /v1/ requests answered with --fail-status"},
    {"fail-status", 0, "CODE", "503 (default) or 429 for injected errors"},
    {"retry-after", 0, "S", "Retry-After seconds on injected errors and 429s (default 1)"},
    {"stall-at", 0, "T", "start of a stall window, from startup (e.g. 10s)"},
    {"stall-for", 0, "S", "length of the stall window: no /v1/ answers during it"},
    {"drop-watches-at", 0, "T", "close every open watch once at T from startup"},
    {"max-inflight", 0, "N", "limit of /v1/ requests in flight (watches excluded)"},
    {"over-limit", 0, "MODE", "above --max-inflight: queue (default) or reject (429)"},
    {"body-limit", 0, "BYTES", "largest request body accepted (default 1048576)"},
    {"history", 0, "N", "events kept for watch resumption (default 10000)"},
    {"stream-buffer", 0, "BYTES", "bytes queued per watch before it is closed (default 1048576)"},
    {"seed", 0, "N", "seed for the random faults (default 1)"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    uv_signal_t sigint, sigterm;
    server_t *server;
    out_t *out;
} serve_ctx_t;

static void on_signal(uv_signal_t *h, int signum)
{
    serve_ctx_t *c = h->data;
    out_info(c->out, "serve: %s, stopping", signum == SIGINT ? "SIGINT" : "SIGTERM");
    if (c->server)
        server_stop(c->server, NULL, NULL);
    c->server = NULL;
    uv_close((uv_handle_t *)&c->sigint, NULL);
    uv_close((uv_handle_t *)&c->sigterm, NULL);
}

/* "127.0.0.1:7070", "[::1]:7070" or ":7070" (loopback IPv4). */
static int parse_listen(const char *s, server_opts_t *o, char *host, size_t hostlen)
{
    const char *colon = strrchr(s, ':');
    char *end;
    if (!colon)
        return SQ_EPARSE;
    long port = strtol(colon + 1, &end, 10);
    if (*end || end == colon + 1 || port < 0 || port > 65535)
        return SQ_EPARSE;
    size_t n = (size_t)(colon - s);
    if (n >= 2 && s[0] == '[' && s[n - 1] == ']') {
        s++;
        n -= 2;
    }
    if (n == 0)
        snprintf(host, hostlen, "127.0.0.1");
    else if (n < hostlen)
        snprintf(host, hostlen, "%.*s", (int)n, s);
    else
        return SQ_EPARSE;
    o->host = host;
    o->port = (int)port;
    return 0;
}

static bool is_loopback(const char *host)
{
    struct in_addr a4;
    struct in6_addr a6;
    if (inet_pton(AF_INET, host, &a4) == 1)
        return (ntohl(a4.s_addr) >> 24) == 127;
    return inet_pton(AF_INET6, host, &a6) == 1 && IN6_IS_ADDR_LOOPBACK(&a6);
}

static int num(const char *v, double lo, double hi, double *out)
{
    char *end;
    double d = strtod(v, &end);
    if (end == v || *end || !(d >= lo && d <= hi))
        return SQ_EPARSE;
    *out = d;
    return 0;
}

/* Applies one option; returns 0 or a usage error already printed. */
static int apply_opt(const cli_cmd_t *cmd, int k, const char *v, server_opts_t *t, char *host,
                     bool *pub, out_t *o)
{
    char err[200];
    double d = 0;
    server_faults_t *f = &t->faults;
    int rc = 0;
    switch (k) {
    case O_LISTEN:
        rc = parse_listen(v, t, host, 64);
        break;
    case O_PUBLIC:
        *pub = true;
        break;
    case O_DELAY:
        if (server_delay_parse(f, v, err, sizeof(err)) < 0)
            return cli_usage_error(cmd, o, "--%s", err);
        break;
    case O_FAIL_RATE:
        rc = num(v, 0, 1, &f->fail_rate);
        break;
    case O_FAIL_STATUS:
        rc = num(v, 429, 503, &d);
        f->fail_status = (int)d;
        rc = rc < 0 || (d != 429 && d != 503) ? SQ_EPARSE : 0;
        break;
    case O_RETRY_AFTER:
        rc = num(v, 0, 86400, &d);
        f->retry_after_s = (int)d;
        break;
    case O_STALL_AT:
        rc = server_duration_parse(v, &f->stall_at_ns);
        break;
    case O_STALL_FOR:
        rc = server_duration_parse(v, &f->stall_for_ns);
        break;
    case O_DROP_AT:
        rc = server_duration_parse(v, &f->drop_at_ns);
        break;
    case O_MAX_INFLIGHT:
        rc = num(v, 0, 1000000, &d);
        f->max_inflight = (int)d;
        break;
    case O_OVER_LIMIT:
        f->over_limit_reject = strcmp(v, "reject") == 0;
        rc = f->over_limit_reject || strcmp(v, "queue") == 0 ? 0 : SQ_EPARSE;
        break;
    case O_BODY_LIMIT:
        rc = num(v, 0, 1e10, &d);
        t->body_limit = (long long)d;
        break;
    case O_HISTORY:
        rc = num(v, 1, 1e7, &d);
        t->history = (int)d;
        break;
    case O_STREAM_BUFFER:
        rc = num(v, 256, 1e10, &d);
        t->stream_buffer = (long long)d;
        break;
    case O_SEED:
        rc = num(v, 0, 1.8e19, &d);
        t->seed = (uint64_t)d;
        break;
    }
    if (rc < 0)
        return cli_usage_error(cmd, o, "--%s: '%s' is not a valid value (see squall help serve)",
                               serve_opts[k].name, v);
    return 0;
}

static int run(server_opts_t *sopts, out_t *o)
{
    uv_loop_t loop;
    serve_ctx_t c = {.out = o};
    if (uv_loop_init(&loop) < 0)
        return SQ_EXIT_FAILURE;
    signal(SIGPIPE, SIG_IGN);
    if (server_start(&loop, sopts, o, &c.server) < 0) {
        uv_loop_close(&loop);
        return SQ_EXIT_FAILURE;
    }
    uv_signal_init(&loop, &c.sigint);
    uv_signal_init(&loop, &c.sigterm);
    c.sigint.data = c.sigterm.data = &c;
    uv_signal_start(&c.sigint, on_signal, SIGINT);
    uv_signal_start(&c.sigterm, on_signal, SIGTERM);
    bool v6 = strchr(sopts->host, ':') != NULL;
    out_info(o, "squall serve: listening on http://%s%s%s:%d (pid %d)", v6 ? "[" : "", sopts->host,
             v6 ? "]" : "", server_port(c.server), (int)getpid());
    uv_run(&loop, UV_RUN_DEFAULT);
    int rc = uv_loop_close(&loop);
    if (rc != 0) {
        out_error(o, "serve: the event loop still had open handles at exit (%s)", uv_strerror(rc));
        return SQ_EXIT_FAILURE;
    }
    out_info(o, "serve: stopped cleanly");
    return SQ_EXIT_OK;
}

static int serve_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    server_opts_t sopts;
    char host[64];
    bool pub = false;
    cli_args_t a;
    const char *v;
    int k;
    server_opts_init(&sopts);
    cli_args_init(&a, cmd, argc, argv);
    while ((k = cli_next(&a, o, &v)) != CLI_END) {
        if (k == CLI_ERROR)
            return SQ_EXIT_USAGE;
        if (k == CLI_HELP) {
            cli_print_help(cmd, o);
            return SQ_EXIT_OK;
        }
        if (k == CLI_POSITIONAL)
            return cli_usage_error(cmd, o, "unexpected argument '%s'", v);
        if (apply_opt(cmd, k, v, &sopts, host, &pub, o) != 0)
            return SQ_EXIT_USAGE;
    }
    if (sopts.faults.stall_at_ns >= 0 && sopts.faults.stall_for_ns <= 0)
        return cli_usage_error(cmd, o, "--stall-at needs --stall-for (its length)");
    if (!is_loopback(sopts.host)) {
        if (!pub)
            return cli_usage_error(
                cmd, o, "'%s' is not a loopback address; add --public to listen there", sopts.host);
        out_warn(o,
                 "serve: listening on a non-loopback address (%s): anyone who can reach it "
                 "can read and write the store and its faults",
                 sopts.host);
    }
    return run(&sopts, o);
}

const cli_cmd_t cli_cmd_serve = {
    .name = "serve",
    .summary = "run the embedded control-plane-like target (store, watches, fault injection)",
    .usage = "[--listen ADDR:PORT] [fault options]...",
    .description =
        "Serves a versioned JSON object store under /v1/ (GET, list with ?limit= and\n"
        "?continue=, PUT/POST, PATCH as JSON merge patch, DELETE, ?version=V for\n"
        "compare-and-swap), watch streams (?watch=1&since=V, NDJSON), GET /stats and\n"
        "GET /metrics, and fault injection set by the options below or at run time with\n"
        "POST /admin/faults (a JSON body) and POST /admin/drop-watches. Stops on SIGINT or\n"
        "SIGTERM.",
    .opts = serve_opts,
    .main = serve_main,
};
