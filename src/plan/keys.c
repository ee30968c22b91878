/* Every key a plan may hold, per mapping: the one list the loader checks mappings against
 * (pc_check_keys), that tests/man/tables prints and that tests/man holds squall-plan(5)
 * against. A key read by a parser but missing here is refused as unknown, so the list cannot
 * fall behind the parsers; one listed here but never read is caught by the manual's test only if
 * the page documents what the key does, so add both together. */
#include "plan_int.h"

static const char *const root[] = {"include",  "seed",    "target",     "vars",
                                   "requests", "phases",  "objectives", "brakes",
                                   "accept",   "observe", NULL};
static const char *const target[] = {"url",     "http", "connections", "streams",  "timeout",
                                     "headers", "tls",  "token",       "max_body", NULL};
static const char *const tls[] = {"ca", "cert", "key", "insecure", NULL};
static const char *const token[] = {"file", "env", NULL};
static const char *const from_to[] = {"from", "to", NULL};

/* Request keys with the kinds of request each applies to (the rest are refused by kind). */
static const char *const request[] = {"kind",           "path",        "headers",     "timeout",
                                      "page",           "limit-param", "token-key",   "token-param",
                                      "method",         "body",        "creates",     "deletes",
                                      "keep",           "framing",     "version-key", "stamp-key",
                                      "too-old-status", "relist",      "reconnect",   NULL};
static const unsigned request_kinds[] = {PK_ANY,   PK_ANY,   PK_ANY,   PK_ANY,   PK_LIST,
                                         PK_LIST,  PK_LIST,  PK_LIST,  PK_WRITE, PK_WRITE,
                                         PK_WRITE, PK_WRITE, PK_WRITE, PK_WATCH, PK_WATCH,
                                         PK_WATCH, PK_WATCH, PK_WATCH, PK_WATCH};
_Static_assert(sizeof request / sizeof request[0] ==
                   sizeof request_kinds / sizeof request_kinds[0] + 1,
               "one kinds entry per request key");

static const char *const reconnect[] = {"policy", "base", "cap", NULL};
static const char *const phase[] = {"name",     "duration", "rate",    "ramp",    "steps",
                                    "arrivals", "mix",      "clients", "fleet",   "watches",
                                    "churn",    "teardown", "replay",  "actions", NULL};
static const char *const action[] = {"name", "at", "http", "exec", "timeout", NULL};
static const char *const action_http[] = {"method", "url", "body", NULL};
static const char *const step[] = {"rate", "for", NULL};
static const char *const clients[] = {"count", "think", NULL};
static const char *const watches[] = {"open", NULL}; /* besides the watch class names */
static const char *const fleet[] = {"agents", "every", "timing", "jitter", "drift",
                                    "join",   "leave", "send",   "watch",  "connections",
                                    "next",   "retry", NULL};
static const char *const send[] = {"class", "every", "next", "jitter", "retry", NULL};
/* The first four are churn's required keys: parse_phase.c reports a missing one by index. */
static const char *const churn[] = {"create", "delete", "rate", "population", "tolerance", NULL};
static const char *const teardown[] = {"rate", NULL};
static const char *const replay[] = {
    "log",    "speed",  "format",      "fields",    "time-unit", "duration-unit", "time-at",
    "from",   "to",     "methods",     "match",     "rewrite",   "classify",      "copies",
    "offset", "spread", "watch-param", "watch-min", NULL};
static const char *const rewrite[] = {"match", "to", NULL};
static const char *const classify[] = {"match", "class", NULL};
/* p99 stands for every percentile key pN (0 < N <= 100), which the judge's parser accepts. */
static const char *const objective[] = {"class",    "phase", "metric",   "error-rate",
                                        "min-rate", "p99",   "max-sync", NULL};
static const char *const brake[] = {"error-rate", "unreachable", "saturation", "for",
                                    "class",      "p99",         NULL};

static const char *const observe[] = {"metrics", "collect", NULL};
static const char *const scrape[] = {"url", "every", "keep", NULL};
static const char *const collect[] = {"url", "at", "save", "timeout", "max", NULL};

const plan_keyset_t plan_keysets[PLAN_KEYS_N] = {
    [PLAN_KEYS_ROOT] = {"", root, NULL},
    [PLAN_KEYS_TARGET] = {"target", target, NULL},
    [PLAN_KEYS_TLS] = {"target.tls", tls, NULL},
    [PLAN_KEYS_TOKEN] = {"target.token", token, NULL},
    [PLAN_KEYS_RANGE] = {"vars.NAME", from_to, NULL},
    [PLAN_KEYS_REQUEST] = {"requests.NAME", request, request_kinds},
    [PLAN_KEYS_RECONNECT] = {"requests.NAME.reconnect", reconnect, NULL},
    [PLAN_KEYS_PHASE] = {"phases[]", phase, NULL},
    [PLAN_KEYS_RAMP] = {"phases[].ramp", from_to, NULL},
    [PLAN_KEYS_STEP] = {"phases[].steps[]", step, NULL},
    [PLAN_KEYS_CLIENTS] = {"phases[].clients", clients, NULL},
    [PLAN_KEYS_WATCHES] = {"phases[].watches", watches, NULL},
    [PLAN_KEYS_FLEET] = {"phases[].fleet", fleet, NULL},
    [PLAN_KEYS_SEND] = {"phases[].fleet.send[]", send, NULL},
    [PLAN_KEYS_RETRY] = {"phases[].fleet.retry", reconnect, NULL},
    [PLAN_KEYS_SEND_RETRY] = {"phases[].fleet.send[].retry", reconnect, NULL},
    [PLAN_KEYS_CHURN] = {"phases[].churn", churn, NULL},
    [PLAN_KEYS_TEARDOWN] = {"phases[].teardown", teardown, NULL},
    [PLAN_KEYS_REPLAY] = {"phases[].replay", replay, NULL},
    [PLAN_KEYS_REWRITE] = {"phases[].replay.rewrite[]", rewrite, NULL},
    [PLAN_KEYS_CLASSIFY] = {"phases[].replay.classify[]", classify, NULL},
    [PLAN_KEYS_ACTION] = {"phases[].actions[]", action, NULL},
    [PLAN_KEYS_ACTION_HTTP] = {"phases[].actions[].http", action_http, NULL},
    [PLAN_KEYS_OBJECTIVE] = {"objectives[]", objective, NULL},
    [PLAN_KEYS_BRAKE] = {"brakes[]", brake, NULL},
    [PLAN_KEYS_OBSERVE] = {"observe", observe, NULL},
    [PLAN_KEYS_SCRAPE] = {"observe.metrics[]", scrape, NULL},
    [PLAN_KEYS_COLLECT] = {"observe.collect[]", collect, NULL},
};

const char *const *plan_keys(enum plan_keyset s)
{
    return plan_keysets[s].keys;
}
