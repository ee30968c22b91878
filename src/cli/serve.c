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
#include "squall/file.h"
#include "squall/server.h"
#include "squall/value.h"

enum {
    O_LISTEN,
    O_PUBLIC,
    O_DELAY,
    O_FAIL_RATE,
    O_FAIL_STATUS,
    O_RETRY_AFTER,
    O_STALL_AT,
    O_STALL_FOR,
    O_FAIL_AT,
    O_FAIL_FOR,
    O_DROP_AT,
    O_MAX_INFLIGHT,
    O_OVER_LIMIT,
    O_BODY_LIMIT,
    O_HISTORY,
    O_STREAM_BUFFER,
    O_IDLE_TIMEOUT,
    O_SEED,
    O_ACCESS_LOG,
    O_ACCESS_LOG_FORMAT
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
    {"fail-at", 0, "T",
     "start of an error window, from startup: every /v1/ answer is --fail-status"},
    {"fail-for", 0, "S", "length of the error window"},
    {"drop-watches-at", 0, "T", "close every open watch once at T from startup"},
    {"max-inflight", 0, "N", "limit of /v1/ requests in flight (watches excluded)"},
    {"over-limit", 0, "MODE", "above --max-inflight: queue (default) or reject (429)"},
    {"body-limit", 0, "BYTES", "largest request body accepted (default 1048576)"},
    {"history", 0, "N", "events kept for watch resumption (default 10000)"},
    {"stream-buffer", 0, "BYTES", "bytes queued per watch before it is closed (default 1048576)"},
    {"idle-timeout", 0, "S", "close a connection idle this many seconds (default 60; watch streams "
                             "waiting for events are not idle)"},
    {"seed", 0, "N", "seed for the random faults (default 1)"},
    {"access-log", 0, "FILE", "append one line per request to FILE (as nginx logs: at its end)"},
    {"access-log-format", 0, "FMT", "common (Common Log Format, default) or ndjson"},
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
    int rc = value_parse_listen(s, host, hostlen, &o->port);
    if (rc == 0)
        o->host = host;
    return rc;
}

/* --stall-at, --stall-for, --fail-at, --fail-for, --drop-watches-at: durations as plans write
 * them (squall/value.h). */
static int read_duration(int k, const char *v, server_faults_t *f, const char **need)
{
    int64_t *slot = k == O_STALL_AT    ? &f->stall_at_ns
                    : k == O_STALL_FOR ? &f->stall_for_ns
                    : k == O_FAIL_AT   ? &f->fail_at_ns
                    : k == O_FAIL_FOR  ? &f->fail_for_ns
                                       : &f->drop_at_ns;
    int rc = server_duration_parse(v, slot);
    *need = rc == SQ_ERANGE ? SERVER_DURATION_RANGE : VALUE_DURATION_EXPECTS;
    return rc;
}

/* The options that take a whole number: their ranges, and where the value goes. */
static const struct {
    int opt;
    int64_t lo, hi;
    const char *need;
} counts[] = {
    {O_FAIL_STATUS, 429, 503, "503 or 429"},
    {O_RETRY_AFTER, 0, 86400, "whole seconds in 0..86400"},
    {O_MAX_INFLIGHT, 0, 1000000, "a whole number in 0..1000000"},
    {O_BODY_LIMIT, 0, INT64_C(10000000000), "a number of bytes in 0..10000000000"},
    {O_HISTORY, 1, 10000000, "a whole number in 1..10000000"},
    {O_STREAM_BUFFER, 256, INT64_C(10000000000), "a number of bytes in 256..10000000000"},
    {O_IDLE_TIMEOUT, 1, 86400, "whole seconds in 1..86400"},
    {O_SEED, 0, INT64_MAX, "a whole number in 0..9223372036854775807"},
};

static int read_count(int k, const char *v, server_opts_t *t, const char **need)
{
    size_t i = 0;
    while (i < sizeof counts / sizeof counts[0] && counts[i].opt != k)
        i++;
    *need = "a value it knows"; /* not reached: every option is read by read_opt or listed here */
    if (i == sizeof counts / sizeof counts[0])
        return SQ_EINVAL;
    int64_t n;
    *need = counts[i].need;
    if (value_parse_int(v, counts[i].lo, counts[i].hi, &n) ||
        (k == O_FAIL_STATUS && n != 429 && n != 503))
        return SQ_EPARSE;
    switch (k) {
    case O_FAIL_STATUS:
        t->faults.fail_status = (int)n;
        break;
    case O_RETRY_AFTER:
        t->faults.retry_after_s = (int)n;
        break;
    case O_MAX_INFLIGHT:
        t->faults.max_inflight = (int)n;
        break;
    case O_BODY_LIMIT:
        t->body_limit = n;
        break;
    case O_HISTORY:
        t->history = (int)n;
        break;
    case O_STREAM_BUFFER:
        t->stream_buffer = n;
        break;
    case O_IDLE_TIMEOUT:
        t->idle_timeout_s = (int)n;
        break;
    default:
        t->seed = (uint64_t)n;
    }
    return 0;
}

/* Reads the value of option k (not --public) into opts. Returns 0, or SQ_EPARSE with what the
 * option needs in *need, for the one-line usage error. */
static int read_opt(int k, const char *v, server_opts_t *t, char *host, const char **need)
{
    server_faults_t *f = &t->faults;
    switch (k) {
    case O_LISTEN:
        *need = "ADDR:PORT (127.0.0.1:7070, [::1]:7070 or :7070)";
        return parse_listen(v, t, host, 64);
    case O_DELAY:
        *need = SERVER_DELAY_EXPECTS;
        return server_delay_parse(f, v);
    case O_FAIL_RATE:
        *need = "a number in [0, 1]";
        return value_parse_number(v, 0, 1, &f->fail_rate);
    case O_STALL_AT:
    case O_STALL_FOR:
    case O_FAIL_AT:
    case O_FAIL_FOR:
    case O_DROP_AT:
        return read_duration(k, v, f, need);
    case O_ACCESS_LOG:
        t->access_log = v;
        return 0;
    case O_ACCESS_LOG_FORMAT:
        *need = "common or ndjson";
        if (strcmp(v, "common") != 0 && strcmp(v, "ndjson") != 0)
            return SQ_EPARSE;
        t->access_log_ndjson = strcmp(v, "ndjson") == 0;
        return 0;
    case O_OVER_LIMIT:
        *need = "queue or reject";
        if (strcmp(v, "reject") != 0 && strcmp(v, "queue") != 0)
            return SQ_EPARSE;
        f->over_limit_reject = strcmp(v, "reject") == 0;
        return 0;
    default:
        return read_count(k, v, t, need);
    }
}

static int run(server_opts_t *sopts, out_t *o)
{
    uv_loop_t loop;
    serve_ctx_t c = {.out = o};
    if (uv_loop_init(&loop) < 0)
        return SQ_EXIT_FAILURE;
    signal(SIGPIPE, SIG_IGN);
    file_raise_limit(); /* thousands of watch streams need as many descriptors */
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

typedef struct {
    server_opts_t opts;
    char host[64];
    bool pub;
} serve_args_t;

/* cli_parse's take(): one option or word. Returns -1 to go on, or the exit code of a mistake. */
static int take_opt(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    serve_args_t *sa = ctx;
    const char *need = NULL;
    if (k == CLI_POSITIONAL)
        return cli_usage_error(cmd, o, "unexpected argument '%s'", v);
    if (k == O_PUBLIC)
        sa->pub = true;
    else if (read_opt(k, v, &sa->opts, sa->host, &need) != 0)
        return cli_usage_error(cmd, o, "--%s needs %s, got '%s'", serve_opts[k].name, need, v);
    return -1;
}

static int serve_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    serve_args_t sa = {.pub = false};
    server_opts_init(&sa.opts);
    int rc = cli_parse(cmd, argc, argv, o, take_opt, &sa);
    if (rc >= 0)
        return rc;
    const server_opts_t *so = &sa.opts;
    if (so->faults.stall_at_ns >= 0 && so->faults.stall_for_ns <= 0)
        return cli_usage_error(cmd, o, "--stall-at needs --stall-for (its length)");
    if (so->faults.fail_at_ns >= 0 && so->faults.fail_for_ns <= 0)
        return cli_usage_error(cmd, o, "--fail-at needs --fail-for (its length)");
    if (!value_is_loopback(so->host)) {
        if (!sa.pub)
            return cli_usage_error(
                cmd, o, "'%s' is not a loopback address; add --public to listen there", so->host);
        out_warn(o,
                 "serve: listening on a non-loopback address (%s): anyone who can reach it "
                 "can read and write the store and its faults",
                 so->host);
    }
    return run(&sa.opts, o);
}

const cli_cmd_t cli_cmd_serve = {
    .name = "serve",
    .summary = "run the embedded control-plane-like target (store, watches, faults, access log)",
    .usage = "[--listen ADDR:PORT] [fault options]...",
    .description =
        "Serves a versioned JSON object store under /v1/ (GET, list with ?limit= and\n"
        "?continue=, PUT/POST, PATCH as JSON merge patch, DELETE, ?version=V for\n"
        "compare-and-swap), watch streams (?watch=1&since=V, NDJSON), GET /stats and\n"
        "GET /metrics, and fault injection set by the options below or at run time with\n"
        "POST /admin/faults (a JSON body) and POST /admin/drop-watches. With --access-log\n"
        "it writes its own access log (Common Log Format, or NDJSON with the fields\n"
        "`squall profile` reads by default). Stops on SIGINT or SIGTERM.",
    .opts = serve_opts,
    .main = serve_main,
};
