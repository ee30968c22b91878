#!/usr/bin/env bash
# What stands between an aligned tick's wake-up and its first write, counted from outside with
# strace (Debian's strace; system calls, not times, so the machine's load does not enter).
# libcurl 7.88 checks every idle connection of a multi handle, one zero-timeout poll(2) each,
# before the first request that starts a second or more after its last check (its url.c,
# prune_dead_connections, at most once per 1,000 ms per connection cache), then polls the
# connection it picked once more. So the polls before a tick's first write are the idle
# connections of one multi handle, plus one: with 1,000 agents on their own connections the
# engine splits them over multi handles of 16 (src/engine/eng_int.h, eng_split_multis), so at
# most 17 polls; the engine before issue 12's change (16 handles) allows up to 64 here (computed;
# measured with 2,000 agents: 36, and 31 with the 484 connections one such run opened,
# tools/bench/RESULTS.md "Why a tick's first write came late"). A run in which no tick shows the check (a single poll: libcurl checked less
# than a second earlier) cannot say anything: FAIL as inconclusive. One in which strace stretched
# a tick's burst past the next tick (seen in a clean clone at 17-21 % steal with 2,000 agents:
# bursts of 10 s, 115 requests past a 5 s timeout) has no tick boundaries to count from: skipped
# (77), saying so.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/tick-polls"
rm -rf "$T"
mkdir -p "$T"
command -v strace >/dev/null || { echo "FAIL: strace (Debian package strace) is not installed"; exit 1; }
serve_start || exit 1
cat >"$T/p.yaml" <<YAML
seed: 3
target: {url: "$SERVE_URL", connections: 16, timeout: 30s}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"stamp":{{now_ns}}}'}
phases:
  - {name: storm, duration: 9s,
     fleet: {agents: 1000, every: 3s, timing: aligned, send: renew, connections: per-agent}}
# 1,000 requests at once under strace on a shared machine: lag is listed, not fatal.
accept: [generator-bound]
YAML
timeout 120 strace -f -tt -e trace=poll,sendto,epoll_wait,epoll_pwait,connect -o "$T/strace" \
    "$SQUALL" run "$T/p.yaml" -o "$T/out" --quiet >"$T/out.stdout" 2>"$T/out.stderr"
RUN_RC=$?
serve_stop
# A tick whose requests were still being answered when the next began (burst_ns: first write
# to last answer, storms section): strace took longer than the period.
OVERRUN=$(/usr/bin/python3 -c "import json, sys
a = json.load(open(sys.argv[1]))['sections']['storms']['storm']['actions'][0]
print(max(t['burst_ns'] for t in a['ticks']) / 1e9 if max(t['burst_ns'] for t in a['ticks'])
      > a['period_ns'] - 5e8 else '')" "$T/out/results.json" 2>/dev/null)
if [ -n "$OVERRUN" ]; then
    echo "NOT JUDGED (machine): tick polls: under strace a tick's burst lasted ${OVERRUN} s, past the 3 s period (this machine is too loaded now): no tick boundary to count from"
    exit 77
fi
expect_rc "the run under strace exits 0" "$T/out" 0
# One line per tick from the second: calls from the wake-up to the first write, polls among
# them, polls per request, connections opened (tools/bench/tickcalls.py).
/usr/bin/python3 "$SRCDIR/tools/bench/tickcalls.py" "$T/strace" >"$T/ticks"
POLLS=$(awk '{ printf "%s%s", sep, $2; sep = " " }' "$T/ticks")
CONNS=$(awk 'NR == 1 { print $4 }' "$T/ticks")
expect "strace saw the two ticks after the first (polls before each first write: ${POLLS:-none}; ${CONNS:-?} connections opened)" \
    test "$(wc -l <"$T/ticks")" -ge 2
if ! awk '$2 >= 2 { found = 1 } END { exit !found }' "$T/ticks"; then
    echo "FAIL: INCONCLUSIVE: no tick showed libcurl's idle-connection check (polls: ${POLLS:-none}), so the bound below says nothing"
    FAILED=1
fi
expect "before each tick's first write, at most one multi handle's 16 idle connections were polled, plus the one picked (polls: ${POLLS:-none}; at most 17)" \
    awk '$2 > 17 { bad = 1 } END { exit bad }' "$T/ticks"
[ "$FAILED" = 0 ] && echo "PASS: tick polls" || echo "FAIL: tick polls"
exit "$FAILED"
