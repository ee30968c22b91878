#!/usr/bin/env bash
# `squall check` end to end: exit codes as documented in README.md ("Exit codes": 0 valid plan,
# 2 plan error), the exact diagnostics of a broken plan on stderr, the summary of a good one on
# stdout, --set, and the caution printed for a target that is not loopback. Sends nothing.
set -uo pipefail
: "${SQUALL:?}" "${SRCDIR:?}"
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
fails=0
fail() { echo "FAIL: $*"; fails=$((fails + 1)); }

for plan in "$SRCDIR"/scenarios/*.yaml; do
    out=$("$SQUALL" check "$plan" 2>"$work/err"); rc=$?
    [ $rc -eq 0 ] || fail "$plan: exit $rc, expected 0: $(cat "$work/err")"
    grep -q "^plan     $plan: valid$" <<<"$out" || fail "$plan: no 'valid' line"
    [ -s "$work/err" ] && fail "$plan: unexpected stderr: $(cat "$work/err")"
    echo "ok: $(basename "$plan") is valid and summarised"
done

dir="$SRCDIR/tests/data/plans"
"$SQUALL" check "$dir/bad-many.yaml" >"$work/out" 2>"$work/err"; rc=$?
[ $rc -eq 2 ] || fail "bad-many: exit $rc, expected 2"
sed "s#@DIR@#$dir#g" "$dir/bad-many.expected" >"$work/want"
diff -u "$work/want" "$work/err" || fail "bad-many: stderr differs from bad-many.expected"
[ -s "$work/out" ] && fail "bad-many: a broken plan printed a summary"
echo "ok: bad-many exits 2 with its 9 expected error lines and no summary"

# demo's steady phase is 100/s for 10 s; at 20/s its 25% renew share is 20 * 10 * 25/100 = 50.
out=$("$SQUALL" check "$SRCDIR/scenarios/demo.yaml" --set phases.steady.rate=20/s)
grep -Eq '^ +renew +50 requests$' <<<"$out" || fail "--set phases.steady.rate: renew not 50"
echo "ok: --set phases.steady.rate=20/s gives 50 renews"

# A documentation address (RFC 5737 TEST-NET-1), never contacted: check sends nothing.
out=$("$SQUALL" check "$SRCDIR/scenarios/demo.yaml" --set target.url=http://192.0.2.10:7070)
grep -q '^caution: 192.0.2.10 is not loopback' <<<"$out" || fail "no caution for 192.0.2.10"
echo "ok: a target that is not loopback gets a caution line"

"$SQUALL" check >/dev/null 2>&1; rc=$?
[ $rc -eq 2 ] || fail "check without a plan: exit $rc, expected 2"
echo "ok: check without a plan is a usage error (exit 2)"

[ $fails -eq 0 ] && echo "check_plan: all passed" || { echo "check_plan: $fails failed"; exit 1; }
