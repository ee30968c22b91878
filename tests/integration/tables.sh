#!/usr/bin/env bash
# The terminal tables with long phase and class names (`reconnect-storm`,
# `list-gateways/all-pages`), against the embedded target:
#  - the run summary's request and watch tables, the objectives table and `compare`'s table are
#    laid out exactly as util-linux column(1) lays out the same cells (-t, two-space separator,
#    -R for the numeric columns): every column as wide as its widest cell, nothing shifted;
#  - the objectives table's lines are exact (a threshold once, as the plan wrote it), and the
#    teardown's deletes are not judged by "*";
#  - `check`'s per-class counts are exact lines (the counts are the model's: DEVELOPERS.md);
#    several plans are checked at once (exit code: the worst); errors come sorted by position;
#    a --set mistake names that --set by its order and lists the valid names.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/tables"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1
expect() {
    local desc=$1
    shift
    if "$@"; then echo "ok: $desc"; else echo "FAIL: $desc"; FAILED=1; fi
}

cat >"$T/long.yaml" <<YAML
seed: 11
target: {url: "$SERVE_URL", http: "1.1", connections: 16, timeout: 5s}
accept: [generator-bound] # a lagging second of this shared machine is listed, not fatal
requests:
  register-gateway:
    kind: write
    method: PUT
    path: "/v1/gateways/gw-{{seq}}"
    body: '{"site":"north","stamp":{{now_ns}}}'
    creates: true
  list-gateways: {kind: list, path: "/v1/gateways", page: 4}
  follow-gateways:
    kind: watch
    path: "/v1/gateways?watch=1"
    stamp-key: stamp
phases:
  - {name: warm, duration: 1s, rate: 20/s, mix: {register-gateway: 1}}
  - name: reconnect-storm
    duration: 2s
    rate: 20/s
    mix: {register-gateway: 3, list-gateways: 1}
    watches: {follow-gateways: 2}
objectives:
  - {class: "*", error-rate: 5%}
YAML

# The block of lines from the one equal to $2 (a title) to the next blank line, title excluded.
block() { awk -v t="$2" '$0 == t { on = 1; next } on && $0 == "" { exit } on' "$1"; }
# Lays the block's cells out with column(1): cells are split at runs of 2+ blanks (no cell
# holds two blanks in a row), the right-aligned columns are $2.
column_ref() {
    sed -E 's/^ +//; s/ {2,}/\t/g' | column -t -s $'\t' -o '  ' -R "$1"
}
same_layout() { # FILE TITLE RIGHT-COLUMNS [LINES TO DROP AT THE END]
    block "$1" "$2" | head -n "-${4:-0}" >"$T/got"
    column_ref "$3" <"$T/got" >"$T/want"
    test -s "$T/got" && diff "$T/want" "$T/got" >&2
}
# The watch table shares the request table's phase and class widths (the two line up): a row
# of the longest names and 0s (which widen nothing) is laid out with it, then dropped.
same_layout_shared() { # FILE TITLE RIGHT-COLUMNS
    block "$1" "$2" >"$T/got"
    { head -1 "$T/got"; printf 'reconnect-storm  list-gateways/all-pages'; printf '  0%.0s' $(seq 10)
      echo; tail -n +2 "$T/got"; } | column_ref "$3" | sed 2d >"$T/want"
    test -s "$T/got" && diff "$T/want" "$T/got" >&2
}

# Not run_plan: --quiet would leave the summary out.
timeout 120 "$SQUALL" run "$T/long.yaml" -o "$T/a" >"$T/a.stdout" 2>"$T/a.stderr"
RUN_RC=$?
expect "the run exits 0 (got $RUN_RC; $(tail -2 "$T/a.stderr"))" test "$RUN_RC" = 0
S="$T/a.stdout"
expect "the request table is laid out as column(1) lays out its cells" \
    same_layout "$S" "requests: response time from each request's intended start (ms)" 3,4,5,6,7,8,9,10
expect "the watch table is laid out as column(1) lays out its cells" \
    same_layout_shared "$S" "watches: open and propagation times (ms)" 3,4,5,6,7,8,9,10,11,12
expect "the objectives table is laid out as column(1) lays out its cells" \
    same_layout "$S" "objectives" 5 1
# Exact lines: both tables' phase and class columns as wide as the longest names (15 and 23).
expect "the request table's long names, exactly" \
    grep -qE '^reconnect-storm  list-gateways/all-pages +[0-9]+ +[0-9.]+ +0 ' "$S"
expect "the request table's header starts exactly" \
    grep -qx 'phase            class                    requests  per s  errors .*  svc p99' "$S"
expect "the watch table has its own header and row, aligned with the request table" \
    test "$(grep -cE '^phase            class                    streams  events  drops  reconnects  relists  open p50  open p99  prop p50  prop p99  prop max$' "$S")" = 1 -a \
    "$(grep -cE '^reconnect-storm  follow-gateways  +2 +[0-9]+ +0 +0 +0 +[0-9.]+ ' "$S")" = 1
expect "no watch class in the request table, no free text about events" \
    test "$(grep -c 'events (watch)' "$S")" = 0 -a "$(block "$S" "requests: response time from each request's intended start (ms)" | grep -c follow-gateways)" = 0
# Every check of "*": each class that ran in each phase and the run, 0 errors (loopback, the
# embedded target). Lines from Python's own padding; the order of classes is the order cells
# were first seen, so the lines are compared as a set. The teardown is not among them.
/usr/bin/python3 - "$S" <<'PY' || FAILED=1
import sys
text = open(sys.argv[1]).read()
got = text.split("\nobjectives\n", 1)[1].split("\n")
rows = [("warm", "register-gateway"), ("run", "register-gateway")] + \
    [("reconnect-storm", c) for c in ("register-gateway", "list-gateways",
                                      "list-gateways/all-pages", "follow-gateways")] + \
    [("run", c) for c in ("list-gateways", "list-gateways/all-pages", "follow-gateways")]
want = {f"pass     {s:<15}  {c:<23}  error rate <= 5%  {'0.00%':>8}" for s, c in rows}
header = f"verdict  {'scope':<15}  {'class':<23}  {'objective':<16}  observed"
ok = got[0] == header and set(got[1:1 + len(want)]) == want and \
    got[1 + len(want)] == f"all {len(want)} objective checks passed"
print(("ok" if ok else "FAIL") + ": the objectives table, line by line (no teardown, 5% once)")
if not ok:
    print("\n".join(got[:len(want) + 2]))
sys.exit(0 if ok else 1)
PY

run_plan "$T/b" "$T/long.yaml"
"$SQUALL" compare "$T/a" "$T/b" >"$T/cmp.txt" 2>"$T/cmp.err"
{ echo; cat "$T/cmp.txt"; } | awk 'NR == 1 { print "compare"; next } { print }' >"$T/cmp.blk"
expect "compare's table is laid out as column(1) lays out its cells" \
    same_layout "$T/cmp.blk" compare 4,5,6,7
expect "compare's long names, exactly" \
    grep -qE '^reconnect-storm  list-gateways/all-pages  p50 ' "$T/cmp.txt"

# check: the per-class counts (warm: 20/s x 1 s; reconnect-storm: 20/s x 2 s, mix 3:1).
"$SQUALL" check "$T/long.yaml" >"$T/check.txt" 2>&1
expect "check's counts are exact lines, one name column for every phase" \
    test "$(grep -cxF -e '    register-gateway  20  requests' -e '    register-gateway  30  requests' \
        -e '    list-gateways     10  requests' -e '    follow-gateways    2  streams' "$T/check.txt")" = 4

# Several plans: the exit code is the worst; each invalid one is named.
printf 'target: {url: "%s"}\nrequests:\n  a: {kind: get, path: /x}\nphases:\n  - {name: p, duration: 1s, rate: 5/s, mix: {b: 1}}\n  - {name: p, duration: 1s, rate: 5/s, mix: {a: 1}}\nobjectives:\n  - {class: zz, p99: 1s}\n  - {class: a, p99: 1q}\n' \
    "$SERVE_URL" >"$T/bad.yaml"
"$SQUALL" check "$T/long.yaml" "$T/long.yaml" >/dev/null 2>"$T/two.err"
expect "two valid plans: exit 0 and a count ($(cat "$T/two.err"))" \
    test $? = 0 -a "$(cat "$T/two.err")" = "checked 2 plans: 2 valid, 0 not"
"$SQUALL" check "$T/long.yaml" "$T/bad.yaml" >"$T/mixed.out" 2>"$T/mixed.err"
rc=$?
expect "a valid and an invalid plan: exit 2, the worst (got $rc)" test "$rc" = 2
# The parser finds these in another order (the duplicate phase and the bad duration first).
cat >"$T/sorted" <<EOF
$T/bad.yaml:5:46: error: phases.p.mix: unknown class 'b' (did you mean 'a'?)
$T/bad.yaml:6:12: error: phases.p: phase defined twice (first at $T/bad.yaml:5:5)
$T/bad.yaml:8:13: error: objectives[0].class: unknown class 'zz' (did you mean 'a'?)
$T/bad.yaml:9:21: error: objectives[1].p99: malformed value (expected a duration like 250ms, 1.5s, 5m or 1h above 0, got '1q')
$T/bad.yaml: not valid (the errors above)
checked 2 plans: 1 valid, 1 not
EOF
expect "errors sorted by line and column, the plan named, a count" diff "$T/sorted" "$T/mixed.err"
expect "the valid plan is still reported valid" grep -q "^plan     $T/long.yaml: valid$" "$T/mixed.out"

# --set mistakes: which --set (by order), and the valid names.
"$SQUALL" check "$T/long.yaml" --set target.connections=4 --set phases.reconect-storm.rate=5/s \
    --set target.conections=3 >/dev/null 2>"$T/set.err"
rc=$?
cat >"$T/set.want" <<'EOF'
--set #2 phases.reconect-storm.rate=5/s: error: no list item 'reconect-storm' (expected a name or index of an item in the top plan file: warm, reconnect-storm)
--set #3 target.conections=3: error: target: unknown key 'conections' (did you mean 'connections'? expected one of: url, http, connections, streams, timeout, headers, tls, token, max_body)
EOF
expect "--set mistakes name their --set and list the valid names (exit $rc)" \
    test "$rc" = 2 -a "$(diff "$T/set.want" "$T/set.err" >&2; echo $?)" = 0

[ "$FAILED" = 0 ] || exit 1
echo "PASS: tables"
