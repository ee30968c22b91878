#!/usr/bin/env bash
# Object lifecycle against the embedded target: after fill, churn, picked reads and teardown the
# target holds exactly the objects it held before (its own /stats count, an outside view); the
# objects that existed before are never deleted; --keep leaves them and `squall cleanup` removes
# them, idempotently; SIGINT and a dead target still end with a bounded teardown that says what
# was left.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/life-target"
rm -rf "$T"
mkdir -p "$T"
objects() { serve_stats 's["objects"]'; }
lc() { rget "$1" "d['sections']['lifecycle']$2"; }

serve_start || exit 1
# Five objects that were there before: no run may delete them.
for i in 0 1 2 3 4; do
    curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/south/gateways/pre-$i" >/dev/null
done
BEFORE=$(objects)
expect "the target starts with the 5 pre-existing objects (got $BEFORE)" test "$BEFORE" = 5

plan() { # plan FILE CHURN_SECONDS TEARDOWN
    cat >"$1" <<YAML
seed: 11
target: {url: "$SERVE_URL", connections: 8, timeout: 2s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  add-gateway:
    {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"m":1}',
     creates: true}
  drop-gateway: {kind: write, method: DELETE, path: "/v1/sites/north/gateways/{{pick}}",
                 deletes: true}
  read-gateway: {kind: get, path: "/{{pick:add-gateway,path,zipf=1.1}}"}
phases:
  - {name: fill, rate: 50/s, duration: 2s, mix: {add-gateway: 1}}
  - {name: turn, duration: $2, churn: {create: add-gateway, delete: drop-gateway, rate: 40/s,
     population: 60}}
  - {name: read, rate: 50/s, duration: 1s, mix: {read-gateway: 1}}
$3
YAML
}

# --- churn, reads, teardown -------------------------------------------------------------------
# Arithmetic (the plan's): fill creates 50/s x 2 s = 100; churn at 40/s for 3 s = 120 ops first
# deletes 100 - 60 = 40, then alternates, 40 creates and 40 deletes: 140 created, 80 deleted, and
# teardown deletes the 60 left.
plan "$T/churn.yaml" 3s "  - {name: clean, teardown: {rate: 200/s}}"
run_plan "$T/churn" "$T/churn.yaml"
expect_rc "the churn run exits 0 (got $RUN_RC)" "$T/churn" 0
AFTER=$(objects)
expect "after churn and teardown the target holds exactly its $BEFORE objects (got $AFTER)" \
    test "$AFTER" = "$BEFORE"
rcheck "201 answers: fill 100 + churn 40 = 140 created; churn deleted 40 + 40 = 80" \
    "d['sections']['lifecycle']['created'] == 140 and d['sections']['lifecycle']['deleted'] == 80" \
    "$T/churn"
rcheck "teardown deleted the population of 60, none left, none failed" \
    "d['sections']['lifecycle']['teardown']['deleted'] == 60 and
     d['sections']['lifecycle']['teardown']['left'] == 0 and cell('clean', 'teardown', '2xx')['count'] == 60" \
    "$T/churn"
rcheck "the churn held the population at 60 once reached" \
    "d['sections']['lifecycle']['churn_population_min'] >= 59 and
     d['sections']['lifecycle']['churn_population_max'] <= 61" "$T/churn"
rcheck "and results.json says it held within its tolerance band 54..66 (60 ± 10 %)" \
    "d['sections']['lifecycle']['churn_population_held'] is True and
     d['sections']['lifecycle']['churn_population_low'] == 54 and
     d['sections']['lifecycle']['churn_population_high'] == 66" "$T/churn"
rcheck "reads picked objects that exist: 50 answers, all 2xx (the target's 200s)" \
    "cell('read', 'read-gateway', '2xx')['count'] == 50 and total('read-gateway', '4xx') == 0" \
    "$T/churn"
J="$T/churn/journal.ndjson"
expect "the journal names the target on its first line" grep -q "\"target\":\"$SERVE_URL\"" <(head -1 "$J")
"$SQUALL" cleanup "$T/churn" >"$T/c0.out" 2>&1
expect "cleanup after a clean run finds nothing alive" grep -q ": 0 alive" "$T/c0.out"

# --- objects that existed before are not ours ---------------------------------------------------
cat >"$T/pre.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 4}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  touch: {kind: write, method: PUT, path: "/v1/sites/south/gateways/pre-{{seq}}", body: '{"m":2}',
          creates: true}
phases:
  - {name: touch, rate: 100/s, duration: 100ms, mix: {touch: 1}}
YAML
run_plan "$T/pre" "$T/pre.yaml"
rcheck "PUT on the 5 existing objects answers 200, not 201: 5 existed, 5 created (pre-5..9)" \
    "d['sections']['lifecycle']['existed'] == 5 and d['sections']['lifecycle']['created'] == 5" \
    "$T/pre"
expect "implicit teardown removed only the 5 it created (count $(objects), expected $BEFORE)" \
    test "$(objects)" = "$BEFORE"

# --- discovery: an initial list fills a pool with objects the run did not create -------------
# The list's pages (2 items each, so 3 pages for the 5 objects) add every item's path to the
# list class's pool; reads pick from it; teardown leaves them alone: they are not ours.
cat >"$T/disc.yaml" <<YAML
seed: 3
target: {url: "$SERVE_URL", connections: 4}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  list-south: {kind: list, path: /v1/sites/south/gateways, page: 2}
  read-found: {kind: get, path: "/{{pick:list-south,path}}"}
phases:
  - {name: discover, rate: 1/s, duration: 1s, mix: {list-south: 1}}
  - {name: read, rate: 100/s, duration: 500ms, mix: {read-found: 1}}
YAML
run_plan "$T/disc" "$T/disc.yaml"
rcheck "the initial list walked 3 pages of 2" "cell('discover', 'list-south', '2xx')['count'] == 3" \
    "$T/disc"
rcheck "50 reads picked discovered objects: all answered 200 by the target" \
    "cell('read', 'read-found', '2xx')['count'] == 50 and total('read-found', '4xx') == 0" "$T/disc"
expect "nothing discovered was deleted (count $(objects), expected $BEFORE)" test "$(objects)" = "$BEFORE"
expect "and no journal was written: the plan creates nothing" test ! -e "$T/disc/journal.ndjson"

# --- --keep, then cleanup ---------------------------------------------------------------------
# Arithmetic (the plan's): fill creates 100; churn at 40/s for 1 s = 40 operations, all deletes
# while the population is above 60 (100 - 40 = 60 reaches it exactly): 60 objects stay.
plan "$T/keep.yaml" 1s ""
run_plan "$T/keep" "$T/keep.yaml" --keep
expect_rc "the --keep run exits 0 (got $RUN_RC)" "$T/keep" 0
KEPT=$(lc "$T/keep" "['teardown']['left']")
expect "--keep leaves the population of 100 - 40 = 60 objects (results say $KEPT)" \
    test "$KEPT" = 60
expect "--keep leaves the population on the target ($KEPT objects, target has $(objects))" \
    test "$(objects)" = $((BEFORE + KEPT))
"$SQUALL" cleanup "$T/keep" >"$T/c1.out" 2>&1
C1=$?
expect "squall cleanup exits 0 (got $C1)" test "$C1" = 0
expect "and deleted $KEPT" grep -q "$KEPT objects: $KEPT deleted" "$T/c1.out"
expect "and the target is back to $BEFORE objects (got $(objects))" test "$(objects)" = "$BEFORE"
"$SQUALL" cleanup "$T/keep/journal.ndjson" >"$T/c2.out" 2>&1
C2=$?
expect "a second cleanup exits 0 (got $C2)" test "$C2" = 0
expect "and deletes nothing: idempotent" grep -q ": 0 objects: 0 deleted" "$T/c2.out"

# --- SIGINT: teardown still runs -------------------------------------------------------------
plan "$T/int.yaml" 20s ""
# Signalled directly: under `timeout` the signal would arrive twice (timeout also sends it to its
# process group), and a second signal means "stop at once". The plan's 22 s bound the run.
"$SQUALL" run "$T/int.yaml" -o "$T/int" --quiet >"$T/int.stdout" 2>"$T/int.stderr" &
RP=$!
sleep 3
kill -INT "$RP"
wait "$RP"
RC=$?
expect "SIGINT mid-churn exits 5 (got $RC)" test "$RC" = 5
expect "and teardown still brought the target back to $BEFORE (got $(objects))" \
    test "$(objects)" = "$BEFORE"
rcheck "results.json says teardown deleted every object and left none" \
    "d['sections']['lifecycle']['teardown']['left'] == 0 and
     d['sections']['lifecycle']['teardown']['deleted'] == d['sections']['lifecycle']['teardown']['objects'] > 0" \
    "$T/int"

# --- Retry-After: 503s with "Retry-After: 2" are waited out ---------------------------------
# The target answers every /v1/ request 503 with Retry-After: 2 (RFC 9110, 10.2.3) for the
# first 1.5 s of cleanup, then recovers. Honouring the header, every first DELETE waits 2 s and
# succeeds on its second try; the fixed backoff alone (0.2 + 0.4 + 0.8 s over 4 tries) would
# give up before the target recovers.
plan "$T/retry.yaml" 1s ""
run_plan "$T/retry" "$T/retry.yaml" --keep
N=$(lc "$T/retry" "['teardown']['left']")
expect "the run before cleanup kept its 60 objects (results say $N)" test "$N" = 60
faults() { curl -s -X POST -d "$1" "$SERVE_URL/admin/faults" >/dev/null; }
faults '{"fail_rate": 1, "fail_status": 503, "retry_after": 2}'
"$SQUALL" cleanup "$T/retry" --rate 0 >"$T/retry.out" 2>&1 &
CP=$!
sleep 1.5
faults '{"fail_rate": 0}'
wait "$CP"
CRC=$?
expect "cleanup through 503 + Retry-After exits 0 (got $CRC)" test "$CRC" = 0
expect "with all $N deleted" \
    grep -q "$N objects: $N deleted, 0 already gone, 0 failed, 0 left, 0 not tried" "$T/retry.out"
SECS=$(sed -n 's/.*not tried (\([0-9.]*\) s).*/\1/p' "$T/retry.out")
expect "it waited the 2 s Retry-After before retrying (took $SECS s)" \
    /usr/bin/python3 -c "import sys; sys.exit(not 2.0 <= float('$SECS') < 10)"
FAILED503=$(serve_stats 's["faults"]["failed"]')
expect "the target saw $N first tries answered 503 (its count: $FAILED503)" test "$FAILED503" -ge "$N"
expect "and the target is back to $BEFORE objects (got $(objects))" test "$(objects)" = "$BEFORE"

# --- plan mistakes are refused before anything is sent -----------------------------------------
sed 's/- {name: read,/- {name: clean, teardown: true}\n  - {name: read,/' "$T/retry.yaml" >"$T/bad1.yaml"
"$SQUALL" run "$T/bad1.yaml" -o "$T/bad1" --quiet >"$T/bad1.out" 2>&1
BAD1=$?
expect "a teardown phase before the last phase exits 2 (got $BAD1)" test "$BAD1" = 2
expect "saying teardown must be the last phase" \
    grep -q "error: phase 'clean': teardown must be the last phase" "$T/bad1.out"
sed 's/{{pick:add-gateway,path,zipf=1.1}}/{{pick:add-gatway}}/' "$T/retry.yaml" >"$T/bad2.yaml"
"$SQUALL" run "$T/bad2.yaml" -o "$T/bad2" --quiet >"$T/bad2.out" 2>&1
BAD2=$?
expect "a pick of an unknown pool exits 2 (got $BAD2)" test "$BAD2" = 2
expect "naming the file, line, column and the word" \
    grep -q "bad2.yaml:[0-9]*:[0-9]*: error: class 'read-gateway': {{pick:add-gatway}}: unknown pick option 'add-gatway'" "$T/bad2.out"
expect "and nothing was created by either (count $(objects))" test "$(objects)" = "$BEFORE"

# --- a dead target: teardown is bounded and says what was left --------------------------------
timeout 90 "$SQUALL" run "$T/int.yaml" -o "$T/dead" --quiet >"$T/dead.stdout" 2>"$T/dead.stderr" &
RP=$!
sleep 3
kill -KILL "$SERVE_PID"
wait "$SERVE_PID" 2>/dev/null
SERVE_PID=
START=$(date +%s)
wait "$RP"
RC=$?
SECS=$(($(date +%s) - START))
# A target that answered before and then refuses connections is left to the brakes (it may be
# restarting): the error-rate brake (refused connections are errors) or the unreachable one,
# whichever holds first, stops the run.
expect "a dead target stops the run by a brake: exit 3 or 4 (got $RC)" test "$RC" = 3 -o "$RC" = 4
expect "teardown gave up within 40 s of the target dying (took ${SECS}s)" test "$SECS" -le 40
STILL=$(sed -n 's/.* \([0-9]*\) objects are still on the target (.*not tried).*squall cleanup .*/\1/p' "$T/dead.stderr")
expect "and said how many objects are still on the target, with the cleanup command ($STILL)" \
    test -n "$STILL" -a "${STILL:-0}" -gt 0
rcheck "results.json records the same: failed + left + not tried = $STILL" \
    "sum(d['sections']['lifecycle']['teardown'][k] for k in ('failed', 'left', 'not_tried')) == ${STILL:-0} > 0" \
    "$T/dead"
exit $FAILED
