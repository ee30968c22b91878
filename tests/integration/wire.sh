#!/usr/bin/env bash
# squall's open-loop timing as the wire sees it: Poisson arrivals at 700/s against
# nginx on loopback, every request captured by tcpdump with nanosecond stamps (lib/capture.sh)
# and the gaps between them checked against the exponential law at microsecond resolution
# (lib/wire.py: scipy's KS test; sources named there). Requests that leave in
# batches on a millisecond tick fail both checks: too many gaps under 100 µs, and a tail that
# is not exponential.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/capture.sh"
command -v tcpdump >/dev/null || { echo "FAIL: tcpdump missing (tools/setup installs it)"; exit 1; }
nginx_start wire || exit 1
T="$NGX_DIR/out"
mkdir -p "$T"
trap 'capture_stop; nginx_stop' EXIT
# The machine's other work must not take squall's or nginx's core in the middle of a gap (a
# pause of either shows up as a burst of requests when it ends): when the test may (root), both
# run at a real-time priority (SCHED_FIFO, sched(7)), as on a quiet machine. Bounded: squall
# sleeps between requests (it spins at most 100 µs before each) and nginx serves a small file.
PRIO=()
if [ "$(id -u)" = 0 ]; then
    PRIO=(chrt -f 20)
    for pid in "$NGX_PID" $(pgrep -P "$NGX_PID"); do chrt -f -p 10 "$pid" >/dev/null; done
fi

# wire_run NAME RATE SECONDS: one Poisson run under capture; figures in $T/NAME.json.
wire_run() {
    local name=$1 rate=$2 secs=$3
    wire_plan "$T/$name.yaml" "$NGX_PORT" "$rate" poisson "$secs"
    capture_start "$NGX_PORT" "$T/$name.pcap" || return 1
    rm -rf "${T:?}/$name"
    timeout 120 "${PRIO[@]}" "$SQUALL" run "$T/$name.yaml" -o "$T/$name" --quiet \
        >"$T/$name.stdout" 2>"$T/$name.stderr"
    RUN_RC=$?
    capture_stop
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/wire.py" "$T/$name.pcap" "$rate" 0.5 \
        >"$T/$name.json"
}

# wcheck DESC PYEXPR NAME: a check over the wire figures as `w`.
wcheck() {
    local desc=$1 expr=$2 name=$3
    if /usr/bin/python3 -c "import json, sys
w = json.load(open(sys.argv[1]))
sys.exit(0 if eval(sys.argv[2]) else 1)" "$T/$name.json" "$expr"; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc"
        echo "      expected: $expr"
        echo "      figures: $(cat "$T/$name.json")"
        FAILED=1
    fi
}

# steal_ms: the CPU time the hypervisor took from this VM so far (the 8th number of /proc/stat's
# "cpu" line, in USER_HZ ticks: proc(5)), in ms.
steal_ms() {
    awk -v hz="$(getconf CLK_TCK)" '$1 == "cpu" { printf "%d", $9 * 1000 / hz }' /proc/stat
}

# 700/s: the issue's figure for tick batching (25 % of gaps under 50 µs where the law gives
# 3.4 %). 5,000/s is measured by tools/bench/wire.sh: there the sender's own cost per request
# (about 10-20 µs here) moves the share under 100 µs by about a point, which this shared machine
# cannot tell from noise in a test (RESULTS.md, "wire").
# Up to 3 attempts, each judged by the same bars: a pause of this VM by its host (steal time,
# printed per attempt) releases the requests planned during it together, which adds short gaps
# (seen on 2026-12-02 evening: 8-12 % under 100 µs at load 0-3 with steal, against 6.73 % on a
# quiet day). Sending on a millisecond tick puts 25-33 % there (RESULTS.md, "Issue 12"), so it
# fails all three attempts; honest timing passes one.
# When every failed attempt ran while the host took STEAL_MAX_PCT % or more of the VM's CPU, the
# test cannot tell squall's timing from the host's pauses: it is skipped (exit 77) and says so;
# a failure on a host that left the VM its CPU is a failure.
STEAL_MAX_PCT=5
QUIET_FAILS=0
for spec in "p700 700 16"; do
    read -r name rate secs <<<"$spec"
    for attempt in 1 2 3; do
        FAILED=0
        s0=$(steal_ms)
        t0=$(date +%s%N)
        wire_run "$name" "$rate" "$secs" || { FAILED=1; continue; }
        stolen=$(($(steal_ms) - s0))
        cpu_ms=$((($(date +%s%N) - t0) / 1000000 * $(nproc)))
        pct=$((100 * stolen / (cpu_ms > 0 ? cpu_ms : 1)))
        echo "attempt $attempt: the host took $stolen ms of the VM's $cpu_ms ms of CPU during the run ($pct % steal)"
        [ "$pct" -ge "$STEAL_MAX_PCT" ] || QUIET_FAILS=$((QUIET_FAILS + 1))
        expect_rc "$name: the run exits 0 (got $RUN_RC)" "$T/$name" 0
        expect "$name: tcpdump dropped no packet (got $CAP_DROPPED)" test "$CAP_DROPPED" = 0
        n=$(rget "$T/$name" 'total("small", "2xx")')
        # Source: the capture itself; one "GET " packet per answered request.
        wcheck "$name: the capture holds one request packet per answered request ($n)" \
            "w['requests'] == $n" "$name"
        wcheck "$name: at least 10,000 consecutive gaps after the first 0.5 s" \
            "w['gaps'] == 10000" "$name"
        # Source: P(gap < 100 µs) = 1 - exp(-rate x 100 µs) for a Poisson process (lib/wire.py);
        # the issue's bar is within 1 point.
        wcheck "$name: share of gaps under 100 µs within 1 point of the law's 1 - e^(-λ·100 µs)" \
            "w['share_points_off'] <= 1.0" "$name"
        # Source: memorylessness (gaps of 100 µs or more, less 100 µs, are Exp(λ)); scipy's KS
        # test at α = 0.01.
        wcheck "$name: gaps of 100 µs or more, shifted by 100 µs, pass KS against Exp(λ) at α = 0.01" \
            "w['ks_pvalue'] >= 0.01" "$name"
        [ "$FAILED" = 0 ] && break
        echo "attempt $attempt of 3 failed"
    done
done
if [ "$FAILED" != 0 ] && [ "$QUIET_FAILS" = 0 ]; then
    echo "SKIP: wire: every attempt ran while the host took >= $STEAL_MAX_PCT % of this VM's CPU (steal): squall's timing on the wire cannot be judged here"
    exit 77
fi
[ "$FAILED" = 0 ] && echo "PASS: wire" || echo "FAIL: wire"
exit "$FAILED"
