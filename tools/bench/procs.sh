#!/usr/bin/env bash
# `squall run --procs N` for N in PROCS (default "1 2") against `squall serve --delay fixed:20ms`
# (every answer waits 20 ms on the target's side, so the target answers in parallel and is not
# what the shards wait for), loopback only. Writes the "procs" section of tools/bench/RESULTS.md
# (between its markers). Two points per N, each the median of REPS runs:
#   open loop: a total of RATE/s of GETs for 4 s: achieved rate (merged completed / 4 s) and
#       schedule lag p99 (the largest of the shards'), generator-bound seconds;
#   aligned tick: AGENTS fleet agents, every 2 s for 6 s (3 ticks): the merged ticks' dispatch
#       spread (first request of any shard to the last of any, results.json "storms"), median and
#       max over the warm ticks (2 and 3: connections open), the first request's delay after the
#       tick instant, and the first tick's spread apart (it opens the connections).
# Connections per process: enough for the process's share at once (RATE x 20 ms, AGENTS / N).
# The shards split the plan when this squall's shards do (measured first: a 4-agent tick with
# --procs 2 sends 4 renewals, or 8 when each shard sends the whole plan); when they do not, each
# shard runs RATE/N and AGENTS/N (--set), which is the same load.
# Usage: tools/bench/procs.sh [BUILDDIR] [PROCS] [RATE] [AGENTS] [REPS]
#   on this 2-core machine: tools/bench/procs.sh build "1 2" 20000 5000 3   (about 2 minutes)
#   on a bigger machine:    tools/bench/procs.sh build "1 2 4 8 16" 100000 20000 3
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
PROCS=${2:-1 2}
RATE=${3:-20000}
AGENTS=${4:-5000}
REPS=${5:-3}
SQUALL="$BUILDDIR/squall"
[ -x "$SQUALL" ] || { echo "procs.sh: $SQUALL not built (ninja -C $BUILDDIR)"; exit 1; }
source tests/integration/lib/port.sh
W="$BUILDDIR/bench-procs"
rm -rf "$W"
mkdir -p "$W"
TPORT=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$TPORT" --delay fixed:20ms >"$W/serve.log" 2>&1 &
TPID=$!
trap 'kill $TPID 2>/dev/null; wait $TPID 2>/dev/null' EXIT
wait_port "$TPORT" || { echo "procs.sh: squall serve did not start"; exit 1; }
URL="http://127.0.0.1:$TPORT"
curl -s -X PUT -d '{"model":"t-a"}' "$URL/v1/sites/north/gateways/gw-1" >/dev/null
puts() { curl -s "$URL/stats" | /usr/bin/python3 -c 'import json, sys
s = json.load(sys.stdin)["requests"].get("PUT", {}); print(sum(s.values()))'; }

plan() { # plan FILE CONNECTIONS: the open-loop phase, then the aligned ticks
    cat >"$1" <<YAML
target: {url: "$URL", connections: $2, timeout: 10s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  beat: {kind: write, method: PUT, path: "/v1/sites/north/leases/gw-{{agent}}", body: '{"n":1}'}
phases:
  - {name: open, rate: $RATE/s, duration: 4s, mix: {read: 1}}
  - {name: storm, duration: 6s, fleet: {agents: $AGENTS, every: 2s, timing: aligned, send: beat}}
YAML
}

# Do the shards split the plan? A 4-agent tick with --procs 2.
cat >"$W/probe.yaml" <<YAML
target: {url: "$URL", connections: 8, timeout: 5s}
requests:
  beat: {kind: write, method: PUT, path: "/v1/sites/north/leases/probe-{{agent}}", body: '{"n":1}'}
phases:
  - {name: storm, duration: 1s, fleet: {agents: 4, every: 1s, timing: aligned, send: beat}}
YAML
b=$(puts)
"$SQUALL" run "$W/probe.yaml" -o "$W/probe" --procs 2 --quiet >"$W/probe.log" 2>&1
SPLIT=$(($(puts) - b == 4))
echo "procs.sh: shards split the plan: $([ $SPLIT = 1 ] && echo yes || echo "no (--set RATE/N, AGENTS/N)")"

point() { # point N REP: one --procs N run into $W/n$N-$REP
    local n=$1 rep=$2 sets=() conns
    conns=$(((RATE / 50 + AGENTS) / n + 16))
    plan "$W/plan-$n.yaml" "$conns"
    if [ "$SPLIT" = 0 ]; then
        sets=(--set "phases.open.rate=$((RATE / n))/s" --set "phases.storm.fleet.agents=$((AGENTS / n))")
    fi
    timeout 120 "$SQUALL" run "$W/plan-$n.yaml" -o "$W/n$n-$rep" --procs "$n" --quiet \
        "${sets[@]}" >"$W/n$n-$rep.log" 2>&1
}

row() { # row N: the median of REPS runs' figures
    /usr/bin/python3 - "$W" "$1" "$REPS" <<'PY'
import json, statistics, sys
w, n, reps = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
runs = []
for rep in range(reps):
    try:
        d = json.load(open(f"{w}/n{n}-{rep}/results.json"))
    except OSError:
        continue
    done = sum(c["count"] for c in d["cells"] if c["phase"] == "open" and c["outcome"] == "2xx")
    lags = []
    bound = 0
    for i in d["meta"]["inputs"]:
        g = i["sections"].get("generator", {})
        lags.append(g.get("schedule_lag_p99_ms", float("nan")))
        bound += g.get("generator_bound", {}).get("seconds", 0)
    ticks = [t for a in d["sections"].get("storms", {}).get("storm", {}).get("actions", [])
             for t in a["ticks"]]
    ticks.sort(key=lambda t: t["t_ns"])
    warm = [t["dispatch_spread_ns"] / 1e6 for t in ticks[1:]]
    firsts = [t["first_written_ns"] / 1e6 for t in ticks[1:]]
    cold = ticks[0]["dispatch_spread_ns"] / 1e6 if ticks else float("nan")
    nan = float("nan")
    runs.append((done / 4.0, max(lags), bound, statistics.median(warm) if warm else nan,
                 max(warm) if warm else nan, max(firsts) if firsts else nan, cold,
                 sum(t["requests"] for t in ticks)))
if not runs:
    print(f"| {n} | no results | | | | | | |")
    sys.exit()
runs.sort()
m = runs[len(runs) // 2]
print(f"| {n} | {m[0]:.0f} | {m[1]:.1f} | {m[2]} | {m[3]:.1f} / {m[4]:.1f} | {m[5]:.1f} | {m[6]:.1f} | {m[7]} |")
PY
}

for rep in $(seq 0 $((REPS - 1))); do
    for n in $PROCS; do
        point "$n" "$rep"
    done
done
ROWS=$(for n in $PROCS; do row "$n"; done)
SECTION=$(cat <<MD
<!-- procs:begin (written by tools/bench/procs.sh; edit the script, not this section) -->
## Shards on one machine: \`squall run --procs N\`

$(date -u +%Y-%m-%d), $(nproc) CPUs (shared with the target), \`squall serve --delay fixed:20ms\`,
loopback. Open loop: $RATE/s of GETs in total for 4 s. Aligned tick: $AGENTS agents every 2 s,
3 ticks; dispatch spread = the merged tick's first request (any shard) to its last (any shard);
"warm" = ticks 2 and 3, whose connections were opened by tick 1.
Median of $REPS runs. Shards split the plan: $([ $SPLIT = 1 ] && echo "yes" || echo "no, so each shard ran RATE/N and AGENTS/N (--set)").

| procs | achieved /s | schedule lag p99, worst shard (ms) | generator-bound s (all shards) | warm ticks: dispatch spread median / max (ms) | warm ticks: first written max (ms) | first tick (cold connections): spread (ms) | tick requests |
|---|---|---|---|---|---|---|---|
$ROWS

Command: \`tools/bench/procs.sh build "$PROCS" $RATE $AGENTS $REPS\`. On a bigger machine, the
same command with more processes (\`"1 2 4 8 16" 100000 20000 3\`) should scale with the cores
until the target's cores are the limit (run the target on other cores or another machine).
<!-- procs:end -->
MD
)
echo "procs.sh: writing the procs section of tools/bench/RESULTS.md"
printf '%s\n' "$SECTION" | /usr/bin/python3 tools/bench/write_section.py procs tools/bench/RESULTS.md
