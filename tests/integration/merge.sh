#!/usr/bin/env bash
# `squall merge` on real results files: two shard files written by the unit-test helper
# (tests/unit/test_results.c --write-fixtures) from one seeded sample stream, merged by the
# real binary, must equal the file that recorded every sample itself (same counters, and
# byte-identical histogram encodings, i.e. the same count in every bucket). Also checks the
# refusals and exit codes (README "Exit codes": 2 usage, 6 input/output, 7 inconclusive: the
# fixtures carry no judgement section, so the merge has nothing to judge them on).
set -uo pipefail
helper="$BUILDDIR/tests/unit/test-results"
if [ ! -x "$helper" ]; then
    echo "FAIL: $helper not built (it needs cmocka: tools/setup installs libcmocka-dev)"
    exit 1
fi
tmp=$(mktemp -d /tmp/squall-merge-XXXXXX)
trap 'rm -rf "$tmp"' EXIT
fail() { echo "FAIL: $*"; exit 1; }

"$helper" --write-fixtures "$tmp" || fail "fixture helper failed"

"$SQUALL" merge "$tmp/a" "$tmp/b/results.json" -o "$tmp/merged" >"$tmp/stdout" 2>"$tmp/err"
rc=$?
out=$(cat "$tmp/err")
[ $rc -eq 7 ] || fail "merge exited $rc, expected 7 (nothing to judge): $out"
# merge talks on stderr: the results are on disk, stdout stays empty (only --json writes there).
[ ! -s "$tmp/stdout" ] || fail "merge wrote to stdout without --json: $(cat "$tmp/stdout")"
echo "$out" | grep -q "^merged 2 inputs: " || fail "unexpected summary: $out"
echo "$out" | grep -q "^verdict: INCONCLUSIVE" || fail "no INCONCLUSIVE verdict: $out"
echo "$out" | grep -q "the inputs carry no judgement section" || fail "no reason given: $out"
echo "ok: merge of two shards without a judgement exited 7 (INCONCLUSIVE, not a pass)"

/usr/bin/python3 - "$tmp/merged/results.json" "$tmp/all/results.json" "$tmp/a/results.json" \
    "$tmp/b/results.json" <<'PY' || fail "merged file differs from the all-samples file"
import json, sys
merged, whole, a, b = (json.load(open(p)) for p in sys.argv[1:])
key = lambda c: (c["phase"], c["class"], c["outcome"])
m = {key(c): c for c in merged["cells"]}
w = {key(c): c for c in whole["cells"]}
assert m.keys() == w.keys(), f"cell sets differ: {set(m) ^ set(w)}"
for k, cw in w.items():
    cm = m[k]
    for f in ("count", "bytes_in", "bytes_out"):
        assert cm[f] == cw[f], f"{k} {f}: merged {cm[f]} != all {cw[f]}"
    assert cm["hist"] == cw["hist"], f"{k}: histograms differ"
    assert cm["summary"] == cw["summary"], f"{k}: summaries differ"
total = sum(c["count"] for c in merged["cells"])
shards = sum(c["count"] for c in a["cells"]) + sum(c["count"] for c in b["cells"])
assert total == shards == 5000, f"totals: merged {total}, shards {shards}, expected 5000"
meta = merged["meta"]
assert meta["shard"] is None, meta["shard"]
got = [(i["name"].split("/")[-1], i["shard"]["index"], i["shard"]["count"]) for i in meta["inputs"]]
assert [g[1:] for g in got] == [(1, 2), (2, 2)], got
assert meta["start"] == a["meta"]["start"], (meta["start"], a["meta"]["start"])
assert meta["duration_ns"] == 30000000000 + 40 * 1000000, meta["duration_ns"]
print(f"ok: {len(m)} cells, {total} requests; counters, histograms and summaries equal the "
      "all-samples file; inputs list shards 1/2 and 2/2; span = earliest start to latest end")
PY
[ $? -eq 0 ] || exit 1

"$SQUALL" merge "$tmp/a" "$tmp/b" -o "$tmp/merged" >/dev/null 2>"$tmp/err"
[ $? -eq 2 ] || fail "merging over an existing results.json without --force should exit 2"
grep -q "pass --force" "$tmp/err" || fail "no hint about --force: $(cat "$tmp/err")"
"$SQUALL" merge "$tmp/a" "$tmp/b" -o "$tmp/merged" --force >/dev/null 2>"$tmp/err"
[ $? -eq 7 ] || fail "--force did not replace: $(cat "$tmp/err")"
echo "ok: existing output refused (exit 2) unless --force"

"$SQUALL" merge "$tmp/a" "$tmp/coarse" -o "$tmp/m2" >/dev/null 2>"$tmp/err"
rc=$?
[ $rc -eq 2 ] || fail "mismatched histogram configurations: exit $rc, expected 2"
grep -q "coarse: histograms (lowest 1000, highest 3600000000000, 2 digits) differ" "$tmp/err" ||
    fail "unclear mismatch message: $(cat "$tmp/err")"
[ ! -e "$tmp/m2/results.json" ] || fail "a refused merge wrote output"
echo "ok: mismatched histogram configurations refused (exit 2): $(cat "$tmp/err")"

sed 's/"version": 1,/"version": 7,/' "$tmp/a/results.json" >"$tmp/v7.json"
"$SQUALL" merge "$tmp/v7.json" "$tmp/b" -o "$tmp/m3" >/dev/null 2>"$tmp/err"
rc=$?
[ $rc -eq 6 ] || fail "unsupported version: exit $rc, expected 6"
grep -q "v7.json: error: results version 7 is not supported (this squall reads version 1)" \
    "$tmp/err" || fail "unclear version message: $(cat "$tmp/err")"
echo "ok: unsupported version refused (exit 6): $(cat "$tmp/err")"

"$SQUALL" merge "$tmp/a" "$tmp/b" >/dev/null 2>"$tmp/err"
[ $? -eq 2 ] || fail "missing -o should exit 2"
echo "ok: missing -o is a usage error (exit 2)"
echo "PASS: squall merge"
