#!/usr/bin/env bash
# One model of "how many starts": `squall check`'s estimate, the run's own plan second by
# second (series.csv's planned column, the figure the live line shows), and what the target was
# sent must agree, per phase and class, for every kind of source: even ramps, aligned fleets
# (whole ticks), spread fleets with join and leave ramps, jittered fleets (their first tick at
# the join time, their last one inside the phase half the time) and churn. Exact where the
# schedule is deterministic for the seed; for jitter within four standard deviations of the
# expectation. Against the embedded target, whose /stats counts what it received.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/run-model"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1
cat >"$T/m.yaml" <<YAML
seed: 11
target: {url: "$SERVE_URL", connections: 64, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  read: {kind: get, path: "/v1/sites/north"}
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"n":1}'}
  make: {kind: write, method: PUT, path: "/v1/gw/g-{{seq}}", body: '{"n":1}', creates: true}
  drop: {kind: write, method: DELETE, path: "/v1/gw/{{pick:make}}", deletes: true}
phases:
  - {name: ramp, ramp: {from: 10/s, to: 50/s}, duration: 2s, mix: {read: 1}}
  - {name: aligned, duration: 2s, fleet: {agents: 60, every: 1s, timing: aligned, send: renew}}
  - name: spread
    duration: 3s
    fleet: {agents: 80, every: 1s, timing: spread, join: 1s, leave: 1s, send: renew}
  - {name: jitter, duration: 2500ms, fleet: {agents: 100, every: 1s, timing: jitter,
     jitter: 20%, send: renew}}
  - {name: churn, duration: 2s, churn: {create: make, delete: drop, rate: 40/s, population: 30}}
objectives: # the reads are of an object that does not exist: this test counts, it does not judge
  - {class: read, error-rate: 100%}
YAML

# check's per-class estimates: "PHASE CLASS COUNT".
"$SQUALL" check "$T/m.yaml" | awk '
    /^phase [0-9]+\/[0-9]+ / { ph = $3; sub(/:$/, "", ph) }
    /^    [a-z-]+ +[0-9]+ +requests$/ { print ph, $1, $2 }' >"$T/check"
run_plan "$T/r" "$T/m.yaml"
expect_rc "the run exits 0 (got $RUN_RC)" "$T/r" 0
PUTS=$(serve_stats 's["requests"]["PUT"].get("200", 0) + s["requests"]["PUT"].get("201", 0)')

/usr/bin/python3 - "$T/check" "$T/r" "$PUTS" <<'PY' || FAILED=1
import csv, json, math, sys
check = {}
for line in open(sys.argv[1]):
    ph, cls, n = line.split()
    check[(ph, cls)] = int(n)
d = json.load(open(sys.argv[2] + "/results.json"))
sent, planned = {}, {}
for c in d["cells"]:
    if not c["class"].endswith("/all-pages"):
        sent[(c["phase"], c["class"])] = sent.get((c["phase"], c["class"]), 0) + c["count"]
for r in csv.DictReader(open(sys.argv[2] + "/series.csv")):
    k = (r["phase"], r["class"])
    planned[k] = planned.get(k, 0) + float(r["planned"])
bad = 0
def expect(ok, what):
    global bad
    print(("ok: " if ok else "FAIL: ") + what)
    bad += not ok
# Jitter: 100 agents, first renew at t = 0 (their join time), then every 1 s +- 20 %: the 2nd and
# 3rd renews (1 s +- 0.2 s, 2 s +- 0.4 s) always fall inside the 2.5 s phase and the 4th (3 s +-
# 0.6 s) never, so exactly 300 are sent, where counting whole periods says 100 x 2.5 = 250. The
# model is an expectation (a normal approximation of each renew's time, sched_fleet_expected):
# it and the count must agree within 4 standard deviations of one agent's Bernoulli share.
for (ph, cls), n in sorted(sent.items()):
    p = planned.get((ph, cls), 0)
    if ph == "jitter":
        sd = math.sqrt(100 * 0.25)
        expect(abs(n - p) <= 4 * sd, f"{ph}/{cls}: sent {n} is within 4 sd of the planned {p:.1f}")
        expect(abs(check[(ph, cls)] - n) <= 4 * sd, f"{ph}/{cls}: check's {check[(ph, cls)]} too")
        continue
    expect(abs(n - p) < 1e-6, f"{ph}/{cls}: sent {n} = planned second by second {p:.3f}")
    if ph != "churn":  # churn's split depends on the population it meets; its total is checked
        expect(check.get((ph, cls)) == n, f"{ph}/{cls}: check said {check.get((ph, cls))}, sent {n}")
churn_check = sum(v for (ph, c), v in check.items() if ph == "churn")
churn_sent = sum(v for (ph, c), v in sent.items() if ph == "churn")
expect(churn_check == churn_sent == 40 * 2, f"churn: check {churn_check} = sent {churn_sent} = 80 ops")
# Hand arithmetic for the deterministic ones: ramp (10 + 50) / 2 * 2 s = 60; aligned 60 agents
# x 2 whole ticks = 120 (wherever the wall clock puts them, a 2 s phase holds 2 ticks of 1 s).
expect(sent[("ramp", "read")] == 60, f"ramp: {sent[('ramp', 'read')]} = (10 + 50) / 2 * 2")
expect(sent[("aligned", "renew")] == 120, f"aligned: {sent[('aligned', 'renew')]} = 60 x 2")
puts = sum(v for (ph, c), v in sent.items() if c == "renew") + sent.get(("churn", "make"), 0)
expect(puts == int(sys.argv[3]), f"the target answered {sys.argv[3]} PUTs, squall sent {puts}")
sys.exit(1 if bad else 0)
PY
exit $FAILED
