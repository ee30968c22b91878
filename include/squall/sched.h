/* The scheduler: a phase's source of starts turned into *intended* start times.
 *
 * Every time here is integer nanoseconds relative to the phase start (t = 0); the caller adds
 * its uv_hrtime() base. Latency is measured from these intended times, so a late send shows up
 * as response time instead of disappearing (no coordinated omission). Nothing here reads a
 * clock, touches libuv or allocates after *_new: iterators are driven by the caller's "now".
 *
 * Glossary:
 *   rate profile  r(t) per second: constant, a linear ramp from r0 to r1 over the duration, or
 *                 steps (each rate for a time; the last one holds until the phase ends).
 *   Λ(t)          the cumulative rate integral, expected number of starts in [0, t).
 *   even          the k-th start (k = 0, 1, ...) at Λ⁻¹(k): deterministic spacing.
 *   poisson       a non-homogeneous Poisson process by time transformation: unit-rate
 *                 exponential gaps E_k (X = −ln U) summed and mapped through Λ⁻¹. For a constant
 *                 rate λ the gaps are exactly Exp(λ).
 *   Λ⁻¹(y)        the first t with Λ(t) = y, taken where the rate is positive (a zero-rate step
 *                 never holds a start).
 *   mix           weighted choice of a request class per start (Walker/Vose alias method).
 *   closed loop   C clients: issue, wait for the completion, think, repeat. The next intended
 *                 start is completion + think; results must be marked closed-loop.
 *   fleet         N periodic agents (spread, jitter or aligned timing), yielding (t, agent).
 *   after-answer  a fleet agent that takes its next instant from its last answer (answer +
 *                 period, jittered; a retry delay after a failure) instead of a fixed grid: the
 *                 way node agents renew leases, and how a stalled server synchronises a fleet.
 *
 *   shard         one process's share when N processes split a run (`run --shard I/N`, I in
 *                 1..N): every count of starts, clients and agents is dealt so that the N
 *                 shards together make exactly what one process would (see sched_shard_t).
 *
 * Starts lie in [0, duration): a start exactly at the end belongs to the next phase. */
#ifndef SQUALL_SCHED_H
#define SQUALL_SCHED_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "squall/rng.h"

/* ---- Shards ------------------------------------------------------------------------------ */

/* Shard `index` (1-based) of `count`; {0, 0} and {1, 1} are the whole run. Everything numbered
 * from 0 (an even schedule's k-th start, closed-loop client k, fleet agent k, churn op k) is
 * dealt round robin: shard i owns the k with k mod N = i - 1, so the shards' parts are disjoint
 * and their union is the whole. */
typedef struct {
    int index, count;
} sched_shard_t;

/* {0, 0}, or 1 <= index <= count (the schedulers refuse anything else: SQ_EINVAL). */
bool sched_shard_valid(sched_shard_t sh);
/* True for a shard of more than one (count > 1). */
bool sched_shard_split(sched_shard_t sh);
/* Whether shard sh owns item k (always for the whole run). */
bool sched_shard_owns(sched_shard_t sh, uint64_t k);
/* How many of the items k in [lo, hi) shard sh owns. */
uint64_t sched_shard_share(sched_shard_t sh, uint64_t lo, uint64_t hi);
/* The shard's seed: the run's own for the whole run, else
 * sched_seed(run_seed, 0xffffffff, index) (the phase number no plan reaches). */
uint64_t sched_shard_seed(uint64_t run_seed, sched_shard_t sh);
/* A stable 64-bit hash of a string (FNV-1a, the same on every machine): replay deals clients
 * to shards by it. */
uint64_t sched_shard_hash(const char *s);

/* ---- Open loop ---------------------------------------------------------------------------- */

enum sched_shape { SCHED_CONSTANT, SCHED_RAMP, SCHED_STEPS };
enum sched_arrivals { SCHED_EVEN, SCHED_POISSON };

typedef struct {
    double rate;    /* per second, >= 0 */
    int64_t for_ns; /* > 0; the last step's length is ignored: it holds until the phase ends */
} sched_step_t;

/* A small config the caller fills (the run glue copies it from the plan). */
typedef struct {
    enum sched_shape shape;
    double rate;               /* SCHED_CONSTANT, per second */
    double from, to;           /* SCHED_RAMP, per second */
    const sched_step_t *steps; /* SCHED_STEPS; copied by sched_open_new */
    size_t n_steps;
    int64_t duration_ns; /* > 0 */
    enum sched_arrivals arrivals;
    uint64_t seed; /* poisson only; the same seed gives the same starts */
    /* Even: the shard's starts are the single schedule's k-th with k mod N = index - 1 (their
     * union is the single schedule exactly). Poisson: the shard's own process of rate r(t)/N
     * (Λ/N), which with independent seeds superpose to the planned process. */
    sched_shard_t shard;
} sched_open_cfg_t;

typedef struct sched_open sched_open_t;

/* Validates cfg (rates finite and >= 0, at most SCHED_RATE_MAX, duration > 0, steps given for
 * SCHED_STEPS): SQ_EINVAL otherwise, SQ_ENOMEM. On success *out is an iterator at t = 0. */
#define SCHED_RATE_MAX 1e9
int sched_open_new(const sched_open_cfg_t *cfg, sched_open_t **out);
void sched_open_free(sched_open_t *s);

/* The next intended start: true and *t_ns, or false once the phase has no more starts. */
bool sched_open_next(sched_open_t *s, int64_t *t_ns);
/* The start sched_open_next would return, without consuming it: the glue arms its wake-up for
 * it. False when none is left. */
bool sched_open_peek(const sched_open_t *s, int64_t *t_ns);
/* Every start due at or before now_ns, up to max of them, written in order to out[]; returns
 * how many. Call again when it returns max: more may be due. */
size_t sched_open_due(sched_open_t *s, int64_t now_ns, int64_t *out, size_t max);
/* Number of starts consumed so far. */
uint64_t sched_open_count(const sched_open_t *s);

/* Λ(t) for the config, t clamped to [0, duration]: expected starts in [0, t). Poisson's mean. */
double sched_open_lambda(const sched_open_cfg_t *cfg, int64_t t_ns);
/* Exactly how many starts an even schedule makes over the phase: ceil(Λ(duration)) (the
 * shard's share of them when cfg->shard splits). */
uint64_t sched_open_even_count(const sched_open_cfg_t *cfg);
/* Starts of cfg's schedule in [t0, t1) (rel ns): for even arrivals exactly the shard's share of
 * the integers in [Λ(t0), Λ(t1)), for Poisson the mean (Λ(t1) - Λ(t0)) / N. */
double sched_open_expected(const sched_open_cfg_t *cfg, int64_t t0_ns, int64_t t1_ns);
/* The intended rate r(t) in starts per second at t (the live line's target rate); 0 outside
 * [0, duration) or for an invalid config. */
double sched_open_rate(const sched_open_cfg_t *cfg, int64_t t_ns);

/* A seed for one random stream of one phase, from the run's seed: arrivals, mix, think times
 * and fleets each take their own stream so that changing one never shifts another's draws.
 * A fixed mixing function (splitmix64 finaliser), the same on every machine. */
uint64_t sched_seed(uint64_t run_seed, uint32_t phase, uint32_t stream);

/* ---- Mix: a weighted class picker ---------------------------------------------------------- */

typedef struct sched_mix sched_mix_t;

/* weights[i] >= 0, finite, at least one > 0, n >= 1: class i is picked with probability
 * weights[i] / sum, exactly up to double rounding (alias table). SQ_EINVAL / SQ_ENOMEM. */
int sched_mix_new(const double *weights, size_t n, uint64_t seed, sched_mix_t **out);
void sched_mix_free(sched_mix_t *m);
/* A class index in [0, n). O(1), no allocation. */
size_t sched_mix_pick(sched_mix_t *m);

/* ---- Closed loop --------------------------------------------------------------------------- */

enum sched_think { SCHED_THINK_FIXED, SCHED_THINK_EXP };

typedef struct {
    int clients;      /* >= 1 */
    int64_t think_ns; /* >= 0: fixed think time, or the mean of an exponential one */
    enum sched_think think;
    int64_t spread_ns;   /* client i's first start at i * spread / clients; 0 = all at t = 0 */
    int64_t duration_ns; /* > 0: no start at or after it */
    uint64_t seed;
    sched_shard_t shard; /* only the clients k (0-based) the shard owns; ids stay global */
} sched_closed_cfg_t;

/* A client's lifecycle; it changes only through one setter inside closed.c. */
enum sched_client_state {
    SCHED_CLIENT_WAITING, /* its next intended start is known and not yet issued */
    SCHED_CLIENT_BUSY,    /* issued, waiting for the completion */
    SCHED_CLIENT_DONE,    /* the next start would fall at or after the end of the phase */
};

typedef struct sched_closed sched_closed_t;

int sched_closed_new(const sched_closed_cfg_t *cfg, sched_closed_t **out);
void sched_closed_free(sched_closed_t *c);
/* The next client due at or before now_ns: true with *client and its intended *t_ns, and the
 * client becomes BUSY; false when none is due yet. Clients come out in intended-time order. */
bool sched_closed_due(sched_closed_t *c, int64_t now_ns, int *client, int64_t *t_ns);
/* The earliest intended start of a WAITING client (the glue's next wake-up); false if none. */
bool sched_closed_peek(const sched_closed_t *c, int64_t *t_ns);
/* A BUSY client's request completed at done_ns: it thinks, and its next intended start is
 * done_ns + think (written to *next_ns when next_ns is not NULL). Returns true if it will start
 * again, false if that start falls at or after the end (the client is then DONE).
 * Misuse (client out of range or not BUSY) returns false and changes nothing. */
bool sched_closed_complete(sched_closed_t *c, int client, int64_t done_ns, int64_t *next_ns);
enum sched_client_state sched_closed_state(const sched_closed_t *c, int client);
/* Requests issued so far by one client, and by all. */
uint64_t sched_closed_issued(const sched_closed_t *c, int client);
uint64_t sched_closed_total(const sched_closed_t *c);
/* True when every client is DONE. */
bool sched_closed_finished(const sched_closed_t *c);

/* Expected requests over the phase if each response takes response_ns (a closed system's
 * count depends on its own latency): per client, the number of start times
 * first + k * (response + think) below the duration, summed. With exponential think the mean
 * think is used, so the figure is an estimate. With response_ns = 0 and fixed think it is an
 * exact upper bound. INFINITY when response + think is 0 (the loop never rests). */
double sched_closed_expected(const sched_closed_cfg_t *cfg, int64_t response_ns);

/* ---- Fleet of periodic agents ------------------------------------------------------------- */

enum sched_timing {
    SCHED_SPREAD,  /* a random phase in [0, P) per agent, fixed for the run */
    SCHED_JITTER,  /* the agent starts at its join time; each period is P·(1 + U(−x, +x)) */
    SCHED_ALIGNED, /* every agent fires on the wall-clock (CLOCK_REALTIME) multiples of P */
};

/* Where an agent's next action comes from. */
enum sched_next {
    SCHED_NEXT_FIXED,        /* its timing's grid, whatever the answers (the default) */
    SCHED_NEXT_AFTER_ANSWER, /* its last answer: sched_fleet_answer */
};

typedef struct {
    int agents;        /* >= 1 */
    int64_t period_ns; /* P > 0 */
    enum sched_timing timing;
    /* After-answer: the first action is as `timing` says; each later one waits for the answer
     * to the last (sched_fleet_answer) and comes P_i·(1 + U(−x, +x)) after it (x = jitter, in
     * any timing), or a retry delay after it when the caller says the answer was a failure. */
    enum sched_next next;
    double jitter;       /* x in [0, 1): SCHED_JITTER, and the periods of after-answer agents */
    double drift;        /* d in [0, 0.5): agent i's period is P·(1 + e_i), e_i ~ U(−d, +d) */
    int64_t join_ns;     /* agent k joins at k * join / agents; 0 = all at t = 0 */
    int64_t leave_ns;    /* agent k leaves at duration - leave + k * leave / agents (first in,
                          * first out); 0 = all stay to the end; at most the duration */
    int64_t duration_ns; /* > 0 */
    /* SCHED_ALIGNED: CLOCK_REALTIME in ns at the phase's t = 0, so that t + realtime0 is a
     * multiple of P on every tick; separate processes with synced clocks line up. */
    int64_t realtime0_ns;
    uint64_t seed;
    /* Only the agents k (0-based) the shard owns act; every agent's drift and spread phase are
     * drawn as for the whole fleet (the shards' agents are the single fleet's), jitter draws
     * then come from sched_seed(seed, index, count). */
    sched_shard_t shard;
} sched_fleet_cfg_t;

typedef struct sched_fleet sched_fleet_t;

/* SQ_EINVAL for a bad config, SQ_ENOMEM. Memory is O(agents), allocated here only. */
int sched_fleet_new(const sched_fleet_cfg_t *cfg, sched_fleet_t **out);
void sched_fleet_free(sched_fleet_t *f);
/* The next action in time order (ties by agent index): O(log agents), no allocation. An
 * after-answer agent then waits (sched_fleet_waiting) and has no next action until
 * sched_fleet_answer gives it one. */
bool sched_fleet_next(sched_fleet_t *f, int64_t *t_ns, int *agent);
bool sched_fleet_peek(const sched_fleet_t *f, int64_t *t_ns, int *agent);
/* Every action due at or before now_ns, up to max, into t_out[] and agent_out[]. */
size_t sched_fleet_due(sched_fleet_t *f, int64_t now_ns, int64_t *t_out, int *agent_out,
                       size_t max);
/* A waiting after-answer agent's answer came at at_ns (rel): its next action is at
 * at_ns + retry_ns when retry_ns >= 0 (a failure: the caller's backoff delay), else at
 * at_ns + P_i·(1 + U(−x, +x)) (a success: its period, jittered). Writes that instant to
 * *next_ns (may be NULL) and returns true if it will act again, false if the instant falls at or
 * after the agent's end (it is then done) or on misuse (a fixed fleet, an agent out of range or
 * not waiting: nothing changes). O(log agents), no allocation. */
bool sched_fleet_answer(sched_fleet_t *f, int agent, int64_t at_ns, int64_t retry_ns,
                        int64_t *next_ns);
/* Whether an after-answer agent acted and waits for its answer. */
bool sched_fleet_waiting(const sched_fleet_t *f, int agent);
/* Exactly how many actions the fleet yields over its duration: O(agents) for spread and
 * aligned; for jitter a dry run of a copy (O(actions · log agents)); for after-answer agents a
 * dry run with every answer instant (the most they can do). SQ_EINVAL or SQ_ENOMEM as a
 * negative value. */
int64_t sched_fleet_count(const sched_fleet_cfg_t *cfg);
/* The fleet's planned actions in [t0, t1) (relative ns), from its own agents: exact for spread
 * and aligned timing (every instant is fixed when the fleet is built; an aligned tick counts
 * whole, all its agents at once), the expectation for jitter (each period is drawn as it goes;
 * see fleet.c); after-answer agents as if every answer were instant (an upper bound). Joins
 * and leaves are counted. O(agents) per call; it does not move the fleet. */
double sched_fleet_expected(const sched_fleet_t *f, int64_t t0_ns, int64_t t1_ns);
/* The CLOCK_REALTIME-to-phase offset helper for aligned fleets: the first t >= 0 such that
 * realtime0 + t is a multiple of period. */
int64_t sched_align_offset(int64_t realtime0_ns, int64_t period_ns);

/* ---- replay: requests recorded within one tick of a coarse log clock ------------------------ */

/* A log with 1 s times (Common Log Format) says only which second a request came in. The n
 * requests of one such tick are spread over it in their recorded order (so each client's order
 * is kept): evenly, the k-th at k * width / n, or as a Poisson process conditioned on n arrivals
 * in the tick, i.e. n sorted uniform points, drawn in increasing order one at a time by
 * u(k+1) = 1 - (1 - u(k)) * V^(1/(n-k)) (Bentley and Saxe, "Generating sorted lists of random
 * numbers", ACM TOMS 6(3), 1980). A small value struct; no allocation. */
typedef struct {
    bool poisson;
    rng_t rng;
    int64_t width_ns;
    uint64_t n, k;
    double u; /* the last point, in [0, 1) */
} sched_spread_t;

void sched_spread_init(sched_spread_t *s, bool poisson, uint64_t seed);
/* A new tick of width_ns holding n requests. */
void sched_spread_tick(sched_spread_t *s, int64_t width_ns, uint64_t n);
/* The next request's offset into the tick, in [0, width) and non-decreasing; after n calls the
 * tick is used up and further calls return the last offset. */
int64_t sched_spread_next(sched_spread_t *s);

#endif
