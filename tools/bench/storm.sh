#!/usr/bin/env bash
# Aligned-tick storm benchmark (not a test; issue 12): one squall process, a fleet of AGENTS
# agents all due on the same wall-clock tick every 2 s (STORM_EVERY) for 6 ticks, against `squall serve` on
# loopback (one PUT per agent per tick). For each variant (a fleet `connections` setting and
# the target's connection count) and each repeat it reads the results' "storms" section and
# prints the dispatch spread (first to last request of a tick written on its connection,
# libcurl's pre-request stamp) of ticks 2-6 (the first tick opens the connections), when the
# first and the last were written after the tick's instant, then the
# distribution over all repeats' ticks (the variants run interleaved: repeat 1 of each, then
# repeat 2 of each...). Usage:
#   tools/bench/storm.sh [BUILDDIR] [REPEATS] [AGENTS] [VARIANT...]
# VARIANT is SHARING:CONNECTIONS, e.g. shared:256 per-agent:256 (the default: both of those):
# SHARING is the fleet's `connections` key, or plain for none (a build without the key).
# Set STORM_BUILDS="DIR1 DIR2 ..." to compare builds: every variant runs with each build in turn
# (build 1, build 2, ..., then the next repeat), and the rows are named DIR's last part/VARIANT.
# Set STORM_EVERY to another period in seconds (default 2; the phase lasts 6 periods): under
# strace a tick of thousands of agents lasts over a second, and libcurl 7.88 checks its idle
# connections only at the first request a second or more after its last check, so STORM_STRACE
# wants a period that leaves a quiet second between ticks (5 at 5,000 agents).
# Set STORM_WRAP to run squall under a wrapper (e.g. "chrt -f 50"). With STORM_CG=1 each run
# is under callgrind instead (some 50 times slower: the ticks then spread over seconds) and the
# table gives the instructions per request of the whole process, the figure that is stable on
# this shared machine (median of the repeats, min..max). With STORM_STRACE=1 each run is under
# `strace -f` instead and the table counts, per tick from the second on, the system calls
# between the wake-up that released the tick and its first request written (sendto), by name:
# counts, unlike times, do not move with the machine's load or strace's own cost.
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
REPEATS=${2:-3}
AGENTS=${3:-5000}
EVERY=${STORM_EVERY:-2}
shift 3 2>/dev/null || shift $#
VARIANTS=("$@")
[ ${#VARIANTS[@]} -gt 0 ] || VARIANTS=(shared:256 per-agent:256)
SQUALL="$BUILDDIR/squall"
read -r -a BUILDS <<<"${STORM_BUILDS:-$BUILDDIR}"
for b in "${BUILDS[@]}"; do
    [ -x "$b/squall" ] || { echo "storm.sh: $b/squall not built"; exit 1; }
done
[ -x "$SQUALL" ] || SQUALL="${BUILDS[0]}/squall"
source tests/integration/lib/port.sh
W=$(mktemp -d /tmp/squall-storm.XXXXXX)
TPID=
cleanup() {
    [ -n "$TPID" ] && kill -TERM "$TPID" 2>/dev/null && wait "$TPID" 2>/dev/null
    TPID=
    rm -rf "$W"
}
trap cleanup EXIT
PORT=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$PORT" >"$W/serve.log" 2>&1 &
TPID=$!
wait_port "$PORT" || { echo "storm.sh: squall serve did not start"; exit 1; }

echo "storm.sh: $(date -u '+%F %H:%M') UTC, $(nproc) CPUs, load $(cut -d' ' -f1-3 /proc/loadavg), $AGENTS agents, $REPEATS repeats"
for v in "${VARIANTS[@]}"; do
    sharing=${v%%:*}
    conns=${v##*:}
    key=""
    [ "$sharing" = plain ] || key=", connections: $sharing"
    cat >"$W/plan-$v.yaml" <<YAML
target: {url: "http://127.0.0.1:$PORT", http: "1.1", connections: $conns, timeout: 10s}
requests:
  renew:
    kind: write
    method: PUT
    path: "/v1/sites/north/leases/{{agent}}"
    body: '{"holder":"{{agent}}","stamp":{{now_ns}}}'
phases:
  - {name: storm, duration: $((6 * EVERY))s, fleet: {agents: $AGENTS, every: ${EVERY}s, timing: aligned, send: renew$key}}
YAML
done

# A row's name: the variant, after its build's when builds are compared.
row() {
    if [ ${#BUILDS[@]} -gt 1 ]; then echo "$(basename "$1")/$2"; else echo "$2"; fi
}
for r in $(seq 1 "$REPEATS"); do
    for v in "${VARIANTS[@]}"; do
    for b in "${BUILDS[@]}"; do
        n=$(row "$b" "$v")
        rm -rf "$W/out"
        wrap=${STORM_WRAP:-}
        [ -n "${STORM_CG:-}" ] && wrap="valgrind --tool=callgrind --callgrind-out-file=$W/cg"
        [ -n "${STORM_STRACE:-}" ] && wrap="strace -f -tt -o $W/st"
        # Exit 1 is a FAIL verdict (the results are there); no results.json is a failed run.
        timeout 600 $wrap "$b/squall" run "$W/plan-$v.yaml" -o "$W/out" --quiet --no-brakes --keep 2>"$W/err"
        [ -f "$W/out/results.json" ] || { echo "storm.sh: $n run $r failed: $(tail -3 "$W/err")" >&2; continue; }
        if [ -n "${STORM_CG:-}" ]; then
            ir=$(sed -n 's/^summary: //p' "$W/cg" | awk '{ print $1 }')
            /usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1]))
print(int(sys.argv[2]) / sum(c["count"] for c in d["cells"]))' "$W/out/results.json" "$ir" >>"$W/cg-${n//\//_}"
            continue
        fi
        if [ -n "${STORM_STRACE:-}" ]; then
            /usr/bin/python3 tools/bench/tickcalls.py "$W/st" >>"$W/st-${n//\//_}"
            continue
        fi
        /usr/bin/python3 - "$W/out/results.json" "$v" "$AGENTS" >>"$W/ticks-${n//\//_}" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
a = d["sections"]["storms"]["storm"]["actions"][0]
t = [x for x in a["ticks"] if x["requests"] == int(sys.argv[3])][1:]
for x in t:
    print(x["dispatch_spread_ns"] / 1e6, x["first_written_ns"] / 1e6, x["peak_in_flight"], x["p99_ns"] / 1e6)
PY
    done
    done
done

for v in "${VARIANTS[@]}"; do
for b in "${BUILDS[@]}"; do
    n=$(row "$b" "$v")
    if [ -n "${STORM_CG:-}" ]; then
        [ -s "$W/cg-${n//\//_}" ] || continue
        sort -n "$W/cg-${n//\//_}" | awk -v v="$n" '{ a[NR] = $1 } END { printf "| %s | %d | %.1fk (%.1fk..%.1fk) |\n", v, NR, a[int((NR + 1) / 2)] / 1000, a[1] / 1000, a[NR] / 1000 }'
        continue
    fi
    if [ -n "${STORM_STRACE:-}" ]; then
        [ -s "$W/st-${n//\//_}" ] || continue
        /usr/bin/python3 tools/bench/tickcalls.py --table "$n" "$W/st-${n//\//_}"
        continue
    fi
    /usr/bin/python3 - "$W/ticks-${n//\//_}" "$n" <<'PY'
import statistics, sys
try:
    rows = [list(map(float, l.split())) for l in open(sys.argv[1]) if l.strip()]
except OSError:
    rows = []
if not rows:
    print("| %s | 0 ticks |" % sys.argv[2]); sys.exit()
q = lambda v, p: v[min(len(v) - 1, int(p * len(v)))]
sp = sorted(r[0] for r in rows)
fw = sorted(r[1] for r in rows)
lw = sorted(r[0] + r[1] for r in rows)
print("| %s | %d | %.1f | %.1f / %.1f | %.1f | %.2f / %.2f / %.1f | %.1f / %.1f | %d | %.1f |" % (
    sys.argv[2], len(rows), statistics.median(sp), sp[0], q(sp, 0.9), sp[-1],
    statistics.median(fw), q(fw, 0.9), fw[-1], statistics.median(lw), q(lw, 0.9),
    max(int(r[2]) for r in rows), statistics.median(r[3] for r in rows)))
PY
done
done | if [ -n "${STORM_CG:-}" ]; then
    echo "| variant (fleet connections : target connections) | runs | instructions per request, median (min..max) |"
    echo "|---|---|---|"
    cat
elif [ -n "${STORM_STRACE:-}" ]; then
    echo "| variant (fleet connections : target connections) | ticks | system calls from the wake-up to the first write, median (min..max) | of them poll | poll calls per request in the tick | connections opened (connect) |"
    echo "|---|---|---|---|---|---|"
    cat
else { echo "| variant (fleet connections : target connections) | ticks | spread median (ms) | min / p90 (ms) | max (ms) | first written p50 / p90 / max (ms) | last written p50 / p90 (ms) | peak in flight | response p99 median (ms) |"; echo "|---|---|---|---|---|---|---|---|---|"; cat; }; fi
