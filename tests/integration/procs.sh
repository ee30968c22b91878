#!/usr/bin/env bash
# `squall run --procs 2` against the embedded target, and what goes with it: the children, the
# merged verdict and its exit code (README, "Exit codes"), SIGINT sent to the parent only, and
# the refusals that send nothing (--start-at past, more processes than the open files allow,
# launcher variables that disagree with --shard), a late start counted as generator-bound.
# Counts are checked against the target's own /stats; "no traffic" means its counts did not move.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/procs"
rm -rf "$T"
mkdir -p "$T"

serve_start --delay fixed:20ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan() { # plan FILE P99 DURATION
    cat >"$1" <<YAML
target: {url: "$SERVE_URL", connections: 16, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 100/s, duration: $3, mix: {read: 1}}
objectives:
  - {class: read, p99: $2}
YAML
}
gets() { serve_stats 's["requests"].get("GET", {}).get("200", 0)'; }

# 1. Two children, merged: PASS (exit 0) with a loose objective, FAIL (exit 1) with one below the
#    target's known 20 ms delay. The merged counts are what the target answered.
plan "$T/pass.yaml" 1s 4s # 4 s: the live line shows a second once a later one began
plan "$T/fail.yaml" 5ms 2s
b=$(gets)
timeout 60 "$SQUALL" run "$T/pass.yaml" -o "$T/pass" --procs 2 >"$T/pass.out" 2>&1
RC=$?
a=$(gets)
# PASS, or INCONCLUSIVE only for generator-bound seconds of this shared machine.
expect "--procs 2, p99 <= 1 s: merged PASS, exit 0 (7 when generator-bound; got $RC)" \
    test "$RC" = 0 -o "$RC" = 7
rcheck "two shards (1/2, 2/2 from the flag the parent gave), merged and judged PASS; counts = the target's" \
    "len(d['meta']['inputs']) == 2 and total('read', '2xx') == $((a - b)) and
     d['sections']['run']['exit_code'] == $RC and
     (d['sections']['run']['verdict'] == 'pass' or (d['sections']['run']['verdict'] == 'inconclusive' and
          all('could not offer' in r for r in d['sections']['run']['reasons'])))" "$T/pass"
expect "the parent draws one seed for all shards: no 'no seed' warning" bash -c "! grep -q 'with no seed' '$T/pass.out'"
# The parent's live line sums the children's seconds: a whole second of both shards is the plan's
# 100/s (50 + 50 planned) and about as many done.
expect "the live line sums both shards' seconds: planned 100 of the plan's 100/s ($(grep -m1 "2 shards' second" "$T/pass.out"))" \
    /usr/bin/python3 -c "
import re, sys
rows = [tuple(map(float, m.groups())) for m in re.finditer(r\"--procs 2: \\d+ running \\| 2 shards' second: (\\d+) done \\(planned (\\d+)\\)\", open('$T/pass.out').read())]
sys.exit(not (rows and any(p == 100 and 90 <= d <= 110 for d, p in rows)))"
for i in 1 2; do
    rcheck "shard-$i: shard $i/2, start_at common" \
        "d['sections']['launch']['shard'] == {'index': $i, 'count': 2, 'from': 'flag', 'variables': None}
         and d['sections']['launch']['start_at'] == $(rget "$T/pass/shard-1" "repr(d['sections']['launch']['start_at'])")" \
        "$T/pass/shard-$i"
done
timeout 60 "$SQUALL" run "$T/fail.yaml" -o "$T/fail" --procs 2 --quiet >"$T/fail.out" 2>&1
RC=$?
expect "--procs 2, p99 <= 5 ms against a 20 ms delay: merged FAIL, exit 1 (got $RC)" test "$RC" = 1

# A child that fails is named, and nothing is merged: shard 2's directory already holds results
# (from the run above), so that child refuses to write over them (exit 2) while shard 1 runs.
mkdir -p "$T/cf/shard-2"
cp "$T/pass/shard-2/results.json" "$T/cf/shard-2/"
timeout 60 "$SQUALL" run "$T/pass.yaml" -o "$T/cf" --procs 2 --quiet >"$T/cf.out" 2>&1
RC=$?
expect "a failed shard: exit 2 (got $RC), named, not merged" \
    test "$RC $(grep -c 'shard 2/2 failed (exit 2)' "$T/cf.out") $([ -e "$T/cf/results.json" ] && echo merged)" = "2 1 "

# 2. SIGINT to the parent only (the children are in their own process group): every child ends,
#    each shard and the merge are written as interrupted, exit 5.
plan "$T/long.yaml" 1s 30s
timeout 60 "$SQUALL" run "$T/long.yaml" -o "$T/int" --procs 2 --quiet >"$T/int.out" 2>&1 &
P=$!
for _ in $(seq 50); do [ -s "$T/int/shard-2/series.csv" ] && break; sleep 0.1; done
sleep 1
SQ=$(pgrep -P "$P") # timeout(1)'s child: the squall parent
KIDS=$(pgrep -P "$SQ" | tr '\n' ' ')
kill -INT "$SQ"
wait "$P"
RC=$?
alive=0
for k in $KIDS; do kill -0 "$k" 2>/dev/null && alive=1; done
expect "SIGINT to the parent: exit 5 (got $RC), both children ($KIDS) ended" \
    test "$RC $(echo $KIDS | wc -w) $alive" = "5 2 0"
for d in shard-1 shard-2 .; do
    rcheck "$d written as interrupted by SIGINT" \
        "d['meta']['interrupted'] and 'SIGINT' in d['meta']['stop_reason']" "$T/int/$d"
done

# 3. Refusals: one line, exit 2, nothing sent.
b=$(gets)
refused() { # refused DESC NEEDLE CMD...: exit 2, one line on stderr naming NEEDLE
    local desc=$1 needle=$2
    shift 2
    "$@" >"$T/ref.out" 2>"$T/ref.err"
    local rc=$? lines
    lines=$(wc -l <"$T/ref.err")
    if [ "$rc" = 2 ] && [ "$lines" = 1 ] && grep -q -- "$needle" "$T/ref.err"; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc: exit $rc, $lines lines: $(cat "$T/ref.err")"
        FAILED=1
    fi
}
refused "--start-at 5 s in the past" "in the past" \
    "$SQUALL" run "$T/pass.yaml" -o "$T/r1" --start-at "$(date -u -d '-5 sec' +%FT%TZ)"
refused "--start-at two days ahead" "more than a day" \
    "$SQUALL" run "$T/pass.yaml" -o "$T/r2" --start-at +48h
refused "--procs beyond the open files (ulimit -n 100, 60 processes)" "RLIMIT_NOFILE" \
    bash -c "ulimit -n 100 && exec \"$SQUALL\" run \"$T/pass.yaml\" -o \"$T/r3\" --procs 60"
refused "Open MPI's variables against --shard" "disagrees" \
    env OMPI_COMM_WORLD_RANK=0 OMPI_COMM_WORLD_SIZE=2 \
    "$SQUALL" run "$T/pass.yaml" -o "$T/r4" --shard 2/2
refused "an indexed job's index without a count" "--shard-count" \
    env JOB_COMPLETION_INDEX=1 "$SQUALL" run "$T/pass.yaml" -o "$T/r5"
expect "the refusals sent nothing ($b -> $(gets) answers)" test "$(gets)" = "$b"

# 4. A start already 0.5 s past (within the 1 s tolerance): runs at once, says how late, and
#    counts that second as generator-bound: INCONCLUSIVE, exit 7.
LATE=$(instant_in -0.5)
run_plan "$T/late" "$T/pass.yaml" --start-at "$LATE"
expect "a start 0.5 s late: exit 7 (got $RUN_RC) and a line saying so" \
    grep -q "after --start-at" "$T/late.stderr"
expect "... exit 7" test "$RUN_RC" = 7
rcheck "late_ms about 500 and its first second generator-bound" \
    "450 < d['sections']['launch']['late_ms'] < 1000 and
     0 in d['sections']['generator']['generator_bound']['list']" "$T/late"

# 5. SIGINT while waiting for --start-at: nothing sent, results written as interrupted, exit 5.
b=$(gets)
timeout 60 "$SQUALL" run "$T/pass.yaml" -o "$T/wait" --quiet --start-at +20s >"$T/wait.out" 2>&1 &
P=$!
sleep 1
kill -INT "$P"
wait "$P"
RC=$?
expect "SIGINT before the start instant: exit 5 (got $RC), nothing sent" test "$RC $(gets)" = "5 $b"
rcheck "written as interrupted with no request" \
    "d['meta']['interrupted'] and sum(c['count'] for c in d['cells']) == 0" "$T/wait"
exit "$FAILED"
