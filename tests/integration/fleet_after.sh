#!/usr/bin/env bash
# After-answer fleets (next: after-answer) against the embedded target, judged from the target's
# own access log (NDJSON, written by `squall serve`, outside squall's measurement) with numpy
# (tests/integration/lib/fleet_after_check.py) against the independent agent model
# tests/integration/lib/sync_sim.py:
#   stall run: 1,000 agents every 2 s for each of three actions (after-answer without jitter,
#     after-answer with +-10 % jitter, the fixed schedule) and a 3 s stall from run time 6 s:
#     spread before (R-bar < 0.1), one instant after for after-answer agents (R-bar > 0.8),
#     decaying with jitter as the model predicts, the fixed schedule back below 0.1 in the
#     first whole period after the stall;
#   errors run: two after-answer actions of 1,000 agents through an 8 s window in which every
#     answer is 503 (serve --fail-at/--fail-for): fixed retries every 0.5 s bunch the fleet at
#     the recovery, full-jitter retries (200 ms to 7 s) do not, both as the model predicts.
# Both runs go at once (each with its own target) and begin at one --start-at instant; the
# faults are set through POST /admin/faults relative to that instant. About 30 s of wall time.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/fleet-after"
rm -rf "$T"
mkdir -p "$T"
PIDS=()
cleanup() {
    local p
    for p in "${PIDS[@]}"; do stop_pid "$p"; done
}
trap cleanup EXIT

# serve NAME: a target on a free port with an NDJSON access log; sets PORT_<NAME>.
serve() {
    local port
    port=$(free_port)
    "$SQUALL" serve --listen "127.0.0.1:$port" --access-log "$T/$1.ndjson" \
        --access-log-format ndjson >"$T/$1.serve.log" 2>&1 &
    PIDS+=($!)
    if ! wait_port "$port"; then
        echo "FAIL: squall serve ($1) did not listen on $port"
        cat "$T/$1.serve.log"
        exit 1
    fi
    printf -v "PORT_$1" '%s' "$port"
}
serve stall
serve errors

# write CLASS...: a renewal class per name, each on its own collection (the log tells them
# apart by path).
classes() {
    local c
    for c in "$@"; do
        echo "  $c: {kind: write, method: PUT, path: \"/v1/$c/gw-{{agent}}\", body: '{\"holder\":\"gw-{{agent}}\"}'}"
    done
}
# Connections beyond the requests that can be outstanding at once (each after-answer agent has
# at most one; a fixed agent 1.5 over a 3 s stall), so none waits inside squall for one and the
# target's arrival instants are the sends.
# plan_head NAME SEED CONNECTIONS CLASS...: a plan's target, classes and the fleet's first keys.
plan_head() {
    local name=$1 seed=$2 conns=$3 port
    shift 3
    port=PORT_$name
    cat <<YAML
seed: $seed
target: {url: "http://127.0.0.1:${!port}", connections: $conns, timeout: 10s}
requests:
$(classes "$@")
accept: [generator-bound]
phases:
  - name: renewals
    duration: 22s
    fleet:
      agents: 1000
      every: 2s
      next: after-answer
YAML
}
{
    plan_head stall 20 3600 still jittered fixed
    cat <<YAML
      send:
        - {class: still, jitter: 0%}
        - {class: jittered, jitter: 10%}
        - {class: fixed, next: fixed}
YAML
} >"$T/stall.yaml"
{
    plan_head errors 21 2200 fixedretry fulljitter
    cat <<YAML
      jitter: 10%
      send:
        - {class: fixedretry, retry: {policy: fixed, base: 500ms}}
        - {class: fulljitter, retry: {policy: full-jitter, base: 200ms, cap: 7s}}
YAML
} >"$T/errors.yaml"
for p in stall errors; do
    "$SQUALL" check "$T/$p.yaml" >"$T/$p.check" 2>&1 || { echo "FAIL: check $p"; cat "$T/$p.check"; exit 1; }
done
grep -q "still every 2s, next: after-answer (its answer + the period ±0%), retry after a failure: full-jitter from 200ms capped at 7s" "$T/stall.check" &&
    grep -q "fixed every 2s, next: fixed" "$T/stall.check" &&
    grep -q "fulljitter every 2s, next: after-answer (its answer + the period ±10%), retry after a failure: full-jitter from 200ms capped at 7s" "$T/errors.check"
expect "squall check shows each action's next and retry" test $? = 0

# Both runs begin 2 s from now; the faults are set at once, their times counted from the POST
# to land at run time 6 s (stall, 3 s) and 5 s (errors, 8 s): the POST's own latency (ms) is
# the only error, and the checks read the windows back from the access logs anyway.
START=$(instant_in 2)
# The errors run's error rate would trip the default error-rate brake: --no-brakes.
for p in stall errors; do
    timeout 120 "$SQUALL" run "$T/$p.yaml" -o "$T/$p" --quiet --keep --start-at "$START" \
        $([ $p = errors ] && echo --no-brakes) >"$T/$p.stdout" 2>"$T/$p.stderr" &
    eval "RUN_$p=\$!"
done
at() { # at RUN_SECONDS: seconds from now to that run time, as a duration the target reads
    /usr/bin/python3 -c 'import datetime as d, sys
s = d.datetime.fromisoformat(sys.argv[1]) + d.timedelta(seconds=float(sys.argv[2]))
print("%.3fs" % (s - d.datetime.now(d.timezone.utc)).total_seconds())' "$START" "$1"
}
curl -s -o /dev/null -X POST --data "{\"stall_at\":\"$(at 6)\",\"stall_for\":\"3s\"}" \
    "http://127.0.0.1:$PORT_stall/admin/faults"
curl -s -o /dev/null -X POST --data \
    "{\"fail_at\":\"$(at 5)\",\"fail_for\":\"8s\",\"fail_status\":503}" \
    "http://127.0.0.1:$PORT_errors/admin/faults"
wait "$RUN_stall"
RC_stall=$?
wait "$RUN_errors"
RC_errors=$?
cleanup
PIDS=()
# The stall run passes its objectives (a stall is not an error); the errors run fails its
# default error-rate objective (exit 1), as it should.
expect "the stall run exits 0 (got $RC_stall; $(tail -1 "$T/stall.stderr"))" test "$RC_stall" = 0
expect "the errors run exits 1, its error rate above the default objective (got $RC_errors)" \
    test "$RC_errors" = 1
/usr/bin/python3 "$SRCDIR/tests/integration/lib/fleet_after_check.py" stall "$T/stall" \
    "$T/stall.ndjson" || FAILED=1
/usr/bin/python3 "$SRCDIR/tests/integration/lib/fleet_after_check.py" errors "$T/errors" \
    "$T/errors.ndjson" || FAILED=1
exit "$FAILED"
