/* `squall cleanup RESULTS_DIR|JOURNAL`: delete whatever a run's journal shows still alive (after a
 * crash, a kill -9, --keep, or a run on another machine), idempotently, and report counts. */
#include <arpa/inet.h>
#include <jansson.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "squall/cli.h"
#include "squall/err.h"
#include "squall/journal.h"
#include "squall/plan.h"
#include "squall/source.h"
#include "squall/value.h"

enum {
    OPT_CONFIRM,
    OPT_RATE,
    OPT_CONNECTIONS,
    OPT_DRY_RUN,
    OPT_INSECURE,
    OPT_CA,
    OPT_TOKEN_ENV,
    OPT_PLAN,
    OPT_SET,
    OPT_JSON
};

static const cli_opt_t cleanup_opts[] = {
    [OPT_CONFIRM] = {"confirm-target", 0, NULL,
                     "allow a target that is not loopback (tell its owners first)"},
    [OPT_RATE] = {"rate", 0, "RATE", "deletes per second (default 100/s; 0 = as fast as allowed)"},
    [OPT_CONNECTIONS] = {"connections", 0, "N", "deletes in flight at most (default 8)"},
    [OPT_DRY_RUN] = {"dry-run", 'n', NULL, "list what is alive, delete nothing"},
    [OPT_INSECURE] = {"insecure", 0, NULL, "do not verify the target's TLS certificate"},
    [OPT_CA] = {"ca", 0, "FILE", "CA certificates to verify the target with"},
    [OPT_TOKEN_ENV] = {"token-env", 0, "NAME",
                       "send the bearer token in environment variable NAME"},
    [OPT_PLAN] = {"plan", 0, "PLAN.yaml",
                  "the run's plan: its target's headers, TLS and token go with every delete"},
    [OPT_SET] = {"set", 0, "KEY=VALUE", "override a value of --plan (repeatable)"},
    [OPT_JSON] = {"json", 0, NULL, "print what was deleted, left and not tried as JSON"},
    {NULL, 0, NULL, NULL},
};

typedef struct {
    const char *input, *ca, *token_env, *plan;
    bool confirm, dry_run, insecure, json;
    double rate;
    int connections;
    plan_override_t sets[64];
    char *copies[64];
    size_t n_sets;
} cleanup_args_t;

/* True when the URL's host is 127.0.0.0/8, ::1 or localhost (as `squall run` decides). */
static bool url_is_loopback(const char *url)
{
    const char *h = strstr(url, "://");
    h = h ? h + 3 : url;
    const char *at = strchr(h, '@'), *slash = strchr(h, '/');
    if (at && (!slash || at < slash))
        h = at + 1;
    char host[256];
    size_t n = h[0] == '[' ? strcspn(h + 1, "]") : strcspn(h, ":/");
    snprintf(host, sizeof host, "%.*s", (int)(n < 255 ? n : 255), h + (h[0] == '['));
    struct in_addr a4;
    struct in6_addr a6;
    if (inet_pton(AF_INET, host, &a4) == 1)
        return (ntohl(a4.s_addr) >> 24) == 127;
    if (inet_pton(AF_INET6, host, &a6) == 1)
        return IN6_IS_ADDR_LOOPBACK(&a6);
    return strcmp(host, "localhost") == 0;
}

static int take_opt(const cli_cmd_t *cmd, int k, const char *v, out_t *o, void *ctx)
{
    cleanup_args_t *ca = ctx;
    if (k == CLI_POSITIONAL)
        return cli_take_one(cmd, &ca->input, v, "journal", o);
    int64_t n;
    switch (k) {
    case OPT_CONFIRM:
        ca->confirm = true;
        break;
    case OPT_RATE:
        if (value_parse_rate(v, &ca->rate))
            return cli_usage_error(cmd, o, "--rate needs %s, got '%s'", VALUE_RATE_EXPECTS, v);
        break;
    case OPT_CONNECTIONS:
        if (value_parse_int(v, 1, 10000, &n))
            return cli_usage_error(cmd, o, "--connections needs 1..10000, got '%s'", v);
        ca->connections = (int)n;
        break;
    case OPT_DRY_RUN:
        ca->dry_run = true;
        break;
    case OPT_JSON:
        ca->json = true;
        break;
    case OPT_INSECURE:
        ca->insecure = true;
        break;
    case OPT_CA:
        ca->ca = v;
        break;
    case OPT_TOKEN_ENV:
        ca->token_env = v;
        break;
    case OPT_PLAN:
        ca->plan = v;
        break;
    case OPT_SET:
        if (ca->n_sets == 64)
            return cli_usage_error(cmd, o, "--set: at most 64 overrides");
        if (plan_override_split(v, &ca->sets[ca->n_sets], &ca->copies[ca->n_sets]))
            return cli_usage_error(cmd, o, "--set needs KEY=VALUE, got '%s'", v);
        ca->n_sets++;
        break;
    }
    return -1;
}

static int read_args(const cli_cmd_t *cmd, int argc, char **argv, out_t *o, cleanup_args_t *ca)
{
    ca->rate = 100;
    ca->connections = 8;
    int rc = cli_parse(cmd, argc, argv, o, take_opt, ca);
    if (rc < 0 && !ca->input)
        return cli_usage_error(cmd, o, "which run? (expected RESULTS_DIR or a journal file)");
    if (rc < 0 && ca->plan && (ca->ca || ca->token_env))
        return cli_usage_error(cmd, o, "--plan gives TLS and the token: drop --ca and --token-env");
    if (rc < 0 && !ca->plan && ca->n_sets)
        return cli_usage_error(cmd, o, "--set overrides a value of --plan: give the plan too");
    return rc;
}

typedef struct {
    journal_t *j;
    const journal_alive_t *alive;
} cleanup_ctx_t;

/* The engine settings of the deletes: the run's plan's target (headers, TLS, token, made by
 * the same function a run uses), or the command line's --ca and --token-env. Always sent to
 * the journal's target, which must be the plan's. Returns 0 or an exit code. */
static int target_settings(const cleanup_args_t *ca, const char *url, out_t *o, plan_t **plan,
                           src_target_t *t)
{
    memset(t, 0, sizeof(*t));
    if (ca->plan) {
        int rc = plan_load(ca->plan, ca->sets, ca->n_sets, plan, o);
        if (rc)
            return rc == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
        if (strcmp((*plan)->target.url, url)) {
            out_error(o,
                      "the journal's target is %s but the plan's is %s: give the plan of the "
                      "run that wrote the journal (or --set target.url)",
                      url, (*plan)->target.url);
            return SQ_EXIT_USAGE;
        }
        if (src_target_init(t, *plan, ca->insecure, o))
            return SQ_EXIT_USAGE;
    } else {
        if (ca->insecure)
            out_warn(o, "TLS certificate verification is OFF: anyone on the path can read and "
                        "change this traffic");
        const char *token = ca->token_env ? getenv(ca->token_env) : NULL;
        if (ca->token_env && (!token || !token[0])) {
            out_error(o, "--token-env: environment variable %s is not set", ca->token_env);
            return SQ_EXIT_USAGE;
        }
        t->eng = (eng_config_t){.ca_file = ca->ca, .insecure = ca->insecure, .bearer_token = token};
    }
    t->eng.base_url = url;
    t->eng.connections = ca->connections;
    t->eng.timeout_ms = t->eng.timeout_ms ? t->eng.timeout_ms : 10000;
    return 0;
}

static void on_result(void *user, size_t i, const eng_result_t *res, enum journal_fate f)
{
    (void)res;
    cleanup_ctx_t *x = user;
    if (f == JOURNAL_DONE || f == JOURNAL_GONE)
        journal_add(x->j, JOURNAL_DELETED, x->alive->paths[i], x->alive->classes[i], 0);
}

/* --json: every object by its fate, and the counts, into doc. */
static void fates_json(json_t *doc, const journal_alive_t *al, const enum journal_fate *fates,
                       const journal_reap_counts_t *c)
{
    static const char *const names[] = {[JOURNAL_LEFT] = "left",
                                        [JOURNAL_DONE] = "deleted",
                                        [JOURNAL_GONE] = "already_gone",
                                        [JOURNAL_REFUSED] = "failed",
                                        [JOURNAL_NOT_TRIED] = "not_tried"};
    json_t *by = json_object();
    for (size_t f = 0; f < sizeof names / sizeof names[0]; f++)
        json_object_set_new(by, names[f], json_array());
    for (size_t i = 0; i < al->n; i++)
        json_array_append_new(json_object_get(by, names[fates[i]]), json_string(al->paths[i]));
    json_object_set_new(doc, "objects", by);
    json_object_set_new(doc, "counts",
                        json_pack("{s:I, s:I, s:I, s:I, s:I}", "deleted", (json_int_t)c->done,
                                  "already_gone", (json_int_t)c->gone, "failed",
                                  (json_int_t)c->refused, "left", (json_int_t)c->left, "not_tried",
                                  (json_int_t)c->not_tried));
    json_object_set_new(doc, "seconds", json_real(c->elapsed_ns / 1e9));
    json_object_set_new(doc, "stopped_early", c->why[0] ? json_string(c->why) : json_null());
}

/* Deletes every alive object; returns the exit code. With doc (--json) the outcome goes there
 * instead of the results stream. */
static int reap_alive(const cleanup_args_t *ca, const char *path, const journal_alive_t *al,
                      json_t *doc, out_t *o)
{
    cleanup_ctx_t x = {.alive = al};
    if (journal_open(path, al->target, o, &x.j))
        return SQ_EXIT_FAILURE;
    src_target_t tgt;
    plan_t *plan = NULL;
    int rc = target_settings(ca, al->target, o, &plan, &tgt);
    if (rc) {
        journal_close(x.j);
        return rc;
    }
    eng_config_t ecfg = tgt.eng;
    journal_reap_cfg_t cfg = {.rate = ca->rate,
                              .parallel = ca->connections,
                              .attempts = 4,
                              .on_result = on_result,
                              .user = &x,
                              .signals = true};
    double secs = ca->rate > 0 ? (double)al->n / ca->rate : (double)al->n / 1000;
    cfg.limit_ns = (int64_t)(secs * 2e9) + 30 * INT64_C(1000000000);
    enum journal_fate *fates = calloc(al->n ? al->n : 1, sizeof(*fates));
    journal_reap_counts_t c = {0};
    uv_loop_t loop;
    rc = fates ? uv_loop_init(&loop) : SQ_ENOMEM;
    if (rc == 0) {
        rc = journal_reap(&loop, &ecfg, o, &cfg, (const char *const *)al->paths, al->n, fates, &c);
        if (uv_loop_close(&loop))
            out_warn(o, "internal: event loop closed with handles still open");
    }
    if (rc == 0 && doc)
        fates_json(doc, al, fates, &c);
    free(fates);
    src_target_close(&tgt);
    plan_free(plan);
    if (journal_close(x.j))
        out_warn(o, "journal %s: not every deletion could be recorded", path);
    if (rc) {
        out_error(o, "cleanup could not start: %s", sq_strerror(rc));
        return SQ_EXIT_FAILURE;
    }
    char text[200];
    size_t still = journal_counts_text(&c, text, sizeof text);
    out_info(o, "cleanup %s: %s", al->target, text);
    if (c.why[0])
        out_warn(o, "stopped early: %s", c.why);
    if (still == 0)
        return SQ_EXIT_OK;
    out_warn(o,
             "%zu objects are still on the target (%zu failed, %zu left, %zu not tried); "
             "`squall cleanup %s` tries them again",
             still, c.refused, c.left, c.not_tried, path);
    return strstr(c.why, "unreachable") ? SQ_EXIT_UNREACHABLE
           : (strstr(c.why, "SIG"))     ? SQ_EXIT_INTERRUPTED
                                        : SQ_EXIT_FAILURE;
}

static int cleanup_main(const cli_cmd_t *cmd, int argc, char **argv, out_t *o)
{
    cleanup_args_t ca = {0};
    int rc = read_args(cmd, argc, argv, o, &ca);
    if (rc >= 0)
        return rc;
    char path[4096];
    struct stat st;
    bool dir = stat(ca.input, &st) == 0 && S_ISDIR(st.st_mode);
    snprintf(path, sizeof path, dir ? "%s/" JOURNAL_FILE : "%s", ca.input);
    journal_alive_t al;
    if ((rc = journal_read(path, &al, o)))
        return rc == SQ_ENOMEM ? SQ_EXIT_FAILURE : SQ_EXIT_USAGE;
    size_t unconfirmed = 0;
    json_t *doc = NULL, *alive = NULL;
    if (ca.json) {
        alive = json_array();
        for (size_t i = 0; i < al.n; i++)
            json_array_append_new(alive, json_pack("{s:s, s:s, s:b}", "path", al.paths[i], "class",
                                                   al.classes[i], "confirmed", al.confirmed[i]));
        doc = json_pack("{s:s, s:i, s:s, s:s, s:b, s:{s:I, s:I, s:I, s:I}, s:o}", "format",
                        "squall-cleanup", "version", 1, "journal", path, "target", al.target,
                        "dry_run", ca.dry_run, "journal_lines", "read", (json_int_t)al.records,
                        "skipped", (json_int_t)al.torn, "created", (json_int_t)al.created,
                        "deleted", (json_int_t)al.deleted, "alive", alive);
    }
    for (size_t i = 0; i < al.n; i++)
        unconfirmed += !al.confirmed[i];
    out_info(o,
             "journal %s: %zu lines (%zu skipped), %zu created, %zu deleted: %zu alive (%zu never "
             "confirmed: their create got no clear answer)",
             path, al.records, al.torn, al.created, al.deleted, al.n, unconfirmed);
    if (!url_is_loopback(al.target) && !ca.confirm) {
        out_error(o,
                  "target %s is not a loopback address: deleting on a shared system needs "
                  "--confirm-target",
                  al.target);
        rc = SQ_EXIT_USAGE;
    } else if (ca.dry_run) {
        /* Only paths on stdout, one a line, so that the list can be piped; which ones were
         * never confirmed is said on stderr. */
        for (size_t i = 0; i < al.n && !doc; i++) {
            out_print(o, "%s\n", al.paths[i]);
            if (!al.confirmed[i])
                out_info(o, "%s: never confirmed (its create got no clear answer)", al.paths[i]);
        }
        rc = SQ_EXIT_OK;
    } else {
        rc = reap_alive(&ca, path, &al, doc, o);
    }
    /* The document is printed whenever the deletes were tried (or listed), whatever the
     * outcome; a refused target or a failed start prints none. */
    char *text = doc && (ca.dry_run || json_object_get(doc, "counts")) && rc != SQ_EXIT_USAGE
                     ? json_dumps(doc, JSON_INDENT(2))
                     : NULL;
    if (text)
        out_print(o, "%s\n", text);
    free(text);
    json_decref(doc);
    journal_alive_close(&al);
    for (size_t i = 0; i < ca.n_sets; i++)
        free(ca.copies[i]);
    return rc;
}

const cli_cmd_t cli_cmd_cleanup = {
    .name = "cleanup",
    .summary = "delete the objects a run's journal shows still alive",
    .usage = "RESULTS_DIR|JOURNAL [--dry-run] [--rate RATE] [--confirm-target] [--json] [options]",
    .description =
        "Reads RESULTS_DIR/journal.ndjson (or the journal file given) and sends DELETE for\n"
        "every object it shows created and not yet deleted, to the target the journal names:\n"
        "after a crash or a kill -9 of `squall run`, after --keep, or from another machine.\n"
        "Deletions are appended to the journal, so running it again deletes nothing twice;\n"
        "404 and 410 count as already gone. A torn last line (the writer was killed mid-line)\n"
        "is reported and skipped. Tries each object up to 4 times on 5xx, 429 and timeouts,\n"
        "waiting the answer's Retry-After (at most 30 s), else 200 ms, then doubling up to 2 s.\n"
        "\n"
        "Exit code 0 when nothing is left alive, 4 when the target is unreachable, 5 after a\n"
        "signal, 6 when some objects could not be deleted. Targets other than loopback are\n"
        "refused without --confirm-target.\n"
        "\n"
        "Give the run's plan with --plan (and its --set overrides) when the target needs\n"
        "headers, TLS files or a token: the deletes then carry target.headers, target.tls and\n"
        "target.token exactly as the run's requests did.\n"
        "\n"
        "Status lines (the journal's counts, the deletes' outcome) go to stderr. With\n"
        "--dry-run, stdout carries only the alive objects' paths, one a line, for a pipe.\n"
        "With --json, stdout carries one JSON document (format \"squall-cleanup\", version 1):\n"
        "the journal's counts, every alive object, and after the deletes each object under its\n"
        "fate (deleted, already_gone, failed, left, not_tried) with the counts.",
    .opts = cleanup_opts,
    .main = cleanup_main,
};
