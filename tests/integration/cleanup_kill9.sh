#!/usr/bin/env bash
# `squall cleanup` after `kill -9` of a run mid-churn: the journal (written ahead of every create)
# shows what may be alive, cleanup deletes it and the embedded target's own /stats count is back
# to where it started. A torn last line is reported and skipped, a second cleanup deletes
# nothing, and a journal naming a non-loopback target is refused without --confirm-target.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/cleanup-kill9"
rm -rf "$T"
mkdir -p "$T"
objects() { serve_stats 's["objects"]'; }

serve_start || exit 1
for i in 0 1 2; do
    curl -s -X PUT -d '{"model":"t-b"}' "$SERVE_URL/v1/sites/harbor/gateways/old-$i" >/dev/null
done
BEFORE=$(objects)
cat >"$T/churn.yaml" <<YAML
seed: 5
target: {url: "$SERVE_URL", connections: 8, timeout: 2s}
requests:
  add-gateway: {kind: write, method: PUT, path: "/v1/sites/harbor/gateways/gw-{{seq}}",
                body: '{"m":1}', creates: true}
  drop-gateway: {kind: write, method: DELETE, path: "/v1/sites/harbor/gateways/{{pick}}",
                 deletes: true}
phases:
  - {name: turn, duration: 60s, churn: {create: add-gateway, delete: drop-gateway, rate: 200/s,
     population: 150}}
YAML
# Started directly (not under timeout) so that kill -9 reaches squall itself; the trap stops it
# by pid should the test end early, and the plan's 60 s bound it anyway.
"$SQUALL" run "$T/churn.yaml" -o "$T/out" --quiet >"$T/run.stdout" 2>"$T/run.stderr" &
RP=$!
stop_all() {
    kill -KILL "$RP" 2>/dev/null
    serve_stop
}
trap stop_all EXIT
# Mid-churn: the population of 150 is reached after 0.75 s at 200/s; wait until deletes run too.
for ((i = 0; i < 100; i++)); do
    [ "$(grep -c '"op":"deleted"' "$T/out/journal.ndjson" 2>/dev/null)" -ge 50 ] && break
    sleep 0.1
done
kill -KILL "$RP"
wait "$RP" 2>/dev/null
MID=$(objects)
expect "kill -9 mid-churn left objects behind ($MID on the target, $BEFORE before)" \
    test "$MID" -gt "$BEFORE"
expect "the run was killed before it could tear down (no results.json)" \
    test ! -e "$T/out/results.json"

"$SQUALL" cleanup --dry-run "$T/out" >"$T/dry.out" 2>"$T/dry.err"
DRY=$(grep -c '^/v1/sites/harbor/gateways/gw-' "$T/dry.out")
expect "--dry-run lists the $DRY alive paths and deletes nothing (count $(objects), was $MID)" \
    test "$(objects)" = "$MID" -a "$DRY" -ge $((MID - BEFORE))
expect "--dry-run's stdout is only paths, one a line (pipeable); its status is on stderr" \
    test "$(grep -vc '^/v1/sites/harbor/gateways/gw-[0-9]*$' "$T/dry.out")" = 0 -a \
    "$(grep -c '^journal .*: [0-9]* alive' "$T/dry.err")" = 1

# A crash mid-write: half a record with no newline at the end of the journal.
printf '{"op":"created","path":"/v1/sites/harbor/gatew' >>"$T/out/journal.ndjson"
"$SQUALL" cleanup "$T/out" >"$T/c1.out" 2>&1
C1=$?
expect "cleanup exits 0 (got $C1)" test "$C1" = 0
expect "it reported the torn last line and went on" grep -q "torn last line skipped" "$T/c1.out"
AFTER=$(objects)
expect "the target is back to its starting $BEFORE objects (got $AFTER)" test "$AFTER" = "$BEFORE"
ALIVE=$(sed -n 's/.*: \([0-9]*\) alive (.*/\1/p' "$T/c1.out")
expect "cleanup deleted what the target held beyond its start: $((MID - BEFORE)) of $ALIVE alive" \
    grep -q "$ALIVE objects: $((MID - BEFORE)) deleted, $((ALIVE - MID + BEFORE)) already gone" "$T/c1.out"

"$SQUALL" cleanup "$T/out/journal.ndjson" >"$T/c2.out" 2>&1
C2=$?
expect "a second cleanup exits 0 (got $C2) with nothing alive" grep -q ": 0 objects: 0 deleted" "$T/c2.out"
expect "and the count stays $BEFORE (got $(objects))" test "$(objects)" = "$BEFORE"

# Safety: a journal from a run against a non-loopback target (192.0.2.1, TEST-NET-1 of RFC 5737,
# never contacted: the refusal comes first).
mkdir -p "$T/remote"
{
    printf '{"squall_journal":1,"target":"http://192.0.2.1:7070","started_unix_ms":0}\n'
    printf '{"op":"created","path":"/v1/gateways/gw-1","class":"x","t":0}\n'
} >"$T/remote/journal.ndjson"
"$SQUALL" cleanup "$T/remote" >"$T/c3.out" 2>&1
C3=$?
expect "a non-loopback journal target is refused with exit 2 (got $C3)" test "$C3" = 2
expect "naming --confirm-target" grep -q -- "--confirm-target" "$T/c3.out"
exit $FAILED
