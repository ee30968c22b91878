#!/usr/bin/env bash
# squall's open-loop timing as the wire sees it: Poisson arrivals at 700/s against
# nginx on loopback, every request captured by tcpdump with nanosecond stamps (lib/capture.sh)
# and the gaps between them checked against the exponential law at microsecond resolution
# (lib/wire.py: scipy's KS test; sources named there), and against a bare reference sender
# (wire_ref.c, no squall code) sending at the same time under the same capture, for the minutes
# when this shared VM itself cannot send Poisson gaps at that resolution. Requests that leave in
# batches on a millisecond tick fail both ways: too many gaps under 100 µs, and a tail that is
# not exponential.
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
# sleeps between requests (it spins at most 100 µs before each) and nginx serves a small file;
# so does the reference sender.
PRIO=()
if [ "$(id -u)" = 0 ]; then
    PRIO=(chrt -f 20)
    for pid in "$NGX_PID" $(pgrep -P "$NGX_PID"); do chrt -f -p 10 "$pid" >/dev/null; done
fi

# wire_run NAME RATE SECONDS: one Poisson run of squall and, at the same time, of the reference
# sender (at the same rate, a little longer), under one capture; squall's figures in
# $T/NAME.json, the reference's in $T/NAME-ref.json, told apart by the reference's local ports
# (REF_FILTER, a pcap-filter(7) expression).
wire_run() {
    local name=$1 rate=$2 secs=$3 ref_pid
    wire_plan "$T/$name.yaml" "$NGX_PORT" "$rate" poisson "$secs"
    capture_start "$NGX_PORT" "$T/$name.pcap" || return 1
    rm -rf "${T:?}/$name"
    timeout 60 "${PRIO[@]}" "$BUILDDIR/tests/integration/wire_ref" "$NGX_PORT" "$rate" \
        "$((secs + 1))" "$RANDOM" >"$T/$name-ref.stdout" 2>"$T/$name-ref.stderr" &
    ref_pid=$!
    timeout 120 "${PRIO[@]}" "$SQUALL" run "$T/$name.yaml" -o "$T/$name" --quiet \
        >"$T/$name.stdout" 2>"$T/$name.stderr"
    RUN_RC=$?
    wait "$ref_pid"
    REF_RC=$?
    capture_stop
    REF_FILTER=$(ref_filter "$T/$name-ref.stdout")
    [ -n "$REF_FILTER" ] || { echo "FAIL: the reference sender printed no ports"; return 1; }
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/wire.py" "$T/$name.pcap" "$rate" 0.5 10000 \
        "not ($REF_FILTER)" >"$T/$name.json"
    /usr/bin/python3 "$SRCDIR/tests/integration/lib/wire.py" "$T/$name.pcap" "$rate" 0.5 10000 \
        "$REF_FILTER" >"$T/$name-ref.json"
}

# wcheck DESC PYEXPR NAME: a check over the wire figures of $T/NAME.json as `w`.
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
# "cpu" line, in USER_HZ ticks: proc(5)), in ms. Printed per attempt, for the reader.
steal_ms() {
    awk -v hz="$(getconf CLK_TCK)" '$1 == "cpu" { printf "%d", $9 * 1000 / hz }' /proc/stat
}

# judge NAME: prints its reasoning and sets VERDICT (see below) from squall's and the reference's
# figures and, for the two-sample KS, their gaps read back from the capture.
judge() {
    local out
    out=$(/usr/bin/python3 - "$T/$1.json" "$T/$1-ref.json" "$T/$1.pcap" "$REF_FILTER" <<'PY'
import json, os, sys
sys.path.insert(0, os.environ["SRCDIR"] + "/tests/integration/lib")
import wire
from scipy import stats
s, r = (json.load(open(p)) for p in sys.argv[1:3])
def tail(flt):
    gaps = wire.gaps_of(wire.request_stamps(sys.argv[3], flt))
    return [g - wire.SHIFT_NS for g in gaps if g >= wire.SHIFT_NS]
ks2 = stats.ks_2samp(tail("not (%s)" % sys.argv[4]), tail(sys.argv[4]))
off_s = 100 * (s["share_under_100us"] - s["law_under_100us"])
off_r = 100 * (r["share_under_100us"] - r["law_under_100us"])
if abs(off_s) <= 1.0 and s["ks_pvalue"] >= 0.01:
    v = "law"
elif off_s - off_r > 10.0:
    v = "fail"
elif abs(off_r) > 5.0:
    v = "void"
elif off_s - off_r <= 2.0 and ks2.pvalue >= 0.01:
    v = "near"
else:
    v = "fail"
print("share of gaps under 100 µs: squall %.2f %%, reference %.2f %%, law %.2f %% (squall %+.2f, "
      "reference %+.2f points); KS p against Exp(λ): squall %.3g, reference %.3g; two-sample KS "
      "of the shifted tails, squall vs reference: p %.3g -> %s" % (
      100 * s["share_under_100us"], 100 * r["share_under_100us"], 100 * s["law_under_100us"],
      off_s, off_r, s["ks_pvalue"], r["ks_pvalue"], ks2.pvalue, v))
PY
)
    echo "$out"
    VERDICT=${out##* }
}

# 700/s: the issue's figure for tick batching (25 % of gaps under 50 µs where the law gives
# 3.4 %). 5,000/s is measured by tools/bench/wire.sh: there the sender's own cost per request
# (about 10-20 µs here) moves the share under 100 µs by about a point, which this shared machine
# cannot tell from noise in a test (RESULTS.md, "wire").
# The machine's own limit, measured beside squall: a VM whose host wakes it late from a timer, or
# takes its CPU in the middle of a gap, releases the requests planned meanwhile together, which
# adds short gaps for any sender. On 2026-12-02 evening this VM's timer wake-ups were p50 77 µs,
# p99 0.9 ms late (clock_nanosleep, nothing else running), and a bare sleep-and-spin sender put
# 7.4-15.5 % of its gaps under 100 µs against the law's 6.76 %, changing from minute to minute
# (RESULTS.md, "The machine's own limit"). So the reference sender (wire_ref.c) runs at the same
# rate at the same time under the same capture, and each attempt is judged:
# - law: squall meets the issue's bars (share within 1 point of 1 - e^(-λ·100 µs), its shifted
#   tail passes KS against Exp(λ) at α = 0.01): the attempt passes, and the test;
# - fail: squall's share is more than 10 points above the reference's, however noisy the
#   machine (tick batching measured so beside the reference: +21 to +29 points);
# - void: the reference itself is more than 5 points off the law: the machine cannot be judged;
# - near: squall's share is at most 2 points above the reference's, and its shifted tail and the
#   reference's pass scipy's two-sample KS test at α = 0.01: squall's timing adds no more than 2
#   points to what this machine allowed a bare sender in the same seconds: the attempt passes
#   (measured tonight: squall 0.6-1.5 points above it);
# - fail: otherwise.
# Up to 3 attempts; the test passes at the first attempt that passes, fails when every judged
# attempt failed, and is skipped (exit 77) when none could be judged. Sending on a millisecond
# tick puts 25-40 % of gaps under 100 µs with a tail quantised to the tick (RESULTS.md, "Issue
# 12", "The machine's own limit"): it fails every judged attempt.
JUDGED_FAILS=0
PASSED=0
BROKEN=0 # a run or capture that went wrong: a failure, whatever the timing
for spec in "p700 700 16"; do
    read -r name rate secs <<<"$spec"
    for attempt in 1 2 3; do
        FAILED=0
        s0=$(steal_ms)
        t0=$(date +%s%N)
        wire_run "$name" "$rate" "$secs" || { BROKEN=1; break; }
        stolen=$(($(steal_ms) - s0))
        cpu_ms=$((($(date +%s%N) - t0) / 1000000 * $(nproc)))
        echo "attempt $attempt: the host took $stolen ms of the VM's $cpu_ms ms of CPU during the run ($((100 * stolen / (cpu_ms > 0 ? cpu_ms : 1))) % steal)"
        expect_rc "$name: the run exits 0 (got $RUN_RC)" "$T/$name" 0
        expect "$name: tcpdump dropped no packet (got $CAP_DROPPED)" test "$CAP_DROPPED" = 0
        n=$(rget "$T/$name" 'total("small", "2xx")')
        # Source: the capture itself; one "GET " packet per answered request.
        wcheck "$name: the capture holds one request packet per answered request ($n)" \
            "w['requests'] == $n" "$name"
        wcheck "$name: at least 10,000 consecutive gaps after the first 0.5 s" \
            "w['gaps'] == 10000" "$name"
        expect "reference sender: exits 0 (got $REF_RC: $(head -c 300 "$T/$name-ref.stderr"))" \
            test "$REF_RC" = 0
        nref=$(/usr/bin/python3 -c "import json, sys; print(json.load(open(sys.argv[1]))['requests'])" \
            "$T/$name-ref.stdout" 2>/dev/null)
        wcheck "reference sender: the capture holds each of its requests (${nref:-none})" \
            "w['requests'] == ${nref:-0} and w['gaps'] == 10000" "$name-ref"
        [ "$FAILED" = 0 ] || { BROKEN=1; break; } # not a timing question
        echo "attempt $attempt: squall: $(cat "$T/$name.json")"
        echo "attempt $attempt: reference: $(cat "$T/$name-ref.json")"
        judge "$name"
        case $VERDICT in
            law | near) PASSED=1; break ;;
            fail) JUDGED_FAILS=$((JUDGED_FAILS + 1)) ;;
        esac
    done
done
if [ "$BROKEN" = 0 ] && [ "$PASSED" = 1 ]; then
    echo "PASS: wire"
    exit 0
fi
if [ "$BROKEN" = 0 ] && [ "$JUDGED_FAILS" = 0 ]; then
    echo "NOT JUDGED (machine): wire: in no attempt did the reference sender come within 5 points of the exponential law on this machine (figures above): squall's timing on the wire cannot be judged here"
    exit 77
fi
echo "FAIL: wire"
exit 1
