#!/usr/bin/env bash
# observe.metrics: squall scrapes the embedded target's /metrics (OpenMetrics 1.0) every second
# while it writes 200 leases/s for 10 s. Checked from outside squall's own figures:
#   - the target's request counter, read from metrics.csv over the load, rises at the rate the
#     run achieved within 2 % (the issue's bound), and its derived rate series says the same;
#   - the histogram's p99 per interval in results.json equals the one computed here in Python
#     from metrics.csv's cumulative buckets by Prometheus's documented histogram_quantile rule
#     (prometheus.io, "Query functions": linear within the bucket, the +Inf bucket gives the
#     highest finite bound), written for this test from the documentation, not from our C;
#   - a refused endpoint and one that answers JSON are counted as failed scrapes with their
#     reason, and the run still ends PASS (a scrape never stops a run);
#   - report.html has the section with its plots; check refuses an interval under 250 ms and a
#     scrape URL off loopback without --confirm-target. About 30 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
T="$BUILDDIR/metrics-scrape"
rm -rf "$T"
mkdir -p "$T"
source "$SRCDIR/tests/integration/lib/run.sh"
FAILED=0

serve_start || exit 1
CLOSED=$(free_port) # nothing listens there
cat >"$T/plan.yaml" <<PLAN
seed: 11
# This test is about what squall does beside the load, not the verdict: a second in which this
# shared machine held squall back (generator-bound) must not turn the run INCONCLUSIVE here.
accept: [generator-bound]
target: {url: "$SERVE_URL", connections: 8}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{seq}}", body: '{"holder":"gw"}'}
phases:
  - {name: steady, duration: 10s, rate: 200/s, mix: {renew: 1}}
  - {name: teardown, teardown: {rate: 1000/s}}
observe:
  metrics:
    - url: $SERVE_URL/metrics
      every: 1s
      keep: [squall_target_requests_total, squall_target_request_seconds]
    - {url: "http://127.0.0.1:$CLOSED/metrics", every: 2s}
    - {url: "$SERVE_URL/stats", every: 2s}
PLAN
"$SQUALL" run "$T/plan.yaml" -o "$T/out" -q >"$T/run.out" 2>"$T/run.err"
rc=$?
expect "the run passes although two endpoints fail (exit $rc)" test "$rc" = 0
expect "metrics.csv written" test -s "$T/out/metrics.csv"

/usr/bin/python3 - "$T/out" <<'PY' || FAILED=1
import csv, json, math, sys
from datetime import datetime
d = sys.argv[1]
res = json.load(open(f"{d}/results.json"))
t0 = datetime.fromisoformat(res["meta"]["start"].replace("Z", "+00:00")).timestamp() * 1000
steady = next(p for p in res["sections"]["phases"]["phases"] if p["name"] == "steady")
lo = t0 + (steady["start_s"] + 1) * 1000
hi = t0 + (steady["start_s"] + steady["elapsed_s"] - 1) * 1000
done = sum(c["count"] for c in res["cells"] if c["phase"] == "steady" and c["outcome"] == "2xx")
achieved = done / steady["elapsed_s"]
rows = list(csv.DictReader(open(f"{d}/metrics.csv")))
bad = 0
def ok(what, cond):
    global bad
    print(("ok   " if cond else "FAIL ") + what)
    bad += not cond
puts = [(int(r["unix_ms"]), float(r["value"])) for r in rows
        if r["metric"] == "squall_target_requests_total" and r["labels"] == 'method="PUT",code="201"'
        and lo <= int(r["unix_ms"]) <= hi]
ok(f"{len(puts)} scrapes of the PUT counter inside the load", len(puts) >= 6)
(ta, va), (tb, vb) = puts[0], puts[-1]
rate = (vb - va) / ((tb - ta) / 1000)
ok(f"counter rate {rate:.1f}/s vs achieved {achieved:.1f}/s within 2 %",
   abs(rate - achieved) / achieved < 0.02)
m = res["sections"]["metrics"]
eps = m["endpoints"]
ok("first endpoint scraped as openmetrics, none failed",
   eps[0]["format"] == "openmetrics" and eps[0]["failed"] == 0 and eps[0]["scrapes"] >= 10)
ok(f"refused endpoint counted: {eps[1]['failed']} failed, {eps[1].get('last_error')}",
   eps[1]["failed"] >= 3 and eps[1]["scrapes"] == 0 and "connect-refused" in eps[1]["last_error"])
ok(f"JSON endpoint counted: {eps[2]['failed']} failed, {eps[2].get('last_error')}",
   eps[2]["failed"] >= 3 and "malformed metrics" in eps[2]["last_error"])
ser = m["series"]
rs = next(s for s in ser if s["kind"] == "rate" and s["labels"] == 'method="PUT",code="201"')
inside = [v for t, v in rs["points"] if lo + 1000 <= t <= hi]
mean = sum(inside) / len(inside)
ok(f"derived rate mean {mean:.1f}/s within 2 % of achieved", abs(mean - achieved) / achieved < 0.02)
# histogram_quantile from the CSV's buckets, per interval, against results.json's p99.
buckets = {}
for r in rows:
    if r["metric"] == "squall_target_request_seconds_bucket":
        le = r["labels"].split('le="')[1].rstrip('"')
        buckets.setdefault(int(r["unix_ms"]), {})[float(le)] = float(r["value"])
times = sorted(buckets)
def hq(q, b):
    bounds = sorted(b)
    total = b[bounds[-1]]
    if total <= 0:
        return None
    rank = q * total
    prev_b, prev_c = 0.0, 0.0
    for ub in bounds:
        if b[ub] >= rank:
            if math.isinf(ub):
                return bounds[-2]
            return prev_b + (ub - prev_b) * (rank - prev_c) / (b[ub] - prev_c)
        prev_b, prev_c = ub, b[ub]
p99 = dict((t, v) for t, v in next(s for s in ser if s["kind"] == "p99")["points"])
checked = 0
for a, b in zip(times, times[1:]):
    inc = {ub: buckets[b][ub] - buckets[a].get(ub, 0) for ub in buckets[b]}
    want = hq(0.99, inc)
    if want is None:
        continue
    got = p99.get(b)
    if got is None or abs(got - want) > 1e-12 * max(1, abs(want)):
        ok(f"p99 at {b}: squall {got} vs histogram_quantile {want}", False)
    checked += 1
ok(f"p99 of {checked} intervals equal to histogram_quantile's", checked >= 5)
sys.exit(1 if bad else 0)
PY
expect "report.html shows the target's metrics with plots" \
    bash -c "grep -q 'id=\"target-metrics\"' '$T/out/report.html' && [ \$(sed -n '/id=\"target-metrics\"/,/<\/section>/p' '$T/out/report.html' | grep -c '<svg') -ge 2 ]"

# check: refused before anything is sent.
sed 's/every: 1s/every: 100ms/' "$T/plan.yaml" >"$T/fast.yaml"
"$SQUALL" check "$T/fast.yaml" >"$T/fast.out" 2>&1
expect "every: 100ms refused (exit $?)" grep -q "observe.metrics\[0\].every" "$T/fast.out"
sed "s#url: $SERVE_URL/metrics#url: http://10.255.255.1:9100/metrics#" "$T/plan.yaml" >"$T/far.yaml"
"$SQUALL" run "$T/far.yaml" -o "$T/far" -q >"$T/far.out" 2>&1
frc=$?
expect "a scrape off loopback needs --confirm-target (exit $frc)" \
    bash -c "[ $frc = 2 ] && grep -q 'confirm-target' '$T/far.out' && [ ! -e '$T/far/results.json' ]"

[ "$FAILED" = 0 ] && echo "metrics-scrape: all passed"
