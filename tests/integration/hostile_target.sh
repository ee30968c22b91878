#!/usr/bin/env bash
# squall against hostile targets (tests/integration/lib/hostile.py, a loopback server that answers
# every request in one bad way): each run ends on its own with results.json written, the bad
# answers counted under the outcome libcurl's reading gives them, and squall's peak RSS (VmHWM
# from /proc/PID/status, sampled while it runs) bounded. Then: target-controlled list items with
# CR LF or "@host" never reach a request line or a header, and a journal record path that names
# another host is refused by `squall cleanup` (it used to be joined to the origin as text).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/hostile-target"
rm -rf "$T"
mkdir -p "$T"
HOSTILE="$SRCDIR/tests/integration/lib/hostile.py"
HPID=
stop_hostile() {
    stop_pid "$HPID"
    HPID=
}
trap 'stop_hostile; serve_stop' EXIT

hostile_start() { # MODE: sets HPORT, HPID, HLOG
    HPORT=$(free_port)
    HLOG="$T/$1.requests"
    /usr/bin/python3 "$HOSTILE" "$1" "$HPORT" "$HLOG" --life 60 &
    HPID=$!
    wait_port "$HPORT" || { echo "FAIL: hostile.py $1 did not listen"; exit 1; }
}

# run_sampled OUT PLAN [ARGS...]: squall run in the background, its VmHWM sampled every 0.1 s
# until it exits (the last sample is its peak: VmHWM never decreases); sets RUN_RC and PEAK_KB.
run_sampled() {
    local out=$1 plan=$2 pid hwm
    shift 2
    rm -rf "$out"
    timeout 60 "$SQUALL" run "$plan" -o "$out" --quiet "$@" >"$out.stdout" 2>"$out.stderr" &
    pid=$!
    PEAK_KB=0
    while kill -0 "$pid" 2>/dev/null; do
        # timeout(1) is the child; squall is its child.
        for p in $(pgrep -P "$pid") "$pid"; do
            hwm=$(awk '/^VmHWM:/ {print $2}' "/proc/$p/status" 2>/dev/null)
            [ -n "$hwm" ] && [ "$(cat "/proc/$p/comm" 2>/dev/null)" = squall ] &&
                [ "$hwm" -gt "$PEAK_KB" ] && PEAK_KB=$hwm
        done
        sleep 0.1
    done
    wait "$pid"
    RUN_RC=$?
}

# One bad mode: a 2 s phase of gets and lists at 20/s, 2 s per-request timeout.
hostile_case() { # MODE EXPECTED-OUTCOMES(python list) [--set ...]
    local mode=$1 outcomes=$2
    shift 2
    hostile_start "$mode"
    cat >"$T/$mode.yaml" <<YAML
target: {url: "http://127.0.0.1:$HPORT", connections: 8, timeout: 2s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  scan: {kind: list, path: /v1/sites/north/gateways}
phases:
  - {name: steady, rate: 20/s, duration: 2s, mix: {read: 1, scan: 1}}
YAML
    run_sampled "$T/$mode" "$T/$mode.yaml" --no-brakes "$@"
    stop_hostile
    expect "$mode: squall ended by itself (exit $RUN_RC: 0, 1 or 7, never a crash or the timeout)" \
        test "$RUN_RC" = 0 -o "$RUN_RC" = 1 -o "$RUN_RC" = 7
    expect "$mode: results.json written" test -s "$T/$mode/results.json"
    # A request still out when the phase ends is cancelled by squall itself (the drain).
    rcheck "$mode: every planned request is counted, as one of $outcomes or cancelled" \
        "total('read') + total('scan') == 40 and \
         sum(total(c, o) for c in ('read', 'scan') for o in $outcomes + ['cancelled']) == 40 \
         and sum(total(c, o) for c in ('read', 'scan') for o in $outcomes) >= 8" "$T/$mode"
    expect "$mode: peak RSS ${PEAK_KB} KiB is under 200 MiB" test "$PEAK_KB" -lt 204800
}

# libcurl's reading of each (7.88.1, as observed here): a malformed status line is a weird server
# reply (transport-other); of two different Content-Lengths libcurl takes the last and waits for
# bytes that never come (timeout); garbage is an HTTP/0.9-looking answer libcurl refuses
# (transport-other) or a reset. At least 8 (the connections) end so; the rest may be cancelled.
hostile_case garbage "['transport-other', 'reset']"
hostile_case bad-status "['transport-other', 'reset']"
hostile_case two-lengths "['transport-other', 'reset', 'timeout']"
hostile_case endless-headers "['transport-other', 'reset', 'timeout']"
hostile_case silent "['timeout']"
# Bodies: a list keeps its body (for the continuation token) up to target.max_body; past it the
# request ends at once as body-too-large. A get streams its body and runs into its timeout.
hostile_case endless-chunked "['timeout', 'body-too-large']" --set target.max_body=1MiB
rcheck "endless-chunked: every list that ended on its own ended as body-too-large" \
    "total('scan', 'body-too-large') == total('scan') - total('scan', 'cancelled') > 0" \
    "$T/endless-chunked"
hostile_case huge "['timeout', 'body-too-large', '2xx']"
rcheck "huge (1 GiB): every list that ended on its own ended as body-too-large (16 MiB default)" \
    "total('scan', 'body-too-large') == total('scan') - total('scan', 'cancelled') > 0" "$T/huge"

# --- --no-brakes: a target that refuses every connection does not end the run -----------------
DEAD=$(free_port)
cat >"$T/dead.yaml" <<YAML
target: {url: "http://127.0.0.1:$DEAD", connections: 2, timeout: 2s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 10/s, duration: 2s, mix: {read: 1}}
YAML
run_sampled "$T/dead" "$T/dead.yaml" --no-brakes
expect "--no-brakes against a closed port: the run goes to its planned end (exit $RUN_RC, not 4)" \
    test "$RUN_RC" = 1 -o "$RUN_RC" = 7
rcheck "... with all 20 requests counted as connect-refused" \
    "total('read', 'connect-refused') == 20 and not d['meta']['interrupted']" "$T/dead"

# --- watch streams that never get an answer are waiting, not open -----------------------------
hostile_start silent
cat >"$T/waiting.yaml" <<YAML
target: {url: "http://127.0.0.1:$HPORT", connections: 2, timeout: 2s}
requests:
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1"}
phases:
  - {name: w, duration: 2s, watches: {follow: 50}}
YAML
run_sampled "$T/waiting" "$T/waiting.yaml" --no-brakes
stop_hostile
rcheck "50 streams the target accepted but never answered are waiting at the end, none open" \
    "d['sections']['watches']['w']['classes']['follow']['waiting_at_end'] == 50 and \
     d['sections']['watches']['w']['classes']['follow']['open_at_end'] == 0" "$T/waiting"

# --- target-controlled list items never reach a request line or a header ---------------------
hostile_start list-inject
cat >"$T/inject.yaml" <<YAML
target: {url: "http://127.0.0.1:$HPORT", connections: 2, timeout: 2s}
requests:
  list-north: {kind: list, path: /v1/sites/north/gateways, page: 2}
  read-found: {kind: get, path: "/{{pick:list-north,path}}"}
phases:
  - {name: discover, rate: 2/s, duration: 1s, mix: {list-north: 1}}
  - {name: read, rate: 20/s, duration: 1s, mix: {read-found: 1}}
YAML
run_sampled "$T/inject" "$T/inject.yaml" --no-brakes
stop_hostile
expect "inject: the run ended cleanly (exit $RUN_RC)" test "$RUN_RC" = 0 -o "$RUN_RC" = 1 -o "$RUN_RC" = 7
expect "inject: no injected header reached the target" \
    sh -c "! grep -q -i -e 'X-Injected' -e 'Host: elsewhere' '$T/list-inject.requests'"
expect "inject: every read went to the one plain item" \
    test "$(grep -c "^b'GET /v1/sites/north/gateways/gw-ok HTTP/1.1'" "$T/list-inject.requests")" = 20 \
        -a "$(grep -c "^b'GET " "$T/list-inject.requests")" = 22
expect "inject: the refused items were reported (3 per page, 2 pages)" grep -q "6 list items were never picked" \
    "$T/inject.stderr"

# --- a journal record that names another host ------------------------------------------------
# A second listener on 127.0.0.2 (loopback too) stands for "another host": nothing may reach it.
serve_start || exit 1
OTHER=$(free_port)
/usr/bin/python3 "$HOSTILE" ok "$OTHER" "$T/other.requests" --life 30 --host 127.0.0.2 &
HPID=$!
sleep 0.5
mkdir -p "$T/journal" "$T/empty"
{
    printf '{"squall_journal":1,"target":"%s","started_unix_ms":0}\n' "$SERVE_URL"
    printf '{"op":"created","path":"@127.0.0.2:%s/v1/x","class":"c","t":0}\n' "$OTHER"
    printf '{"op":"created","path":"/v1/sites/north/gateways/gw-1\\r\\nX-Injected: yes","class":"c","t":0}\n'
    printf '{"op":"created","path":"/v1/sites/north/gateways/gw-2","class":"c","t":0}\n'
} >"$T/journal/journal.ndjson"
"$SQUALL" cleanup "$T/journal" >"$T/cleanup.out" 2>&1
CRC=$?
stop_hostile
expect "cleanup: nothing reached the other host" test ! -s "$T/other.requests"
expect "cleanup: the two bad lines are named (lines 2 and 3)" \
    test "$(grep -c 'journal.ndjson:[23]: line skipped: its path is not a request path' "$T/cleanup.out")" = 2
expect "cleanup: the good record was tried (already gone: exit $CRC is 0)" \
    grep -q "1 objects: 0 deleted, 1 already gone" "$T/cleanup.out"
# An empty path (it used to end cleanup with exit 6 and no message).
{
    printf '{"squall_journal":1,"target":"%s","started_unix_ms":0}\n' "$SERVE_URL"
    printf '{"op":"created","path":"","class":"c","t":0}\n'
    printf '{"op":"created","path":"/v1/sites/north/gateways/gw-3","class":"c","t":0}\n'
} >"$T/empty/journal.ndjson"
"$SQUALL" cleanup "$T/empty" >"$T/cleanup-empty.out" 2>&1
CRC=$?
expect "cleanup: an empty path is named and skipped, the rest deleted (exit $CRC)" \
    grep -q "journal.ndjson:2: line skipped: its path is not a request path (an empty path)" \
    "$T/cleanup-empty.out"
expect "cleanup: ... and exits 0" test "$CRC" = 0
printf '{"squall_journal":2,"target":"%s","started_unix_ms":0}\n' "$SERVE_URL" >"$T/journal/journal.ndjson"
"$SQUALL" cleanup "$T/journal" >"$T/cleanup2.out" 2>&1
CRC=$?
expect "cleanup: a journal of another version is refused (exit $CRC, 6) and says so" \
    grep -q "journal version 2, this squall reads version 1" "$T/cleanup2.out"
exit $FAILED
