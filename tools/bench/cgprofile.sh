#!/usr/bin/env bash
# Where a closed-loop request's instructions go (issue 12; not a test): one `squall run` of a
# closed loop of CLIENTS clients on as many HTTP/1.1 connections for 2 s against a loopback
# nginx (/small.json), under callgrind; prints the functions with the largest inclusive
# instruction counts, per request, and their share of the process's total (callgrind_annotate
# --inclusive=yes). Usage: tools/bench/cgprofile.sh SQUALL [CLIENTS] [TOP]  (default 64, 30)
set -uo pipefail
cd "$(dirname "$0")/../.."
SQUALL=$(realpath "${1:?usage: cgprofile.sh SQUALL [CLIENTS] [TOP]}")
CLIENTS=${2:-64}
TOP=${3:-30}
BUILDDIR=$(mktemp -d /tmp/squall-cgprof.XXXXXX)
export BUILDDIR
trap 'rm -rf "$BUILDDIR"' EXIT
source tests/integration/lib/nginx.sh
nginx_start cgprof 1 || exit 1
cat >"$BUILDDIR/plan.yaml" <<YAML
seed: 5
target: {url: "http://127.0.0.1:$NGX_PORT", connections: $CLIENTS, timeout: 60s}
requests:
  small: {kind: get, path: /small.json}
phases:
  - {name: closed, duration: 2s, clients: {count: $CLIENTS, think: 0s}, mix: {small: 1}}
brakes:
  - {unreachable: 60s}
YAML
valgrind --tool=callgrind --callgrind-out-file="$BUILDDIR/cg" "$SQUALL" run "$BUILDDIR/plan.yaml" \
    -o "$BUILDDIR/out" -q --no-brakes >/dev/null 2>"$BUILDDIR/cg.err"
nginx_stop 2>/dev/null
REQ=$(/usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1] + "/results.json"))
print(sum(c["count"] for c in d["cells"]))' "$BUILDDIR/out")
TOTAL=$(sed -n 's/^summary: //p' "$BUILDDIR/cg" | awk '{ print $1 }')
echo "$CLIENTS clients, $REQ requests, $TOTAL instructions: $((TOTAL / REQ)) per request"
echo "| function (inclusive) | instructions per request | share |"
echo "|---|---|---|"
callgrind_annotate --inclusive=yes --threshold=100 "$BUILDDIR/cg" 2>/dev/null |
    awk -v req="$REQ" -v total="$TOTAL" -v top="$TOP" '
    /^ *[0-9,]+ .*[:]/ && n < top {
        ir = $1; gsub(",", "", ir); fn = $0; sub(/^ *[0-9,]+ +(\([^)]*\) +)?/, "", fn)
        sub(/ \[.*$/, "", fn)
        printf "| %s | %.1fk | %.1f %% |\n", fn, ir / req / 1000, 100 * ir / total; n++ }'
