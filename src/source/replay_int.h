/* Internals of the replay source: the phase's rules (filters, classify, rewrite) compiled once
 * and applied to each recorded request, shared by its two passes over the log. */
#ifndef SQUALL_REPLAY_INT_H
#define SQUALL_REPLAY_INT_H

#include <regex.h>

#include "squall/alog.h"
#include "squall/source.h"

/* What becomes of a recorded request. */
enum rp_verdict {
    RP_SEND,
    RP_FILTERED,   /* outside the window, the methods or the path pattern: not part of the replay */
    RP_SKIP_WRITE, /* a write with no body template for it (a log holds no bodies) */
    RP_WATCH,      /* a watch stream: marked (watch-param) or classified so, lasting watch-min */
    RP_SKIP_WATCH, /* a watch with no duration in the log, or shorter than watch-min */
    RP_SKIP_KIND,  /* a write classified as a get or list */
    RP_OTHER_SHARD, /* its client belongs to another shard (sched_shard_hash(client) mod N) */
    RP_N_VERDICTS
};

typedef struct {
    const plan_t *plan;
    const plan_phase_t *pp;
    regex_t match;
    bool has_match;
    regex_t *rewrite, *classify; /* compiled as the plan lists them */
    size_t n_rewrite, n_classify;
    int *classify_cls;
} rp_rules_t;

/* Compiles the phase's patterns and resolves its classes, reporting mistakes at their plan
 * positions on o: SQ_EINVAL, SQ_ENOMEM. rp_rules_close is safe after a failure. */
int rp_rules_init(rp_rules_t *r, const plan_t *plan, const plan_phase_t *pp, out_t *o);
void rp_rules_close(rp_rules_t *r);
/* The method and path filters and the class (*cls) of one recorded request (the window is the
 * caller's). A GET or HEAD marked by the watch parameter is a watch of the classify rule's class
 * when that is a watch class, else of `replay-watch`. A GET or HEAD classified as a write class is
 * sent as that class's write (so the objects a log reads can be made first); a recorded write keeps
 * its own method. */
enum rp_verdict rp_rules_judge(const rp_rules_t *r, const alog_record_t *rec, int *cls);
/* The path to send for copy `copy`: the first rewrite rule whose pattern matches replaces the
 * matched text by its template ({{0}}..{{9}} groups, {{copy}}). Returns the length, or 0 when
 * the result does not fit cap or is not an origin-form path. */
size_t rp_rules_path(const rp_rules_t *r, const char *path, int copy, char *dst, size_t cap);

#endif
