#!/usr/bin/env bash
# A connection per agent under shards: each shard process keeps connections for its own agents
# only (its share of the fleet, agents k with k mod N = I - 1), not for the whole fleet. Checked
# from outside:
#   - the open-file limit (the kernel's RLIMIT_NOFILE, set here with bash's ulimit): a fleet of
#     1,000 agents on their own connections needs more files than a process may open under a
#     hard limit of 800, so one process refuses it (exit 2, naming the limit), and `--procs 2`
#     runs it, each shard needing about 500 + its reserve;
#   - ss (iproute2), sampled through the run: every shard process holds at most its 500 agents'
#     connections to the target (and the plan's 8), and more than those 8 (they are per agent);
#   - the target's own count of the PUTs it answered equals the 3 ticks x 1,000 agents;
#   - `squall check --shard I/N` prints the shard's own connection count (500 of 2, 333 of 3).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/shards-conns"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1
cat >"$T/p.yaml" <<YAML
seed: 5
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"stamp":{{now_ns}}}'}
phases:
  - {name: storm, duration: 3s,
     fleet: {agents: 1000, every: 1s, timing: aligned, send: renew, connections: per-agent}}
# 1,000 requests at once on one machine's two cores: a second of lag is listed, not fatal.
accept: [generator-bound]
YAML
for s in 1/2 2/3; do
    "$SQUALL" check "$T/p.yaml" --shard "$s" >"$T/check-${s/\//of}" 2>&1
done
expect "check --shard 1/2 gives the shard its 500 agents' connections ($(grep 'one per agent' "$T/check-1of2"))" \
    grep -q 'one per agent, up to 500,' "$T/check-1of2"
expect "check --shard 2/3 gives the shard its 333 agents' connections ($(grep 'one per agent' "$T/check-2of3"))" \
    grep -q 'one per agent, up to 333,' "$T/check-2of3"

# The limit, lowered in a subshell for squall only (soft first: the hard one may not go below it).
( ulimit -Sn 800 && ulimit -Hn 800 &&
  timeout 120 "$SQUALL" run "$T/p.yaml" -o "$T/one" --quiet >"$T/one.stdout" 2>"$T/one.stderr" )
RUN_RC=$?
expect "one process: 1,000 connections do not fit a hard limit of 800 open files, refused (exit ${RUN_RC:-?}, wanted 2)" \
    test "${RUN_RC:-}" = 2
expect "and it says why: $(head -c 160 "$T/one.stderr")" grep -q 'RLIMIT_NOFILE' "$T/one.stderr"

PORT=${SERVE_URL##*:}
( for _ in $(seq 1 100); do
    ss -Htnp state established "( dport = :$PORT )" |
        sed -n 's/.*pid=\([0-9]*\),.*/\1/p' | sort | uniq -c
    echo --
    sleep 0.1
  done >"$T/conns" ) &
SSPID=$!
( ulimit -Sn 800 && ulimit -Hn 800 &&
  timeout 120 "$SQUALL" run "$T/p.yaml" -o "$T/two" --quiet --procs 2 >"$T/two.stdout" 2>"$T/two.stderr" )
RUN_RC=$?
stop_pid "$SSPID"
puts=$(serve_stats 's["requests"]["PUT"].get("200", 0) + s["requests"]["PUT"].get("201", 0)')
serve_stop
expect_rc "--procs 2 under the same limit runs (each shard needs its 500 connections)" "$T/two" 0
rcheck "the shards' requests = the PUTs the target answered ($puts) = 3 ticks x 1,000 agents" \
    "sum(c['count'] for c in d['cells']) == $puts == 3000" "$T/two"
# Per sample, per process: its established connections to the target.
MOST=$(awk '$1 ~ /^[0-9]+$/ { if ($1 > m) m = $1 } END { print m + 0 }' "$T/conns")
PIDS=$(awk '$1 ~ /^[0-9]+$/ { print $2 }' "$T/conns" | sort -u | wc -l)
expect "ss saw two shard processes connected to the target (got $PIDS)" test "$PIDS" = 2
# A process holds up to target.connections beside its agents' (seen without shards too, as in
# storm_fleet.sh's bound): at most 500 + 8 here; the whole fleet's would be up to 1,000 + 8.
expect "no shard process held more than its 500 agents' connections and the plan's 8, and one held more than those 8 (most: $MOST)" \
    test "$MOST" -le 508 -a "$MOST" -gt 8
[ "$FAILED" = 0 ] && echo "PASS: shards conns" || echo "FAIL: shards conns"
exit "$FAILED"
