#!/usr/bin/env bash
# Where a closed-loop request's instructions go (issue 12; not a test): one `squall run` of a
# closed loop of CLIENTS clients on as many HTTP/1.1 connections for 4 s (CG_SECONDS) against a loopback
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
source tests/integration/lib/nginx.sh
nginx_start cgprof 1 || exit 1
trap 'nginx_stop; rm -rf "$BUILDDIR"' EXIT # after nginx_start, whose own EXIT trap this keeps
cat >"$BUILDDIR/plan.yaml" <<YAML
seed: 5
target: {url: "http://127.0.0.1:$NGX_PORT", connections: $CLIENTS, timeout: 60s}
requests:
  small: {kind: get, path: /small.json}
phases:
  - {name: closed, duration: ${CG_SECONDS:-4}s, clients: {count: $CLIENTS, think: 0s}, mix: {small: 1}}
brakes:
  - {unreachable: 60s}
YAML
valgrind --tool=callgrind --callgrind-out-file="$BUILDDIR/cg" "$SQUALL" run "$BUILDDIR/plan.yaml" \
    -o "$BUILDDIR/out" -q --no-brakes >/dev/null 2>"$BUILDDIR/cg.err"
nginx_stop 2>/dev/null
[ -n "${CG_KEEP:-}" ] && cp "$BUILDDIR/cg" "$CG_KEEP" # CG_KEEP=FILE keeps the profile
REQ=$(/usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1] + "/results.json"))
print(sum(c["count"] for c in d["cells"]))' "$BUILDDIR/out")
TOTAL=$(sed -n 's/^summary: //p' "$BUILDDIR/cg" | awk '{ print $1 }')
echo "$CLIENTS clients, $REQ requests, $TOTAL instructions: $((TOTAL / REQ)) per request"
# Exclusive instructions by shared object (callgrind's ob= names; libcurl 7.88 and libuv carry
# no debug symbols here, so their internals have no function names), then the inclusive cost of
# a few named entry points.
/usr/bin/python3 - "$BUILDDIR/cg" "$REQ" "$TOTAL" <<'PY'
import collections, re, sys
path, req, total = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
names = {"ob": {}, "fn": {}}
by_ob, incl = collections.Counter(), collections.Counter()
ob = fn = None
skip = False  # the cost line after calls= is the call's inclusive cost
watch = ("curl_multi_socket_action", "curl_multi_add_handle", "curl_multi_remove_handle",
         "curl_multi_info_read", "curl_easy_setopt", "curl_easy_getinfo", "uv_run", "run_finish")
called = collections.Counter()
def name(kind, v):
    m = re.match(r"\((\d+)\)(?: (.*))?", v)
    if not m:
        return v
    if m.group(2):
        names[kind][m.group(1)] = m.group(2)
    return names[kind].get(m.group(1), v)
cfn = None
for line in open(path):
    line = line.rstrip("\n")
    if line.startswith("ob="):
        ob = name("ob", line[3:])
    elif line.startswith("fn="):
        fn = name("fn", line[3:])
    elif line.startswith(("cob=",)):
        name("ob", line[4:])
    elif line.startswith("cfn="):
        cfn = name("fn", line[4:])
    elif line.startswith("calls="):
        skip = True
    elif line and (line[0].isdigit() or line[0] in "+-*"):
        parts = line.split()
        if len(parts) < 2:
            continue
        cost = int(parts[1])
        if skip:
            skip = False
            if cfn and any(cfn.startswith(w) for w in watch) and not (fn or "").startswith(cfn):
                called[cfn.split("'")[0]] += cost
        else:
            by_ob[ob] += cost
print("| shared object (exclusive) | instructions per request | share |")
print("|---|---|---|")
for o, c in by_ob.most_common(8):
    print("| %s | %.1fk | %.1f %% |" % (o.split("/")[-1], c / req / 1000, 100 * c / total))
print()
print("| entry point (inclusive, calls from outside it) | instructions per request | share |")
print("|---|---|---|")
for f, c in called.most_common():
    print("| %s | %.1fk | %.1f %% |" % (f, c / req / 1000, 100 * c / total))
PY
echo
echo "| function (inclusive) | instructions per request | share |"
echo "|---|---|---|"
callgrind_annotate --inclusive=yes --threshold=100 "$BUILDDIR/cg" 2>/dev/null |
    awk -v req="$REQ" -v total="$TOTAL" -v top="$TOP" '
    /^ *[0-9,]+ .*[:]/ && n < top {
        ir = $1; gsub(",", "", ir); fn = $0; sub(/^ *[0-9,]+ +(\([^)]*\) +)?/, "", fn)
        sub(/ \[.*$/, "", fn)
        printf "| %s | %.1fk | %.1f %% |\n", fn, ir / req / 1000, 100 * ir / total; n++ }'
