#!/usr/bin/env bash
# Watches in `squall run` against the embedded target: the events watchers saw equal the events
# the target says it sent (its /stats), with no loss and no duplicates across a resume after the
# target drops every stream, and a resume point that fell out of the target's history (410)
# answered by a re-list first, then a watch from the list's version.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/watch-events"
rm -rf "$T"
mkdir -p "$T"

# Watchers on one collection; 40 writes/s for 5 s = 200 writes to it, then 1 s without writes
# before the phase ends and the streams close: the last write's events reach every watcher
# (without it, a loaded CI machine once answered the last write as the streams were closing, and
# 5 of its 8 events were never sent).
W=8
plan() { # plan FILE POLICY BASE
    cat >"$1" <<YAML
seed: 5
target: {url: "$SERVE_URL", connections: 4, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  put: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}",
        body: '{"model":"t-a","stamp":{{now_ns}}}',
        keep: "the target's events_sent must not count the teardown's deletes"}
  list-north: {kind: list, path: "/v1/sites/north/gateways", page: 50}
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1", stamp-key: stamp,
           relist: list-north, reconnect: {policy: $2, base: $3, cap: 2s}}
phases:
  - {name: w, duration: 6s, steps: [{rate: 40/s, for: 5s}, {rate: 0/s, for: 1s}], mix: {put: 1},
     watches: {follow: $W}}
YAML
}
F='d["sections"]["watches"]["w"]["classes"]["follow"]'

# --- 1. No faults: every event the target queued reached a watcher, once. ------------------
serve_start || exit 1
plan "$T/calm.yaml" full-jitter 200ms
run_plan "$T/calm" "$T/calm.yaml"
sent=$(serve_stats 's["streams"]["events_sent"]')
writes=$(serve_stats 's["store"]["creates"]')
serve_stop
expect_rc "the run exits 0 (got $RUN_RC)" "$T/calm" 0
expect "the target stored 200 writes (got $writes)" test "$writes" = 200
rcheck "events seen = events the target sent ($sent), from its /stats" \
    "$F['events'] == $sent" "$T/calm"
rcheck "events seen = $W watchers x $writes writes (no loss, no duplicate)" \
    "$F['events'] == $W * $writes and $F['duplicates'] == 0" "$T/calm"
rcheck "the events cell counts the same events" "cell('w', 'follow', '2xx')['count'] == $F['events']" \
    "$T/calm"
rcheck "no drops, no reconnects, $W opens; the streams end as cancelled at the phase end" \
    "$F['drops'] == 0 and $F['reconnects'] == 0 and $F['opens'] == $W and cell('w', 'follow', 'cancelled')['count'] == $W" \
    "$T/calm"

# --- 2. The target drops every stream once: each watcher resumes from its last version. -----
serve_start --drop-watches-at 2s || exit 1
plan "$T/drop.yaml" full-jitter 300ms
run_plan "$T/drop" "$T/drop.yaml"
writes=$(serve_stats 's["store"]["creates"]')
dropped=$(serve_stats 's["faults"]["dropped_streams"]')
expired=$(serve_stats 's["store"]["expired"]')
serve_stop
expect_rc "the run exits 0 (got $RUN_RC)" "$T/drop" 0
expect "the target dropped $W streams (got $dropped) and answered no 410 (got $expired)" \
    test "$dropped" = "$W" -a "$expired" = 0
rcheck "across the resume each watcher saw each of the $writes writes exactly once" \
    "$F['events'] == $W * $writes and $F['duplicates'] == 0" "$T/drop"
rcheck "drops = reconnects = $W (the target's count), opens = 2 x $W" \
    "$F['drops'] == $dropped and $F['reconnects'] == $W and $F['opens'] == 2 * $W" "$T/drop"

# --- 3. History of 5 events and a 500 ms fixed reconnect: 20 writes are missed, so the resume
# point is too old: 410, then the relist class, then a watch from the list's version. --------
serve_start --drop-watches-at 2s --history 5 || exit 1
plan "$T/gone.yaml" fixed 500ms
run_plan "$T/gone" "$T/gone.yaml"
expired=$(serve_stats 's["store"]["expired"]')
lists=$(serve_stats 's["requests"]["GET"]["200"]')
serve_stop
expect_rc "the run exits 0 (got $RUN_RC)" "$T/gone" 0
expect "the target answered $W resumes with 410 (got $expired)" test "$expired" = "$W"
rcheck "too_old = relists = the target's 410 count ($expired)" \
    "$F['too_old'] == $expired and $F['relists'] == $expired" "$T/gone"
rcheck "the 410s are the watch protocol's answer, not errors: no 4xx cell, and the run passes" \
    "cell('w', 'follow', '4xx') == {} and d['sections']['run']['verdict'] == 'pass'" "$T/gone"
rcheck "every relist followed its pages: list 2xx answers >= $W, recorded under list-north" \
    "cell('w', 'list-north', '2xx')['count'] >= $W" "$T/gone"
rcheck "no duplicates after watching from the list's version, and events kept arriving" \
    "$F['duplicates'] == 0 and $F['events'] > $W * 80" "$T/gone"
rcheck "opens = 3 x $W: the first, the refused resume (410) and the one after the relist" \
    "$F['opens'] == 3 * $W" "$T/gone"
# --- 4. A plan the open-file limit stops is refused before anything is sent. ---------------
# Over HTTP/1.1 each watch holds a connection. The run gets a known hard RLIMIT_NOFILE of 4,096
# (lowered in a subshell, which needs no privilege), so the check runs whatever this machine's
# own limit is, and 5,096 watches are more than it allows.
hard=4096
cat >"$T/many.yaml" <<YAML
target: {url: "http://127.0.0.1:9", connections: 2}
requests:
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1"}
phases:
  - {name: many, duration: 5s, watches: {follow: $((hard + 1000))}}
YAML
(ulimit -n "$hard" && exec "$SQUALL" run "$T/many.yaml" -o "$T/many" --quiet) >"$T/many.out" 2>&1
rc=$?
expect "$((hard + 1000)) HTTP/1.1 watches exit 2 (got $rc)" test "$rc" = 2
expect "and the message names the phase and the RLIMIT_NOFILE limit ($hard)" \
    grep -q "phase 'many' opens $((hard + 1000)) watches.*at most $hard (RLIMIT_NOFILE" "$T/many.out"
expect "and writes no results" test ! -e "$T/many/results.json"
[ "$FAILED" = 0 ] && echo "PASS: watch events" || echo "FAIL: watch events"
exit "$FAILED"
