#!/usr/bin/env bash
# What a run reports per second and per phase, against the embedded target's own counts:
#  - series.csv: each phase's rows hold exactly that phase's requests, also in the second in
#    which one phase ends and the next begins (it has rows for both), and the teardown has rows
#    of its own;
#  - the summary's requests per second divide by the time a phase actually ran, also when a
#    signal cut it short;
#  - a churn phase that never reached its population says so (no band of 0..0);
#  - the peaks of requests queued and in flight are true peaks, not a once-a-second sample:
#    one connection and 100 agents on one aligned tick queue 99 of them at once.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/run-series"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1

# Two 1.5 s phases at an even 100/s: 150 creates, then 150 reads; the boundary falls in the
# middle of second 1. The run then tears down the 150 objects (100/s, its default).
cat >"$T/split.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 16, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  make: {kind: write, method: PUT, path: "/v1/gw/g-{{seq}}", body: '{"n":1}', creates: true}
  read: {kind: get, path: "/v1/gw/{{pick}}"}
phases:
  - {name: one, rate: 100/s, duration: 1500ms, mix: {make: 1}}
  - {name: two, rate: 100/s, duration: 1500ms, mix: {read: 1}}
YAML
run_plan "$T/split" "$T/split.yaml"
expect_rc "the run exits 0 (got $RUN_RC)" "$T/split" 0
/usr/bin/python3 - "$T/split/series.csv" <<'PY' || FAILED=1
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1])))
def total(phase, col="started"):
    return sum(int(r[col]) for r in rows if r["phase"] == phase)
bad = 0
def expect(ok, what):
    global bad
    print(("ok: " if ok else "FAIL: ") + what)
    bad += not ok
expect(total("one") == 150 and {r["class"] for r in rows if r["phase"] == "one"} == {"make"},
       f"phase one's rows hold its 150 creates and nothing else (started {total('one')})")
expect(total("two") == 150 and {r["class"] for r in rows if r["phase"] == "two"} == {"read"},
       f"phase two's rows hold its 150 reads and nothing else (started {total('two')})")
s1 = {r["phase"] for r in rows if r["second"] == "1"}
expect({"one", "two"} <= s1, f"second 1, where one ends and two begins, has rows for both ({s1})")
expect(total("teardown") == 150 and total("teardown", "completed") == 150,
       f"the teardown has rows of its own: 150 deletes ({total('teardown')})")
sys.exit(1 if bad else 0)
PY
GONE=$(serve_stats 's["requests"].get("DELETE", {}).get("204", 0) + s["requests"].get("DELETE", {}).get("200", 0)')
expect "the target saw the 150 deletes the rows count ($GONE)" test "$GONE" = 150

# 50/s planned for 20 s, stopped by SIGINT after about 3 s: the summary's rate is about 50/s,
# not 50 x 3 / 20 = 7.5/s.
cat >"$T/long.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  read: {kind: write, method: PUT, path: "/v1/leases/gw-1", body: '{"n":1}'}
phases:
  - {name: long, rate: 50/s, duration: 20s, mix: {read: 1}}
YAML
# Signalled directly, not under timeout(1), which would take the signal itself; the plan ends
# on its own after 20 s in any case.
"$SQUALL" run "$T/long.yaml" -o "$T/long" >"$T/long.out" 2>"$T/long.err" &
RP=$!
sleep 3
kill -INT "$RP"
wait "$RP"
RC=$?
expect "SIGINT ends it with exit 5 (got $RC)" test "$RC" = 5
RATE=$(awk '$1 == "long" && $2 == "read" { print $4 }' "$T/long.out")
expect "the summary's rate is over the time the phase ran: $RATE/s, within 40..60" \
    /usr/bin/python3 -c "import sys; sys.exit(not 40 <= float('${RATE:-0}') <= 60)"

# Churn toward a population of 1,000 at 10/s for 1 s reaches 10: the band it held is unknown,
# and results.json says so instead of a band of 0..0.
cat >"$T/churn.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  make: {kind: write, method: PUT, path: "/v1/gw/c-{{seq}}", body: '{"n":1}', creates: true}
  drop: {kind: write, method: DELETE, path: "/v1/gw/{{pick:make}}", deletes: true}
phases:
  - {name: churn, duration: 1s, churn: {create: make, delete: drop, rate: 10/s, population: 1000}}
YAML
run_plan "$T/churn" "$T/churn.yaml"
rcheck "a population never reached has no band: reached false, min and max null" \
    "d['sections']['lifecycle']['churn_population_reached'] is False and
     d['sections']['lifecycle']['churn_population_min'] is None and
     d['sections']['lifecycle']['churn_population_max'] is None" "$T/churn"
rcheck "nor was it held: held false, the band the plan allows 900..1100 (1000 ± the default 10 %)" \
    "d['sections']['lifecycle']['churn_population_held'] is False and
     d['sections']['lifecycle']['churn_population_low'] == 900 and
     d['sections']['lifecycle']['churn_population_high'] == 1100" "$T/churn"

# One connection, 100 agents on one aligned tick, each answer 5 ms late: 99 wait at once.
serve_stop
serve_start --delay fixed:5ms || exit 1
cat >"$T/peak.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 1, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"n":1}'}
phases:
  - {name: tick, duration: 3s,
     fleet: {agents: 100, every: 1s, timing: aligned, send: renew, connections: shared}}
YAML
timeout 60 "$SQUALL" run "$T/peak.yaml" -o "$T/peak" >"$T/peak.out" 2>"$T/peak.err"
RC=$?
rcheck "results.json's max_queued is the true peak, 99 (of 100 on one connection)" \
    "d['sections']['generator']['max_queued'] == 99" "$T/peak"
LIVE=$(grep -o 'queued *[0-9]*' "$T/peak.err" | awk '{ print $2 }' | sort -n | tail -1)
expect "the live line shows the second's peak queue, 99 (saw ${LIVE:-none})" test "${LIVE:-0}" = 99
exit $FAILED
