#!/usr/bin/env bash
# The replay source against a writer squall did not write: Debian's nginx serves the replayed
# requests and logs each in its own NDJSON log_format (lib/nginx.sh: $msec, the URI, the status,
# $request_time; nginx docs, ngx_http_log_module). The input is an NDJSON log of ms-resolution
# times generated here (Poisson gaps, gets, lists, HEADs, PUTs with a body rule, POSTs without
# one, and watches marked watch=1 with a recorded duration of 1-2.5 s), every line carrying a
# unique r=N in its query. Checked:
# - counts, against nginx's own log: every request the replay can send (POSTs without a body
#   template skipped, as results.json says) and every watch reached nginx, at speed 1, 2 and
#   with `copies: 3` (three times, {{copy}} in the rewritten paths); every class has results;
# - watches: each was held open (nginx's /stream/ticks, an event every 100 ms) for its recorded
#   duration divided by the speed, as nginx's own $request_time says (it notices the client's
#   close at its next write: up to about 0.1 s late), and its events were counted;
# - fidelity, the issue's goal: achieved inter-arrival times within 1 ms at p99 of the log's,
#   at speed 1 and 2. nginx's $msec has only ms resolution, so the achieved times are the
#   capture stamps of squall's request packets on loopback (tcpdump, ns precision;
#   lib/capture.sh), each matched to its log line by r=N (lib/replay_gaps.py says how the gaps
#   are compared). A host that takes this VM's CPU or wakes it late misses that bar for any
#   sender, so a bare reference sender (wire_ref.c, no squall code) sends the same schedule at
#   the same time under the same capture: an attempt where the reference itself has a gap more
#   than 1 ms off measures the machine, not squall, and is not judged (see fidelity below).
#   About 40 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/capture.sh"
command -v tcpdump >/dev/null || { echo "FAIL: tcpdump missing (tools/setup installs it)"; exit 1; }
T="$BUILDDIR/replay-nginx"
rm -rf "$T"
mkdir -p "$T"
NGX_ACCESS_LOG=1
nginx_start replay || exit 1
trap 'capture_stop; nginx_stop' EXIT
PORT=$NGX_PORT
NGX_LOG="$NGX_DIR/access.ndjson"

# The recorded log: 8 s at about 40/s, gaps of whole even milliseconds (so speed 2 keeps them
# whole), written out of order in places as a proxy logging at completion would; watches last
# 1-2.5 s (whole even ms).
/usr/bin/python3 - "$T/recorded.ndjson" <<'PY'
import json, random, sys
random.seed(13)
t, lines = 1764672000000, []
kinds = ["get"] * 60 + ["list"] * 10 + ["head"] * 10 + ["put"] * 12 + ["post"] * 4 + ["watch"] * 4
while len(lines) < 320:
    t += 2 * max(1, round(random.expovariate(1 / 12.5)))
    k, site, gw = random.choice(kinds), random.choice(["north", "south"]), random.randrange(50)
    m, p = {"get": ("GET", f"/api/sites/{site}/gateways/gw-{gw}"),
            "list": ("GET", f"/api/sites/{site}/gateways?limit=100"),
            "head": ("HEAD", f"/api/sites/{site}/gateways/gw-{gw}"),
            "put": ("PUT", f"/api/leases/gw-{gw}"),
            "post": ("POST", f"/api/sites/{site}/events"),
            "watch": ("GET", f"/api/sites/{site}/gateways?watch=1")}[k]
    p += ("&" if "?" in p else "?") + f"r={len(lines)}"
    l = {"ts": t, "verb": m, "uri": p, "status": 200, "client": f"gw-{gw}"}
    if k == "watch":
        l["dur"] = 2 * random.randrange(500, 1250) / 1000
    lines.append(l)
out = lines[:]
for i in range(5, len(out) - 1, 40):   # a few neighbours swapped: the reader must reorder
    out[i], out[i + 1] = out[i + 1], out[i]
with open(sys.argv[1], "w") as f:
    for l in out:
        f.write(json.dumps(l) + "\n")
    f.write("{not json at all\n")       # counted as malformed, with its line number
PY

plan() { # NAME SPEED COPIES
    cat >"$T/$1.yaml" <<YAML
seed: 13
target: {url: "http://127.0.0.1:$PORT", connections: 16, timeout: 5s}
requests:
  renew: {kind: write, method: PUT, path: "/", body: '{"holder":"{{agent}}"}'}
  read-lease: {kind: get, path: "/"}
phases:
  - name: replay
    replay:
      log: recorded.ndjson
      fields: {time: ts, method: verb, path: uri, duration: dur}
      time-unit: ms
      speed: $2
      copies: $3
      offset: 2ms
      rewrite:
        - {match: "^/api/(.*[?&]watch=1.*)$", to: "/stream/ticks?c{{copy}}=/{{1}}"}
        - {match: "^/api/", to: "/echo/body?c{{copy}}=/"}
      classify:
        - {match: "^/api/leases/", class: renew}
# Counts and timing are checked against nginx's log below; a machine busy with other work may
# make squall generator-bound for a second (exit 7), which these runs accept.
accept: [generator-bound]
YAML
}

# What the replay can send: everything but POSTs (no body rule); WATCHES of them are watches,
# recorded as held HOLD s in all.
read -r WANT WATCHES HOLD < <(/usr/bin/python3 -c '
import json, sys
n = w = hold = 0
for l in open(sys.argv[1]):
    try: r = json.loads(l)
    except ValueError: continue
    n += r["verb"] != "POST" and "watch=1" not in r["uri"]
    w += "watch=1" in r["uri"]
    hold += r.get("dur", 0)
print(n, w, hold)' "$T/recorded.ndjson")

lines_now() { wc -l <"$NGX_LOG"; }

# The reference sender's schedule at speed 1 and 2: every request the replay sends (all but the
# POSTs, watches included), at its recorded offset from the first divided by the speed, as
# "GET /small.json?r=N" (its lines in nginx's log are left out of the counts below).
for speed in 1 2; do
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/replay_gaps.py" --at "$T/recorded.ndjson" \
        "$speed" >"$T/ref-$speed.at"
done

# squall's and nginx's timing must not be taken over by the machine's other work in the middle
# of a gap; as in wire.sh, when the test may (root), both run at a real-time priority
# (SCHED_FIFO, sched(7)). Bounded: the replay ends with its log, and squall sleeps between
# requests (it spins at most 100 µs before each).
PRIO=()
if [ "$(id -u)" = 0 ] && [ "${REPLAY_FIFO:-1}" = 1 ]; then
    PRIO=(chrt -f 20)
    for pid in "$NGX_PID" $(pgrep -P "$NGX_PID"); do chrt -f -p 10 "$pid" >/dev/null; done
fi

# run_one NAME SPEED COPIES: the replay under capture ($T/NAME.pcap), and what nginx logged for
# it in $T/NAME.seen. With one copy at speed 1 or 2 the reference sender sends the same schedule
# at the same time; its local ports, as a pcap-filter(7) expression, in $T/NAME.ref-filter.
run_one() {
    plan "$1" "$2" "$3"
    local before ref_pid=
    before=$(lines_now)
    capture_start "$PORT" "$T/$1.pcap" "GET HEAD PUT" || return 1
    rm -rf "${T:?}/$1" "$T/$1.ref-filter"
    if [ "$3" = 1 ] && [ -f "$T/ref-$2.at" ]; then
        timeout 60 "${PRIO[@]}" "$BUILDDIR/tests/integration/wire_ref" "$PORT" --at \
            "$T/ref-$2.at" >"$T/$1.ref.stdout" 2>"$T/$1.ref.stderr" &
        ref_pid=$!
    fi
    timeout 120 "${PRIO[@]}" "$SQUALL" run "$T/$1.yaml" -o "$T/$1" --quiet --no-brakes \
        >"$T/$1.stdout" 2>"$T/$1.stderr"
    RUN_RC=$?
    if [ -n "$ref_pid" ]; then
        wait "$ref_pid" || echo "note: $1: the reference sender failed: $(tail -1 "$T/$1.ref.stderr")"
        ref_filter "$T/$1.ref.stdout" >"$T/$1.ref-filter"
    fi
    capture_stop
    sleep 0.5 # the last streams' lines (nginx logs at its next write)
    tail -n +$((before + 1)) "$NGX_LOG" | grep -v '"uri":"/small.json' >"$T/$1.seen"
}

for run in "s1 1 1" "s2 2 1" "c3 4 3"; do
    set -- $run
    run_one "$@"
    expect "$1: replay at speed $2, copies $3 ran (exit $RUN_RC: $(tail -1 "$T/$1.stderr"))" \
        test "$RUN_RC" = 0
    seen=$(wc -l <"$T/$1.seen")
    expect "$1: nginx logged $seen requests, $3 x ($WANT + $WATCHES watches) expected" \
        test "$seen" = $(($3 * (WANT + WATCHES)))
    rcheck "$1: results.json counts $3 x $WANT sent and $3 x $WATCHES watches" \
        "d['sections']['replay']['replay']['sent'] == $3 * $WANT and d['sections']['replay']['replay']['watches'] == $3 * $WATCHES" "$T/$1"
    rcheck "$1: writes without a body rule are counted as skipped, no watch is" \
        "d['sections']['replay']['replay']['skipped_writes'] > 0 and d['sections']['replay']['replay']['skipped_watches'] == 0" "$T/$1"
    rcheck "$1: the malformed line is counted with its line number" \
        "d['sections']['replay']['replay']['malformed'] == 1 and 'line 321' in d['sections']['replay']['replay']['malformed_samples'][0]" "$T/$1"
    # HEAD included: libcurl must not wait for a body nginx does not send (CURLOPT_NOBODY).
    rcheck "$1: every replayed request was answered 2xx, and no watch ended otherwise" \
        "sum(c['count'] for c in d['cells'] if c['outcome'] != '2xx') == 0" "$T/$1"
    for cls in renew replay-get replay-list replay-watch; do
        rcheck "$1: class $cls has 2xx results" "cell('replay', '$cls', '2xx').get('count', 0) > 0" "$T/$1"
    done
    # nginx's /stream/ticks sends an event at once, then every 100 ms: a stream held h s
    # carries 1 + 10 h of them; 80 % of that at least.
    rcheck "$1: the watches section counts $3 x $WATCHES streams with their events, no drop" \
        "(lambda w: w['streams'] == $3 * $WATCHES and w['drops'] == 0 and w['events'] >= 0.8 * $3 * 10 * $HOLD / $2)(d['sections']['watches']['replay']['classes']['replay-watch'])" "$T/$1"
done

# Each copy's requests, the HEADs and the watches' durations, from nginx's own log.
/usr/bin/python3 - "$T" <<'PY' || FAILED=1
import json, re, sys
T = sys.argv[1]
bad = 0
rec = [json.loads(l) for l in open(f"{T}/recorded.ndjson") if l.startswith("{\"")]
n = sum(1 for r in rec if r["verb"] != "POST" and "watch=1" not in r["uri"])
heads = sum(1 for r in rec if r["verb"] == "HEAD")
dur = {re.search(r"r=(\d+)", r["uri"]).group(1): r["dur"] for r in rec if "dur" in r}
for name, speed, copies in (("s1", 1, 1), ("s2", 2, 1), ("c3", 4, 3)):
    seen = [json.loads(l) for l in open(f"{T}/{name}.seen")]
    for c in range(copies):
        mine = sum(1 for s in seen if s["uri"].startswith(f"/echo/body?c{c}=/"))
        ok = mine == n
        print(("ok: " if ok else "FAIL: ") + f"{name}: copy {c} has {mine} requests of {n}")
        bad += not ok
    got = sum(1 for s in seen if s["method"] == "HEAD")
    ok = got == copies * heads
    print(("ok: " if ok else "FAIL: ") + f"{name}: {got} HEAD requests, {copies} x {heads} recorded")
    bad += not ok
    # Source: nginx's $request_time, from its first byte of the request to its log line; nginx
    # notices the close at its next write, every 100 ms. So a hold of h s shows as h to h + 0.1
    # s; 50 ms below and 250 ms above allow the ms rounding and a busy machine.
    watches = [s for s in seen if s["uri"].startswith("/stream/ticks?")]
    off = [s["rt"] - dur[re.search(r"r=(\d+)", s["uri"]).group(1)] / speed for s in watches]
    ok = len(watches) == copies * len(dur) and all(-0.05 <= o <= 0.25 for o in off)
    print(("ok: " if ok else "FAIL: ") + f"{name}: {len(watches)} watches reached nginx "
          f"({copies} x {len(dur)} recorded), held their recorded duration / {speed}: nginx's "
          f"$request_time minus it from {min(off, default=0):+.3f} to {max(off, default=0):+.3f} s")
    bad += not ok
sys.exit(1 if bad else 0)
PY

# Fidelity as the wire saw it (lib/replay_gaps.py): the issue's goal, 1 ms at p99. A machine
# busy with other work, or a host that takes this VM's CPU, can hold any sender for over a
# millisecond now and then. The reference sender (wire_ref.c: clock_nanosleep to 100 µs before
# each instant, then a spin; no squall code) sent the same schedule in the same seconds, and its
# figures are read from the same capture by its ports. Per attempt:
#   squall's p99 <= 1 ms and its first gap's error too (the first request is not late by the
#   work of starting the phase: it was by 1.3-4 ms before the run built the first phase's
#   sources ahead of its start), nothing missing, nothing dropped -> met;
#   otherwise, the reference had a gap over 1 ms off           -> the machine took a sender's
#                                                                 CPU then: not judged;
#   otherwise (the machine was quiet for the reference all the attempt and squall missed)
#                                                              -> missed;
#   and whatever the reference did, squall's median error more than 0.5 ms above the
#   reference's (what a millisecond timer tick gives)           -> missed.
# Why the reference's max and not its p99: p99 of 304 gaps is the 4th largest error, and one
# pause of a sender makes two (the late request's gap before and after), so a machine that pauses
# each sender once or twice in 8 s decides the attempt by chance; a clean clone on 2026-12-03
# had the reference at p99 0.64 ms (one 1.4 ms pause) and squall at 1.71 ms (three pauses).
# Up to 3 attempts: met in one passes; missed in all judged ones fails; none judged ends the test
# "NOT JUDGED (machine)" (exit 77, counted apart by tools/test) when every other check passed.
fidelity() { # NAME SPEED ATTEMPT
    local flt
    flt=$(cat "$T/$1.ref-filter" 2>/dev/null)
    [ -n "$flt" ] || { echo "(attempt $3) FAIL: $1: the reference sender printed no ports"; return 1; }
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/replay_gaps.py" "$T/$1.pcap" \
        "$T/recorded.ndjson" "$2" "not ($flt)" >"$T/$1.gaps.json" || return 1
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/replay_gaps.py" "$T/$1.pcap" \
        "$T/recorded.ndjson" "$2" "$flt" >"$T/$1.ref-gaps.json" || return 1
    /usr/bin/python3 - "$T/$1.gaps.json" "$T/$1.ref-gaps.json" "$1" "$3" "$CAP_DROPPED" <<'PY'
import json, sys
g, r = json.load(open(sys.argv[1])), json.load(open(sys.argv[2]))
name, attempt, dropped = sys.argv[3], sys.argv[4], sys.argv[5]
def text(x):
    return (f"p50 {x['error_ms_p50']:.3f} ms, p90 {x['error_ms_p90']:.3f} ms, p99 "
            f"{x['error_ms_p99']:.3f} ms, max {x['error_ms_max']:.3f} ms over {x['gaps']} gaps, "
            f"{x['missing']} not captured, the first gap {x['first_gap_error_ms']:.3f} ms")
ok = g["missing"] == 0 and dropped == "0" and g["error_ms_p99"] is not None \
    and g["error_ms_p99"] <= 1.0 and g["first_gap_error_ms"] <= 1.0
ref_held = r["missing"] == 0 and r["error_ms_max"] is not None and r["error_ms_max"] <= 1.0
# Far off the bare sender whatever the machine did: a timer tick of a millisecond puts squall's
# median error near half of it (RESULTS.md, issue 12); seen here: squall's p50 at most 0.22 ms
# above the reference's, on the noisiest attempts of 2026-12-03.
far = g["error_ms_p50"] is not None and r["error_ms_p50"] is not None \
    and g["error_ms_p50"] - r["error_ms_p50"] > 0.5
judged = ref_held or far
verdict = "met" if ok else ("missed" if judged else "not judged")
print(("ok: " if ok else f"(attempt {attempt}) {'FAIL' if judged else 'void'}: ") +
      f"{name}: achieved inter-arrival error <= 1 ms at p99: squall {text(g)}; the reference "
      f"sender {text(r)} (tcpdump stamps, {dropped} packets dropped) -> {verdict}")
sys.exit(0 if ok else (1 if judged else 2))
PY
}
for run in "s1 1" "s2 2"; do
    set -- $run
    met=0 judged=0
    for attempt in 1 2 3; do
        out=$(fidelity "$1" "$2" "$attempt")
        rc=$?
        echo "$out" | sed "s/^(attempt [0-9]) //;s/^FAIL/miss/"
        [ $rc = 0 ] && { met=1; judged=$((judged + 1)); break; }
        [ $rc = 1 ] && judged=$((judged + 1))
        [ $attempt = 3 ] && break
        run_one "$1" "$2" 1
    done
    if [ $met = 0 ]; then
        if [ $judged -gt 0 ]; then
            echo "FAIL: $1: fidelity missed in every attempt that was judged"
            FAILED=1
        else
            echo "note: $1: the reference sender had a gap over 1 ms off in all 3 attempts: not judged"
        fi
    fi
    [ $met = 1 ] || [ $judged -gt 0 ] || UNJUDGED="${UNJUDGED:-} $1"
done
if [ "$FAILED" = 0 ] && [ -n "${UNJUDGED:-}" ]; then
    echo "NOT JUDGED (machine): replay nginx: every other check passed; fidelity of${UNJUDGED} not judged (the machine paused a bare sender too in every attempt)"
    exit 77
fi
[ "$FAILED" = 0 ] && echo "PASS: replay nginx" || echo "FAIL: replay nginx"
exit "$FAILED"
