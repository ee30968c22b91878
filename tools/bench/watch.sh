#!/usr/bin/env bash
# Watch and storm benchmark (not a test): how many watch streams one squall process holds and
# its memory per stream (RSS delta / streams), over HTTP/1.1 (the embedded target: one
# connection per stream, its /stats counts the streams open) and HTTP/2 (nginx h2c, a location
# that holds each request 30 s, 100 streams per connection); then the dispatch spread of aligned
# fleet ticks of 1,000 and 5,000 agents with warm connections (nginx, a small file), from the
# results' "storms" section. Writes the watch section of tools/bench/RESULTS.md.
# Usage: tools/bench/watch.sh [BUILDDIR]   (default build; about 3 minutes)
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
SQUALL="$BUILDDIR/squall"
[ -x "$SQUALL" ] || { echo "watch.sh: $SQUALL not built (ninja -C $BUILDDIR)"; exit 1; }
source tests/integration/lib/port.sh
W="$BUILDDIR/bench-watch"
rm -rf "$W"
mkdir -p "$W/www"
printf '{"holder":"gw-1","site":"north","stamp":1}\n' >"$W/www/small.json"
NP1=$(free_port)
NP2=$(free_port)
cat >"$W/nginx.conf" <<EOF
load_module /usr/lib/nginx/modules/ngx_http_echo_module.so;
worker_processes 1;
daemon off;
pid $W/nginx.pid;
error_log $W/error.log error;
worker_rlimit_nofile 20000;
events { worker_connections 65000; }
http {
    access_log off;
    keepalive_requests 1000000;
    keepalive_timeout 120s;
    http2_max_concurrent_streams 128;
    server {
        listen 127.0.0.1:$NP1 backlog=4096;
        listen 127.0.0.1:$NP2 http2 backlog=4096;
        root $W/www;
        location = /small.json { }
        location /hold { echo_sleep 30; echo "ok"; }
    }
}
EOF
NPID=
TPID=
cleanup() {
    for p in $TPID $NPID; do
        kill -TERM "$p" 2>/dev/null && wait "$p" 2>/dev/null
    done
    TPID=
    NPID=
}
trap cleanup EXIT
nginx -p "$W" -e "$W/error.log" -c "$W/nginx.conf" &
NPID=$!
wait_port "$NP1" && wait_port "$NP2" || { echo "watch.sh: nginx did not start"; cat "$W/error.log"; exit 1; }
TPORT=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$TPORT" >"$W/target.log" 2>&1 &
TPID=$!
wait_port "$TPORT" || { echo "watch.sh: squall serve did not start"; exit 1; }

rss_kib() { awk '/^VmRSS/ { print $2 }' "/proc/$1/status" 2>/dev/null || echo 0; }
open_streams() { curl -s "127.0.0.1:$TPORT/stats" | /usr/bin/python3 -c 'import json, sys; print(json.load(sys.stdin)["streams"]["open"])'; }

# hold PROTO N: a 14 s phase that opens N watches spread over 3 s; prints "N held rss_kib fds".
hold() {
    local proto=$1 n=$2 url path streams=""
    if [ "$proto" = 1.1 ]; then
        url="http://127.0.0.1:$TPORT"
        path="/v1/sites/north/gateways?watch=1"
    else
        url="http://127.0.0.1:$NP2"
        path="/hold?watch=1"
        streams=", streams: 100"
    fi
    cat >"$W/hold.yaml" <<YAML
target: {url: "$url", http: "$proto", connections: 1, timeout: 5s$streams}
requests:
  follow: {kind: watch, path: "$path"}
phases:
  - {name: hold, duration: 14s, watches: {follow: $n, open: spread 3s}}
YAML
    rm -rf "$W/hold-$proto-$n"
    "$SQUALL" run "$W/hold.yaml" -o "$W/hold-$proto-$n" --quiet 2>"$W/hold-$proto-$n.err" &
    local spid=$!
    (sleep 60 && kill -TERM "$spid") >/dev/null 2>&1 & # a watchdog; the phase ends by itself
    local dog=$!
    sleep 10 # opened over the first 3 s; settled well before the phase ends at 14 s
    local rss fds held
    rss=$(rss_kib "$spid")
    fds=$(ls "/proc/$spid/fd" 2>/dev/null | wc -l)
    [ "$proto" = 1.1 ] && held=$(open_streams) || held=-
    wait "$spid"
    local rc=$?
    kill "$dog" 2>/dev/null
    wait "$dog" 2>/dev/null
    if [ "$proto" != 1.1 ]; then
        # Held to the end of the phase: every stream ends there as "cancelled".
        held=$(/usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1] + "/results.json"))
print(sum(c["count"] for c in d["cells"] if c["class"] == "follow" and c["outcome"] == "cancelled"))' "$W/hold-$proto-$n" 2>/dev/null || echo "?")
    fi
    echo "$n $held $rss $fds $rc"
}

declare -A ROW
for proto in 1.1 2; do
    base=""
    sizes="100 1000 5000 10000"
    [ "$proto" = 2 ] && sizes="100 1000 5000 20000 50000"
    for n in $sizes; do
        r=$(hold "$proto" "$n")
        echo "watch.sh: HTTP/$proto $r"
        ROW[$proto-$n]=$r
        [ "$proto" = 2 ] && sleep 1
    done
done

# Aligned ticks: every agent due at once on each 2 s tick, 4 ticks; the first tick warms the
# connections, ticks 2-4 are reported.
spread_run() { # spread_run PROTO AGENTS CONNS
    local proto=$1 n=$2 conns=$3 streams=""
    local port=$NP1
    [ "$proto" = 2 ] && { port=$NP2; streams=", streams: 100"; }
    cat >"$W/storm.yaml" <<YAML
target: {url: "http://127.0.0.1:$port", http: "$proto", connections: $conns, timeout: 10s$streams}
requests:
  status: {kind: get, path: /small.json}
phases:
  - {name: storm, duration: 8s, fleet: {agents: $n, every: 2s, timing: aligned, send: status}}
YAML
    rm -rf "$W/storm-$proto-$n"
    timeout 60 "$SQUALL" run "$W/storm.yaml" -o "$W/storm-$proto-$n" --quiet 2>/dev/null
    /usr/bin/python3 - "$W/storm-$proto-$n" "$proto" "$n" "$conns" <<'PY'
import json, statistics, sys
d = json.load(open(sys.argv[1] + "/results.json"))
a = d["sections"]["storms"]["storm"]["actions"][0]
t = [x for x in a["ticks"] if x["requests"] == int(sys.argv[3])][1:]
ms = lambda v: "%.1f" % (v / 1e6)
sp = [x["dispatch_spread_ns"] for x in t]
print("| %s | %s | %s | %d | %s / %s | %s | %d | %s |" % (
    sys.argv[3], "HTTP/" + sys.argv[2], sys.argv[4], len(t), ms(statistics.median(sp)), ms(max(sp)),
    ms(max(x["first_written_ns"] for x in t)), max(x["peak_in_flight"] for x in t),
    ms(max(x["p99_ns"] for x in t))))
PY
}
STORM=""
for n in 1000 5000; do
    STORM+="$(spread_run 1.1 "$n" 256)"$'\n'
    STORM+="$(spread_run 2 "$n" 4)"$'\n'
done
cleanup

row() { # row PROTO N BASE_N
    local r=(${ROW[$1-$2]}) b=(${ROW[$1-$3]})
    local per
    per=$(awk -v a="${r[2]}" -v b="${b[2]}" -v n="${r[0]}" -v m="${b[0]}" 'BEGIN { printf "%.1f", (a - b) / (n - m) }')
    echo "| HTTP/$1 | ${r[0]} | ${r[1]} | ${r[3]} | ${r[2]} | $per | ${r[4]} |"
}
SECTION=$(
    cat <<MD
<!-- watch:begin (written by tools/bench/watch.sh; edit the script, not this section) -->
## Watch streams and fleet storms (\`squall run\`)

$(date -u +%Y-%m-%d), $(nproc) CPUs, RLIMIT_NOFILE hard limit $(ulimit -Hn). One squall process
opens N watch streams spread over 3 s and holds them; RSS and open files are sampled 10 s in.
HTTP/1.1 against \`squall serve\` (one connection per stream; "held" is the target's
/stats streams.open), HTTP/2 against nginx h2c (a location that answers after 30 s; 100 streams
per connection; "held" = streams still open when the phase ended). KiB per stream = RSS delta
over the 100-stream run / extra streams.

| protocol | streams | held | open files | squall RSS (KiB) | KiB per stream | exit |
|---|---|---|---|---|---|---|
$(row 1.1 1000 100)
$(row 1.1 5000 100)
$(row 1.1 10000 100)
$(row 2 1000 100)
$(row 2 5000 100)
$(row 2 20000 100)
$(row 2 50000 100)

Over HTTP/1.1 the open-file limit stops a plan at about $(($(ulimit -Hn) - 64 - 1)) watches per
process (squall refuses such a plan before sending anything and says so); over HTTP/2 the
same process holds more streams than it has files.

### Aligned fleet ticks, warm connections (nginx, a 43-byte file; ticks 2-4 of 4, every 2 s)

Dispatch spread = first to last request of the tick written on its connection (libcurl's
PREREQFUNCTION); first written = the tick's first request after the tick instant. The plan's
fleets have no \`connections\` key: over HTTP/1.1 an aligned fleet then has a connection per
agent (the default where the open-file limit allows; peak in flight shows it), over HTTP/2 the
agents share the target's connections. tools/bench/storm.sh compares the two.

| agents | protocol | target.connections | ticks | dispatch spread median / max (ms) | first written max (ms) | peak in flight | response p99 max (ms) |
|---|---|---|---|---|---|---|---|
${STORM%$'\n'}
<!-- watch:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- watch:begin.*?<!-- watch:end -->", re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "watch.sh: wrote the watch section of $RES"
sed -n '/watch:begin/,/watch:end/p' "$RES"
