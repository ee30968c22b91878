/* libFuzzer target for what the replay source does with a recorded path (src/source/
 * replay_rules.c): the input is a log (format detected), each record is judged by a phase's
 * rules (method filter, classify, path shape, watch marker) and rewritten for three copies by rules
 * with groups and {{copy}}. Every path that comes out must be an origin-form path with no control
 * byte, space or DEL, as the engine will put it in a request line; a class must be one the plan
 * has. A broken promise aborts, which libFuzzer reports with the input. */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>

#include "../../src/source/replay_int.h"
#include "squall/alog.h"
#include "squall/out.h"

static plan_req_t reqs[] = {
    {.name = "renew", .kind = PLAN_WRITE, .write = {.method = "PUT", .body = "{}"}},
    {.name = "replay-get", .kind = PLAN_GET},
    {.name = "replay-list", .kind = PLAN_LIST},
    {.name = "replay-watch", .kind = PLAN_WATCH},
};
static plan_replay_rule_t rewrite[] = {
    {.match = "^/v1/sites/([^/]*)/(gateways)?", .to = "/v2/{{2}}/{{copy}}-{{1}}{{9}}/"},
    {.match = "[?&]v=([0-9]+)", .to = "?version={{1}}&c={{copy}}{{0}}"},
};
static plan_replay_rule_t classify[] = {
    {.match = "^/v1/leases/", .cls = {.name = "renew"}},
    {.match = "(a|b)*c", .cls = {.name = "replay-get"}},
};

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    plan_t plan = {.reqs = reqs, .n_reqs = 4};
    plan_phase_t ph = {.name = "p"};
    ph.replay.rewrite = rewrite;
    ph.replay.n_rewrite = 2;
    ph.replay.classify = classify;
    ph.replay.n_classify = 2;
    ph.replay.get_cls = 1;
    ph.replay.list_cls = 2;
    ph.replay.watch_cls = 3;
    ph.replay.watch_param = "watch";
    ph.replay.watch_min_ns = 1000000000;
    out_t *o = out_new_capture();
    rp_rules_t rules;
    if (rp_rules_init(&rules, &plan, &ph, o))
        abort();
    int fd = memfd_create("log", 0);
    if (fd < 0 || write(fd, data, size) != (ssize_t)size || lseek(fd, 0, SEEK_SET) != 0)
        abort();
    alog_config_t cfg;
    alog_config_init(&cfg);
    alog_t *r;
    char err[256];
    if (alog_open_fd(fd, "fuzz", &cfg, &r, err, sizeof err) == 0) {
        alog_record_t rec;
        while (alog_next(r, &rec) == 1) {
            int cls = -1;
            enum rp_verdict v = rp_rules_judge(&rules, &rec, &cls);
            if (v == RP_SEND && (cls < 0 || cls > 2))
                abort();
            if (v == RP_WATCH && (cls != 3 || rec.duration_ns < ph.replay.watch_min_ns))
                abort();
            for (int c = 0; c < 3; c++) {
                char path[512];
                size_t n = rp_rules_path(&rules, rec.path, c, path, sizeof path);
                if (n && (path[0] != '/' || strlen(path) != n))
                    abort();
                for (size_t i = 0; i < n; i++)
                    if ((unsigned char)path[i] <= 0x20 || path[i] == 0x7f)
                        abort();
            }
        }
        alog_close(r);
    }
    rp_rules_close(&rules);
    out_free(o);
    return 0;
}
