#!/usr/bin/env bash
# Objectives and brakes against real runs of the embedded target, whose --delay option adds a
# known server-side latency: an objective p99 <= 40 ms fails with a 50 ms delay (exit 1) and holds
# with none (exit 0; 40 ms leaves room for a noisy second of this shared machine); a percentile brake and a saturation brake stop a run (exit 3) and results
# say why. Exit codes: README, "Exit codes" (include/squall/err.h SQ_EXIT_MAP).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/judge"
rm -rf "$T"
mkdir -p "$T"

plan() { # plan FILE URL: a 4 s get plan in two phases with three objectives (100 and 200
         # requests: enough for a p99, which needs 100 samples)
    cat >"$1" <<YAML
target: {url: "$2", connections: 8, timeout: 5s}
accept: [generator-bound] # objectives are judged here; the generator's health in verdict.sh
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: warm, rate: 50/s, duration: 2s, mix: {read: 1}}
  - {name: steady, rate: 100/s, duration: 2s, mix: {read: 1}}
objectives:
  - {class: read, p99: 40ms}
  - {class: "*", error-rate: 1%}
  - {class: read, phase: steady, min-rate: 90/s}
YAML
}
O='d["sections"]["objectives"]'
K='d["sections"]["objectives"]["checks"]'

# --- 50 ms server-side delay: the p99 objective fails in every scope ---------------------------
serve_start --delay fixed:50ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan "$T/slow.yaml" "$SERVE_URL"
run_plan "$T/slow" "$T/slow.yaml"
expect "a 50 ms delay breaks p99 <= 40 ms: exit 1 (got $RUN_RC)" test "$RUN_RC" = 1
rcheck "results.json says the run failed its objectives" "$O['passed'] is False" "$T/slow"
rcheck "the p99 check fails in warm, steady and the run, observing >= 50 ms (the known delay)" \
    "sorted(c['scope'] for c in $K if c['objective'] == 0 and c['verdict'] == 'fail'
           and c['observed'] >= 50) == ['run', 'steady', 'warm']" "$T/slow"
rcheck "error rate (0 of 300; read in warm, steady and the run) and min rate (100/s >= 90/s) still pass" \
    "sorted(c['scope'] for c in $K if c['objective'] == 1) == ['run', 'steady', 'warm']
     and all(c['verdict'] == 'pass' for c in $K if c['objective'] in (1, 2))
     and [c['scope'] for c in $K if c['objective'] == 2] == ['steady']" "$T/slow"
rcheck "observed rate of steady is 200 requests / 2 s = 100/s within 1 %" \
    "[abs(c['observed'] - 100) <= 1 for c in $K if c['objective'] == 2] == [True]" "$T/slow"
$SQUALL run "$T/slow.yaml" -o "$T/slow2" >"$T/slow2.stdout" 2>/dev/null
expect "the summary prints the failed verdicts" grep -q "^FAIL *steady *read *p99 of response" \
    "$T/slow2.stdout"
serve_stop

# --- No delay: every check passes, exit 0 -------------------------------------------------------
serve_start || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan "$T/fast.yaml" "$SERVE_URL"
run_plan "$T/fast" "$T/fast.yaml"
expect_rc "with no delay every objective holds: exit 0 (got $RUN_RC)" "$T/fast" 0
rcheck "results.json: passed, 7 checks, all pass" \
    "$O['passed'] is True and len($O['checks']) == 7 and
     all(c['verdict'] == 'pass' for c in $O['checks'])" "$T/fast"

# --- An objective on a phase where its class never ran is no-data, which fails -------------------
cat >"$T/nodata.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  write: {kind: write, method: PUT, path: /v1/sites/north/gateways/gw-w, body: '{"n":1}'}
phases:
  - {name: steady, rate: 100/s, duration: 1s, mix: {read: 1}}
objectives:
  - {class: read, metric: service, p99: 1s}
  - {class: write, p99: 1s}
YAML
run_plan "$T/nodata" "$T/nodata.yaml"
expect "a class that never ran makes its objective no-data: exit 1 (got $RUN_RC)" \
    test "$RUN_RC" = 1
rcheck "the only non-passing check is write's, verdict no-data, 0 samples" \
    "[(c['class'], c['verdict'], c['samples']) for c in $K if c['verdict'] != 'pass']
     == [('write', 'no-data', 0)]" "$T/nodata"
serve_stop

# --- Brakes ------------------------------------------------------------------------------------
# A percentile brake: p99 above 20 ms held for 2 s, against a 50 ms delay, stops a 20 s run after
# about 2 s: exit 3, results written, stop_reason naming the brake.
serve_start --delay fixed:50ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
cat >"$T/pbrake.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 50/s, duration: 20s, mix: {read: 1}}
brakes:
  - {p99: 20ms, for: 2s}
YAML
run_plan "$T/pbrake" "$T/pbrake.yaml"
expect "the p99 brake stops the run: exit 3 (got $RUN_RC)" test "$RUN_RC" = 3
rcheck "stop_reason names the percentile brake" \
    "d['meta']['interrupted'] and 'p99 latency above 20 ms for 2s' in d['meta']['stop_reason']" \
    "$T/pbrake"
rcheck "it stopped after 2-5 s of the planned 20 s (100-250 of 1,000 requests answered)" \
    "100 <= total('read', '2xx') <= 250" "$T/pbrake"
rcheck "the brakes section: the plan's p99 brake replaces the default of its kind; the loopback
      defaults (error rate 10 % over 10 s, unreachable 10 s) stay" \
    "sorted((b['kind'], b['source']) for b in d['sections']['brakes']['brakes']) ==
     [('error-rate', 'default'), ('percentile', 'plan'), ('unreachable', 'default')]
     and d['sections']['brakes']['shared_target'] is False" "$T/pbrake"
expect "report.html lists the brakes in force" grep -q "p99 above 20 ms held for 2 s (plan" \
    "$T/pbrake/report.html"

# A saturation brake: one connection cannot carry 100/s at 50 ms each (20/s at most), so requests
# wait in squall's queue behind a slow target (connection-bound); held for 2 s, the brake stops
# the run.
cat >"$T/sbrake.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 1, timeout: 30s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 100/s, duration: 20s, mix: {read: 1}}
brakes:
  - {saturation: true, for: 2s}
YAML
run_plan "$T/sbrake" "$T/sbrake.yaml" --grace 1s
expect "the saturation brake stops the run: exit 3 (got $RUN_RC)" test "$RUN_RC" = 3
rcheck "stop_reason names the saturation brake, the kind and the remedy" \
    "'brake: squall could not offer the planned load for 2s (connection-bound)' in d['meta']['stop_reason'] and
     'raise target.connections' in d['meta']['stop_reason']" "$T/sbrake"
rcheck "results name the connection-bound seconds (at least the 2 the brake held) and no generator-bound one" \
    "d['sections']['generator']['connection_bound']['seconds'] >= 2 and
     d['sections']['generator']['generator_bound']['seconds'] == 0" "$T/sbrake"
serve_stop

[ "$FAILED" = 0 ] && echo "judge: all checks passed"
exit "$FAILED"
