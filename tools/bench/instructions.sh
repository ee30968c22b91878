#!/usr/bin/env bash
# Instructions per request of `squall run` (callgrind, whole process: start-up, schedule, engine,
# observers, results), for one or two squall binaries side by side on the same plans against
# the same nginx: the stable way to compare two builds on this shared machine, where wall-clock
# figures swing by +-50 %. Instruction counts are the same run after run for the same binary,
# inputs and environment, whatever else the machine does.
#   tools/bench/instructions.sh NEW_SQUALL [BASE_SQUALL]
# Plans (loopback nginx, /small.json, HTTP/1.1): an even open loop of 1,000/s for 4 s over 8
# connections (4,000 requests: the schedule's path), and an aligned fleet of 1,000 agents ticking
# every second for 3 s (3,000 requests in bursts: the fleet's path), and closed loops of 64 and
# 256 clients on as many connections for 2 s. Under callgrind squall runs
# some 50 times slower than natively, so it falls behind these rates; every request is still
# sent (late), and the count is what is divided by. How many loop passes a run takes depends a
# little on timing, so each figure is the median of 3 runs (min..max beside it). Prints a
# markdown table.
set -uo pipefail
cd "$(dirname "$0")/../.."
NEW=$(realpath "${1:?usage: instructions.sh NEW_SQUALL [BASE_SQUALL]}")
BASE=${2:+$(realpath "$2")}
command -v valgrind >/dev/null || { echo "instructions.sh: valgrind is needed"; exit 1; }
BUILDDIR=$(mktemp -d /tmp/squall-instr.XXXXXX)
export BUILDDIR
trap 'rm -rf "$BUILDDIR"' EXIT
source tests/integration/lib/nginx.sh
nginx_start instr 1 || exit 1

plan() { # NAME BODY [CONNECTIONS]
    cat >"$BUILDDIR/$1.yaml" <<YAML
seed: 5
target: {url: "http://127.0.0.1:$NGX_PORT", connections: ${3:-8}, timeout: 60s}
requests:
  small: {kind: get, path: /small.json}
phases:
$2
brakes:
  - {unreachable: 60s}
YAML
}
plan open '  - {name: open, rate: 1000/s, duration: 4s, mix: {small: 1}}'
plan fleet '  - {name: fleet, duration: 3s, fleet: {agents: 1000, every: 1s, timing: aligned, send: small}}'
# Closed loops on 64 and 256 connections: libcurl's per-request search of its connection cache
# grows with the connections of one multi handle (issue 12).
plan closed64 '  - {name: closed, duration: 2s, clients: {count: 64, think: 0s}, mix: {small: 1}}' 64
plan closed256 '  - {name: closed, duration: 2s, clients: {count: 256, think: 0s}, mix: {small: 1}}' 256

# instr BINARY PLAN: "instructions requests" of one run under callgrind.
instr() {
    local out="$BUILDDIR/out-$RANDOM" cg="$BUILDDIR/cg-$RANDOM"
    valgrind --tool=callgrind --callgrind-out-file="$cg" "$1" run "$BUILDDIR/$2.yaml" -o "$out" \
        -q --no-brakes >/dev/null 2>"$cg.err"
    local ir req
    ir=$(sed -n 's/^summary: //p' "$cg" | awk '{ print $1 }')
    req=$(/usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1] + "/results.json"))
print(sum(c["count"] for c in d["cells"]))' "$out")
    echo "$ir $req"
}

printf '| plan | build | requests | instructions per request, median of 3 (min..max) |\n'
printf '|---|---|---|---|\n'
for p in open fleet closed64 closed256; do
    for which in base new; do
        bin=$NEW
        [ "$which" = base ] && { [ -n "$BASE" ] || continue; bin=$BASE; }
        runs=()
        for k in 1 2 3; do
            read -r ir req < <(instr "$bin" "$p")
            runs+=("$((ir / req))")
        done
        read -r med lo hi < <(printf '%s\n' "${runs[@]}" | sort -n | awk '{ v[NR] = $1 }
            END { printf "%.1f %.1f %.1f\n", v[2] / 1000, v[1] / 1000, v[3] / 1000 }')
        printf '| %s | %s | %s | %sk (%s..%sk) |\n' "$p" "$which" "$req" "$med" "$lo" "$hi"
    done
done
