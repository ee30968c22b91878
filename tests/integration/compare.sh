#!/usr/bin/env bash
# squall compare on real runs of the embedded target: the same plan with and without a 5 ms
# server-side delay (the target's --delay fixed:5ms) is a regression (exit 1), the reverse an
# improvement (exit 0), and three runs of one configuration compared pairwise are not a
# regression (exit 0 each). --json and --html are parsed. Exit codes: README, "Exit codes".
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/compare"
rm -rf "$T"
mkdir -p "$T"

plan() {
    cat >"$T/plan.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  write: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"n":{{seq}}}'}
phases:
  - {name: steady, rate: 100/s, duration: 8s, mix: {read: 3, write: 1}}
YAML
}

serve_start || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan
for k in 1 2 3; do
    run_plan "$T/same-$k" "$T/plan.yaml"
    expect "baseline run $k completes (exit $RUN_RC)" test "$RUN_RC" = 0
done
serve_stop
serve_start --delay fixed:5ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan
run_plan "$T/slow" "$T/plan.yaml"
expect "the 5 ms delay run completes (exit $RUN_RC)" test "$RUN_RC" = 0
serve_stop

"$SQUALL" compare "$T/same-1" "$T/slow" >"$T/reg.txt" 2>&1
RC=$?
expect "BASE without delay vs NEW with 5 ms: a regression, exit 1 (got $RC)" test "$RC" = 1
expect "p50 of read and write are named regressions" \
    test "$(grep -cE '^steady +(read|write) +p50 .*REGRESSION$' "$T/reg.txt")" = 2
"$SQUALL" compare "$T/slow" "$T/same-1" >"$T/imp.txt" 2>&1
RC=$?
expect "the reverse is an improvement, not a regression: exit 0 (got $RC)" test "$RC" = 0
expect "and says improvement for p50 of read" \
    grep -qE '^steady +read +p50 .*improvement$' "$T/imp.txt"

for pair in "1 2" "2 3" "1 3"; do
    set -- $pair
    "$SQUALL" compare "$T/same-$1" "$T/same-$2" >"$T/same-$1-$2.txt" 2>&1
    RC=$?
    expect "two runs of one configuration ($1 vs $2) are no regression: exit 0 (got $RC)" \
        test "$RC" = 0
    [ "$RC" = 0 ] || cat "$T/same-$1-$2.txt"
done

# --json: the document, and the measured shift against the known delay: the p50 change of
# read is the injected 5 ms within 2 ms (the response time is the server delay plus loopback).
"$SQUALL" compare "$T/same-1" "$T/slow" --json --html "$T/cmp.html" >"$T/cmp.json" 2>"$T/cmp.err"
/usr/bin/python3 - "$T/cmp.json" "$T/cmp.html" <<'PY' || FAILED=1
import html.parser, json, sys
d = json.load(open(sys.argv[1]))
bad = 0
def check(desc, cond, detail=""):
    global bad
    print(("ok: " if cond else "FAIL: ") + desc + ("" if cond else "  [%s]" % (detail,)))
    bad |= not cond
check("JSON: format squall-compare 1, regression true",
      d["format"] == "squall-compare" and d["version"] == 1 and d["regression"] is True)
lines = {(l["class"], l["metric"]): l for l in d["lines"]}
check("JSON: 2 classes x 4 metrics", len(d["lines"]) == 8, len(d["lines"]))
r = lines[("read", "p50")]
check("read p50 moved by the injected 5 ms within 2 ms (%.2f ms)" % (r["new"] - r["base"]),
      abs(r["new"] - r["base"] - 5) <= 2, r)
check("read p50: p < 0.01 over 8+ per-second samples each",
      r["p"] < 0.01 and r["n_base"] >= 8 and r["n_new"] >= 8, r)
page = open(sys.argv[2]).read()
class P(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.svgs, self.series = [], 0, []
    def handle_starttag(self, tag, a):
        a = dict(a)
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "svg":
            self.svgs += 1
            self.series.append(0)
        if tag == "g" and a.get("class") == "series":
            self.series[-1] += 1
p = P()
p.feed(page)
check("HTML: sections runs, verdicts, spectra", all(s in p.ids for s in ("runs", "verdicts", "spectra")),
      p.ids)
check("HTML: one spectrum per class, each with BASE and NEW", p.series == [2, 2], p.series)
check("HTML: says REGRESSION, no scripts", "REGRESSION" in page and "<script" not in page)
sys.exit(bad)
PY

"$SQUALL" compare "$T/same-1" >/dev/null 2>&1
RC=$?
expect "one directory only is a usage mistake: exit 2 (got $RC)" test "$RC" = 2
"$SQUALL" compare "$T/same-1" "$T/missing" >/dev/null 2>&1
RC=$?
expect "a missing directory: exit 6 (got $RC)" test "$RC" = 6

[ "$FAILED" = 0 ] && echo "compare: all checks passed"
exit "$FAILED"
