#!/usr/bin/env bash
# `squall profile` on the command line: the documented exit codes (0 plan written, 2 usage or a
# log it cannot use, 6 input/output), a mostly unparseable log refused with the format expected
# and a sample line, gzip read by its magic bytes with malformed lines counted, the Apache
# documentation's example line (Common Log Format) giving a plan `squall check` accepts, and
# standard output vs -o and --force.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/profile-cli"
D="$SRCDIR/tests/data/logs"
rm -rf "$T"
mkdir -p "$T"

"$SQUALL" profile "$D/garbage.log" >"$T/out" 2>"$T/err"
rc=$?
expect "a mostly unparseable log is refused: exit 2 (got $rc), nothing written" \
    bash -c "[ $rc = 2 ] && [ ! -s '$T/out' ] && [ \$(wc -l <'$T/err') = 1 ]"
expect "and the line names the format expected and shows a sample line" \
    bash -c "grep -q 'not a log squall reads: no format parses half of the first 134 lines' '$T/err' && grep -q 'as Common Log Format: %h %l %u %t \"%r\" %>s %b); line 1:' '$T/err'"
"$SQUALL" profile --format ndjson "$D/apache-common.log" >/dev/null 2>"$T/err"
rc=$?
expect "a given format the log is not in is refused: exit 2 (got $rc), naming it" \
    bash -c "[ $rc = 2 ] && grep -q 'expected NDJSON' '$T/err'"
"$SQUALL" profile "$T/missing.log" >/dev/null 2>"$T/err"
rc=$?
expect "a log that cannot be read: exit 6 (got $rc)" test $rc = 6

"$SQUALL" profile "$D/apache-common.log" >"$T/apache.yaml" 2>"$T/err"
rc=$?
expect "the Apache example line gives a plan on standard output (exit $rc)" test $rc = 0
"$SQUALL" check "$T/apache.yaml" >"$T/check" 2>&1
rc=$?
expect "which squall check accepts (exit $rc), one get of /apache_pb.gif" \
    bash -c "[ $rc = 0 ] && grep -q 'path: \"/apache_pb.gif\"' '$T/apache.yaml' && grep -q 'classes  1: get-apache-pb-gif (get)' '$T/check'"

gzip -c "$D/malformed.log" >"$T/day.log" # no .gz suffix: found by its magic bytes
"$SQUALL" profile "$T/day.log" -o "$T/day.yaml" 2>"$T/err"
rc=$?
expect "a gzip log is read (exit $rc) and its 13 malformed lines are counted" \
    bash -c "[ $rc = 0 ] && grep -q 'day.log: 13 malformed lines skipped' '$T/err' && grep -q '^# (Common Log Format, gzip): 28 requests' '$T/day.yaml' && grep -q '^# 13 malformed lines were skipped' '$T/day.yaml'"
"$SQUALL" profile "$T/day.log" -o "$T/day.yaml" 2>"$T/err"
rc=$?
expect "an existing -o file is kept without --force: exit 2 (got $rc)" \
    bash -c "[ $rc = 2 ] && grep -q 'pass --force' '$T/err'"
"$SQUALL" profile "$T/day.log" -o "$T/day.yaml" --force --target https://staging.example:8443 \
    2>/dev/null
rc=$?
expect "--force replaces it and --target sets the plan's target (exit $rc)" \
    bash -c "[ $rc = 0 ] && grep -q '^target: {url: \"https://staging.example:8443\"' '$T/day.yaml'"
[ "$FAILED" = 0 ] && echo "PASS: profile cli" || echo "FAIL: profile cli"
exit "$FAILED"
