#!/usr/bin/env bash
# squall envelope against the embedded target with a known capacity: --max-inflight 10 with a
# fixed 50 ms service time (--delay fixed:50ms; queued requests wait for a slot, FIFO), so at
# most 10 / 50 ms = 200 requests/s are served and an even arrival rate above that builds a queue
# that grows for the whole phase. The boundary where "p99 <= L" still holds is computed by
# simulating that queue (even arrivals, 10 servers, 50 ms each; p99 by nearest rank, as HDR's
# percentile) in Python, independently of squall, and the search must land within its
# resolution of it. The target's 50 ms is a libuv timer of whole milliseconds on a loop shared
# with serving (measured: 50.5-51 ms on these machines, slower when the host takes the VM's
# CPU), so the boundary is computed for a service time of 50 ms and of the slowest the target
# gave in the 1-D search's runs below capacity (at least 51.5 ms; the 2-D search keeps 51.5),
# and the found one must lie within the resolution of that band:
#   1-D: rate, L = 70 ms, 2 s phases;
#   teardown: a creating plan's runs each delete what they made (the target's /stats);
#   2-D: phase duration x rate, L = 450 ms: a short phase tolerates a short overload, so the
#        largest holding rate falls as the duration grows (a staircase).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/envelope"
rm -rf "$T"
mkdir -p "$T"

# boundary L_MS T_S [SERVICE_MS]: the largest rate (0.1/s steps) whose simulated p99 is <= L_MS.
boundary() {
    /usr/bin/python3 - "$1" "$2" "${3:-50}" <<'PY'
import heapq, math, sys
L, T, D = float(sys.argv[1]) / 1000, float(sys.argv[2]), float(sys.argv[3]) / 1000
def p99(rate, slots=10, service=D):
    n = math.ceil(rate * T)                  # even arrivals at k / rate, k = 0..n-1
    free = [0.0] * slots
    resp = []
    for k in range(n):
        a = k / rate
        s = max(a, heapq.heappop(free))      # FIFO: the earliest free slot
        heapq.heappush(free, s + service)
        resp.append(s + service - a)
    resp.sort()
    return resp[max(1, int(0.99 * n + 0.5)) - 1]
r = 100.0
while p99(r + 0.1) <= L + 1e-12:
    r += 0.1
print("%.1f" % r)
PY
}

serve_start --max-inflight 10 --delay fixed:50ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
plan() { # plan FILE P99_MS
    cat >"$1" <<YAML
target: {url: "$SERVE_URL", connections: 200, timeout: 10s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 100/s, duration: 2s, mix: {read: 1}}
objectives:
  - {class: read, p99: $2ms}
YAML
}

# --- 1-D: the rate ------------------------------------------------------------------------
plan "$T/one.yaml" 70
WANT=$(boundary 70 2)
J="$T/one/envelope.json"
got() { /usr/bin/python3 -c "import json; d = json.load(open('$J')); print($1)"; }
run_py() { /usr/bin/python3 -c "import json; d = json.load(open('$J')); $1"; }
# A run at 100/s or less (half the capacity or less: no queue) that does not pass says the
# target itself was slower than its 50 ms plus 20 then, a machine whose host took its CPU (a
# clean clone on 2026-12-03: service p99 61.9 ms, response p99 73.2 ms at 50/s), not where the
# boundary is; such a search is run again once, and when both were so, the boundary checks are
# not judged (the rest are) and the test ends "NOT JUDGED (machine)" (exit 77) if nothing else
# failed.
ONE_VOID=0
for attempt in 1 2; do
    rm -rf "$T/one"
    timeout 300 "$SQUALL" envelope "$T/one.yaml" --vary phases.steady.rate=50/s..800/s \
        --resolution 16/s --repeats 1 --max-runs 14 --cool-down 200ms -o "$T/one" \
        >"$T/one.out" 2>"$T/one.err"
    RC=$?
    LIGHT=$(run_py "print([(r['values'][0], r.get('broke', '')) for r in d['runs'] if r['values'][0] <= 100 and r['verdict'] != 'pass'])" 2>/dev/null)
    [ "$LIGHT" = "[]" ] && break
    echo "note: 1-D attempt $attempt: runs at 100/s or less did not pass: $LIGHT"
    [ $attempt = 2 ] && ONE_VOID=1
done
if [ $ONE_VOID = 0 ]; then
    expect "1-D search resolved: exit 0 (got $RC)" test "$RC" = 0
fi
# The slow end of the band: the slowest service time the target gave in the search's runs at
# 100/s or less (a quarter to half its capacity: no queue), their service p99 as squall
# measured it (first byte minus request written), when above 51.5 ms. A machine whose host takes
# the target's CPU serves slower, and the boundary is where it is for that target.
SVC=$(run_py "
ms = [c['summary']['service']['p99'] / 1e6 for r in d['runs'] if r['values'][0] <= 100
      for c in json.load(open(r['dir'] + '/results.json'))['cells']
      if c['class'] == 'read' and c['outcome'] == '2xx']
print('%.2f' % max([51.5] + ms))")
SLOW=$(boundary 70 2 "$SVC")
echo "   computed boundary ${SLOW}..${WANT}/s (capacity 10 / 50 ms = 200/s; slow end for a service time of ${SVC} ms), found: $(got "d['columns'][0]['answer']")"
expect "format squall-envelope v1" test "$(got "d['format'], d['version']")" = "squall-envelope 1"
if [ $ONE_VOID = 0 ]; then
    expect "the search is complete" test "$(got "d['complete']")" = True
    expect "the largest holding rate is within 16/s of the computed ${SLOW}..${WANT}/s, the first failing one within 16/s above it" \
        test "$(run_py "c = d['columns'][0]; print($SLOW - 16 <= c['holds_up_to'] <= $WANT + 16 and c['fails_at'] - c['holds_up_to'] <= 16 and c['fails_how'] == 'fail')")" = True
    expect "doubling from 50/s: the first runs are 50, 100, 200/s; no run beyond TO" \
        test "$(got "[r['values'][0] for r in d['runs'][:3]] == [50, 100, 200] and max(r['values'][0] for r in d['runs']) <= 800")" = True
fi
expect "every failed run names the objective that broke and its observed value above 70 ms" \
    test "$(got "all(r['broke'] and 'p99' in r['broke'] and float(r['broke'].split('observed ')[1].split()[0]) > 70 for r in d['runs'] if r['verdict'] == 'fail')")" = True
expect "each run's verdict matches its own results.json" \
    test "$(got "all(json.load(open(r['dir'] + '/results.json'))['sections']['run']['verdict'] == r['verdict'] for r in d['runs'])")" = True
expect "envelope.csv: a header and one line per run" \
    test "$(($(wc -l <"$T/one/envelope.csv") - 1))" = "$(got "len(d['runs'])")"
expect "envelope.html links every run to its report.html, which exists" \
    test "$(/usr/bin/python3 -c "
import os
from html.parser import HTMLParser
class P(HTMLParser):
    def __init__(s):
        super().__init__(); s.links = []; s.safe = 0
    def handle_starttag(s, tag, a):
        a = dict(a)
        if tag == 'a': s.links.append(a['href'])
        if tag == 'rect' and a.get('class') == 'safe': s.safe += 1
p = P(); p.feed(open('$T/one/envelope.html').read())
print((p.safe == 1 or $ONE_VOID == 1) and len(p.links) == $(got "len(d['runs'])") and
      all(os.path.exists(os.path.join('$T/one', l)) for l in p.links))")" = True
expect "the target served everything: no request left queued" test "$(serve_stats "s['inflight']")" = 0

# --- Teardown between points: a plan that creates objects --------------------------------
# Each point's run deletes what it created before the next starts: the target's own object
# count (/stats, an outside view) is back to the one object it held, and every run's
# lifecycle.teardown deleted all it created. Rates 50, 100 and 150/s stay below the target's
# 200/s (at 200/s a run on a loaded machine failed its p99 and the search made two runs only).
cat >"$T/make.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 200, timeout: 10s}
requests:
  make: {kind: write, method: PUT, path: "/v1/sites/north/made/gw-{{seq}}", body: '{"m":1}',
         creates: true}
phases:
  - {name: steady, rate: 100/s, duration: 2s, mix: {make: 1}}
objectives:
  - {class: make, p99: 70ms}
YAML
timeout 120 "$SQUALL" envelope "$T/make.yaml" --vary phases.steady.rate=50/s..150/s \
    --resolution 50/s --repeats 1 --max-runs 3 --cool-down 0s -o "$T/make" \
    >"$T/make.out" 2>"$T/make.err"
J="$T/make/envelope.json"
expect "creating plan: three runs, no objects left in any" \
    test "$(got "[r['objects_left'] for r in d['runs']]")" = "[0, 0, 0]"
expect "each run deleted every object it created (its results.json)" \
    test "$(run_py "ok = True
for r in d['runs']:
    lc = json.load(open(r['dir'] + '/results.json'))['sections']['lifecycle']
    ok &= lc['created'] > 0 and lc['teardown']['deleted'] == lc['created']
print(ok)")" = True
expect "the target holds only its one object again (its /stats)" test "$(serve_stats "s['objects']")" = 1

# --- Cool-down until idle (--cool-down idle[:MAX]) ------------------------------------------
# The plan observes the target's /metrics; a watch stream held open by curl (outside squall)
# from 0.3 s into run 1 keeps the gauge squall_target_open_streams at 1 past the run's end.
# The outside view of when it is back to 0 is the target's /stats, polled every 0.1 s by this
# script: run 2 must start at or after that moment and within a few seconds of it (scrapes every
# 1 s), with the cool-down recorded as back to idle. Held longer than MAX (idle:2s), the bound
# passes first: run 2 starts anyway, before the stream ends, and the run records the series
# that was not back.
cat >"$T/idle.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 20, timeout: 10s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 60/s, duration: 2s, mix: {read: 1}}
objectives:
  - {class: read, p99: 2s}
observe:
  metrics:
    - {url: /metrics, every: 1s, keep: [squall_target_open_streams, squall_target_objects]}
YAML
hold_watch() { # hold_watch DIR SECONDS: a watch from 0.3 s into run 1; /stats polled into DIR.stats
    for _ in $(seq 200); do [ -e "$1/points/001.log" ] && break; sleep 0.05; done
    sleep 0.3
    curl -s -N --max-time "$2" "$SERVE_URL/v1/sites/north/gateways?watch=1" >/dev/null &
    local n seen=
    for _ in $(seq 150); do
        n=$(serve_stats "s['streams']['open']")
        echo "$(date +%s.%N) $n" >>"$1.stats"
        [ "$n" = 1 ] && seen=1
        [ -n "$seen" ] && [ "$n" = 0 ] && break
        sleep 0.1
    done
}
idle_search() { # idle_search NAME HOLD_S COOL
    hold_watch "$T/$1" "$2" &
    local h=$!
    timeout 120 "$SQUALL" envelope "$T/idle.yaml" --vary phases.steady.rate=60/s..120/s \
        --repeats 1 --max-runs 2 --cool-down "$3" -o "$T/$1" >"$T/$1.out" 2>"$T/$1.err"
    echo $? >"$T/$1.rc"
    wait $h
    # J, START2 (run 2's start: its log's creation) and BACK (the stream closed, by /stats)
    J="$T/$1/envelope.json"
    START2=$(stat -c %.9Y "$T/$1/points/002.log")
    BACK=$(/usr/bin/python3 -c "
seen = False
for l in open('$T/$1.stats'):
    t, n = l.split()
    seen |= n == '1'
    if seen and n == '0':
        print(t); break")
    echo "   stream closed (/stats) at ${BACK:-never}, run 2 started at $START2: $(got "d['runs'][1]['cool_down']")"
}
idle_search idle 4 idle:20s
expect "idle: two runs, exit 0 (got $(cat "$T/idle.rc"))" test "$(cat "$T/idle.rc") $(got "len(d['runs'])")" = "0 2"
expect "idle: the target's /stats saw the stream open, then closed" test -n "$BACK"
expect "idle: run 2 started after the gauge was back at 0 (/stats), within 3 s of it" \
    test "$(/usr/bin/python3 -c "print(${BACK:-0} - 0.2 <= $START2 <= ${BACK:-0} + 3)")" = True
expect "idle: the cool-down is recorded as back to idle after waiting over 1 s; none before run 1" \
    test "$(run_py "c = d['runs'][1]['cool_down']; print(d['runs'][0]['cool_down'] is None and c['mode'] == 'idle' and c['back_to_idle'] and c['seconds'] > 1 and c['not_idle'] == [])")" = True
idle_search bound 8 idle:2s
expect "bound: both runs made (exit $(cat "$T/bound.rc"))" test "$(got "len(d['runs'])")" = 2
expect "bound: run 2 started while the stream was still open (/stats)" \
    test "$(/usr/bin/python3 -c "print($START2 < ${BACK:-1e12})")" = True
expect "bound: the cool-down hit its 2 s bound and names the gauge that was not back" \
    test "$(run_py "c = d['runs'][1]['cool_down']; print(not c['back_to_idle'] and 2 <= c['seconds'] < 5 and c['not_idle'] == ['squall_target_open_streams: now 1 (idle 0)'])")" = True
grep -v observe "$T/idle.yaml" | grep -v metrics: | grep -v squall_target >"$T/noobs.yaml"
"$SQUALL" envelope "$T/noobs.yaml" --vary phases.steady.rate=60/s..120/s --max-runs 1 \
    --cool-down idle -o "$T/noobs" >/dev/null 2>&1
expect "--cool-down idle without observe.metrics: a usage error (exit 2)" test $? = 2

# --- 2-D: duration x rate ------------------------------------------------------------------
plan "$T/two.yaml" 450
timeout 300 "$SQUALL" envelope "$T/two.yaml" --vary phases.steady.duration=1s..3s \
    --vary phases.steady.rate=150/s..400/s --steps 3 --resolution 12/s --repeats 1 \
    --max-runs 40 --cool-down 200ms -o "$T/two" >"$T/two.out" 2>"$T/two.err"
RC=$?
expect "2-D search resolved: exit 0 (got $RC)" test "$RC" = 0
J="$T/two/envelope.json"
for col in 0 1 2; do
    S=$((col + 1))
    WANT=$(boundary 450 $S)
    SLOW=$(boundary 450 $S 51.5)
    echo "   ${S}s: computed ${SLOW}..${WANT}/s, found: $(got "d['columns'][$col]['answer']")"
    expect "duration ${S}s: the largest holding rate within 12/s of the computed ${SLOW}..${WANT}/s" \
        test "$(run_py "c = d['columns'][$col]; print(c['value'] == $S and $SLOW - 12 <= c['holds_up_to'] <= $WANT + 12 and c['fails_at'] - c['holds_up_to'] <= 12)")" = True
done
expect "a staircase: the holding rate falls as the duration grows" \
    test "$(run_py "h = [c['holds_up_to'] for c in d['columns']]; print(h[0] > h[1] > h[2])")" = True
if [ "$FAILED" = 0 ] && [ $ONE_VOID = 1 ]; then
    echo "NOT JUDGED (machine): envelope: every other check passed; the 1-D boundary was not judged (the target failed 70 ms at 100/s or less in both searches: the machine, not the search)"
    exit 77
fi
exit $FAILED
