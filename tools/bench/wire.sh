#!/usr/bin/env bash
# Timing as the wire sees it, for this build against a baseline build measured in the same
# session: every request captured on loopback by tcpdump (tests/integration/lib/capture.sh),
# gaps read back at nanosecond resolution (tests/integration/lib/wire.py), nginx with one worker.
# Writes the "wire" section of tools/bench/RESULTS.md (between its markers).
#   even 1,700/s for SECONDS: send lag (on the wire - intended, libcurl's pre-request stamp:
#       the cells' lag histogram) p50/p99, response p50 - service p50, client CPU µs/request
#   Poisson 700/s (16 s) and 5,000/s (6 s): share of gaps under 100 µs against the law's
#       1 - e^(-λ·100 µs), and KS of the gaps of 100 µs or more, shifted by 100 µs, vs Exp(λ)
# squall and nginx run at a real-time priority (chrt, SCHED_FIFO; needs root) so that the other
# work of this shared machine does not preempt them in the middle of a gap (a "quiet core").
# Usage: tools/bench/wire.sh BASELINE_BUILDDIR [BUILDDIR] [SECONDS]   (about 2 minutes)
set -uo pipefail
cd "$(dirname "$0")/../.."
SRCDIR=$PWD
BASE=$(realpath "${1:?usage: wire.sh BASELINE_BUILDDIR [BUILDDIR] [SECONDS]}")
BUILDDIR=$(realpath "${2:-build}")
SECS=${3:-5}
export BUILDDIR SRCDIR
for b in "$BASE/squall" "$BUILDDIR/squall"; do
    [ -x "$b" ] || { echo "wire.sh: $b not built"; exit 1; }
done
[ "$(id -u)" = 0 ] || { echo "wire.sh: needs root (tcpdump on lo, chrt)"; exit 1; }
source tests/integration/lib/nginx.sh
source tests/integration/lib/capture.sh
nginx_start bench-wire 1 || exit 1
trap 'capture_stop; nginx_stop' EXIT
for pid in "$NGX_PID" $(pgrep -P "$NGX_PID"); do chrt -f -p 10 "$pid" >/dev/null; done
OUT="$NGX_DIR/bench"
mkdir -p "$OUT"
LOAD_BEFORE=$(cut -d' ' -f1-3 /proc/loadavg)

# point BIN NAME RATE ARRIVALS SECONDS: one captured run; results in $OUT/NAME, CPU in .cpu.
point() {
    local bin=$1 name=$2 rate=$3 arr=$4 secs=$5
    wire_plan "$OUT/$name.yaml" "$NGX_PORT" "$rate" "$arr" "$secs"
    rm -rf "${OUT:?}/$name"
    capture_start "$NGX_PORT" "$OUT/$name.pcap" || return 1
    /usr/bin/time -f "%U %S" -o "$OUT/$name.cpu" taskset -c 0 chrt -f 20 \
        timeout $((secs + 30)) "$bin" run "$OUT/$name.yaml" -o "$OUT/$name" --quiet \
        >"$OUT/$name.log" 2>&1
    capture_stop
    /usr/bin/python3 tests/integration/lib/wire.py "$OUT/$name.pcap" "$rate" 0.5 \
        >"$OUT/$name.wire.json"
}

# row NAME: a table row's figures from a point's results and capture.
row() {
    /usr/bin/python3 - "$OUT/$1" <<'PY'
import json, sys
p = sys.argv[1]
d = json.load(open(p + "/results.json"))
w = json.load(open(p + ".wire.json"))
u, s = map(float, open(p + ".cpu").read().split()[-2:])
c = [c for c in d["cells"] if c["outcome"] == "2xx"][0]
sm = c["summary"]
n = sum(x["count"] for x in d["cells"])
errs = n - c["count"]
gaps = "%.2f %% (law %.2f %%) | %.3f (p %.3g)" % (
    w["share_under_100us"] * 100, w["law_under_100us"] * 100, w["ks_statistic"], w["ks_pvalue"])
if p.endswith("-even"):
    gaps = "— (even arrivals: gaps p1 / p50 / p99 %.0f / %.0f / %.0f µs) | —" % (
        w["gap_us_quantiles"]["1"], w["gap_us_quantiles"]["50"], w["gap_us_quantiles"]["99"])
print("%.3f / %.3f | %.3f | %.1f | %s | %d" % (
    sm["lag"]["p50"] / 1e6, sm["lag"]["p99"] / 1e6,
    (sm["response"]["p50"] - sm["service"]["p50"]) / 1e6, (u + s) * 1e6 / max(n, 1), gaps, errs))
PY
}

ROWS=""
for spec in "even 1700 even $SECS" "p700 700 poisson 16" "p5000 5000 poisson 6"; do
    read -r name rate arr secs <<<"$spec"
    for which in base new; do
        bin="$BUILDDIR/squall"
        [ "$which" = base ] && bin="$BASE/squall"
        point "$bin" "$which-$name" "$rate" "$arr" "$secs" || exit 1
        ROWS+="| $rate/s $arr | $which | $(row "$which-$name") |"$'\n'
    done
done
LOAD_AFTER=$(cut -d' ' -f1-3 /proc/loadavg)
SECTION=$(cat <<MD
<!-- wire:begin (written by tools/bench/wire.sh; edit the script, not this section) -->
## Timing on the wire (issue 12)

$(date -u '+%Y-%m-%d %H:%M') UTC, 2 CPUs, libcurl $(curl-config --version | cut -d' ' -f2), nginx 1 worker on CPU 1, squall on
CPU 0, both SCHED_FIFO (chrt; the machine is shared: load average before / after
$LOAD_BEFORE / $LOAD_AFTER), loopback, \`/small.json\`, 64 connections, every request captured by
tcpdump (nanosecond stamps) and the gaps read at microsecond resolution. Command:
\`tools/bench/wire.sh $1 ${2:-build} $SECS\`; base = the baseline build named first (main before
this work), new = this tree. Send lag = on the wire (libcurl's pre-request stamp) − intended;
CPU = the process's user+sys (\`/usr/bin/time\`) per request; the share is of the first 10,000
gaps after 0.5 s; KS = scipy.stats.kstest of those gaps of 100 µs or more, less 100 µs, against
Exp(λ) (memoryless; passes at α = 0.01 when p ≥ 0.01).
Goals: send lag p50 / p99 ≤ 0.05 / 0.5 ms at 1,700/s; share within 1 point of the law; KS passes;
response p50 − service p50 ≤ 0.1 ms.

| load | build | send lag p50 / p99 (ms) | response p50 − service p50 (ms) | CPU µs/req | gaps under 100 µs | KS D (p) | errors |
|---|---|---|---|---|---|---|---|
${ROWS}
<!-- wire:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read()
pat = re.compile(r"<!-- wire:begin.*?<!-- wire:end -->", re.S)
text = pat.sub(lambda m: section, text, count=1) if pat.search(text) else \
    text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "wire.sh: wrote the wire section of $RES"
sed -n '/wire:begin/,/wire:end/p' "$RES"
