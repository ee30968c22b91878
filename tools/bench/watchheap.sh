#!/usr/bin/env bash
# Who holds a watch stream's memory (issue 12; not a test): one squall process runs a 2 s warm-up
# phase (2 requests/s), then opens N watch streams at once and holds them for 8 s, under
# heaptrack (Debian's heaptrack 1.4). tools/bench/heapdiff.py then gives the live heap by
# allocation site at 1.5 s (no stream open) and 8 s (all N open); the difference / N is each
# stream's share by site. HTTP/1.1 against `squall serve` (one connection per stream), HTTP/2
# against nginx h2c (a location that answers after 30 s, 100 streams per connection).
# Usage: tools/bench/watchheap.sh [BUILDDIR] [N] [DEPTH]   (default build 1000 6)
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
N=${2:-1000}
DEPTH=${3:-6}
SQUALL="$BUILDDIR/squall"
source tests/integration/lib/port.sh
W=$(mktemp -d /tmp/squall-wheap.XXXXXX)
mkdir -p "$W/www"
NP=$(free_port)
cat >"$W/nginx.conf" <<NG
load_module /usr/lib/nginx/modules/ngx_http_echo_module.so;
worker_processes 1;
daemon off;
pid $W/nginx.pid;
error_log $W/error.log error;
worker_rlimit_nofile 20000;
events { worker_connections 65000; }
http {
    access_log off;
    http2_max_concurrent_streams 128;
    server {
        listen 127.0.0.1:$NP http2 backlog=4096;
        root $W/www;
        location /hold { echo_sleep 30; echo "ok"; }
        location / { return 200 "ok"; }
    }
}
NG
NPID=
TPID=
cleanup() {
    for p in $TPID $NPID; do kill -TERM "$p" 2>/dev/null && wait "$p" 2>/dev/null; done
    rm -rf "$W"
}
trap cleanup EXIT
nginx -p "$W" -e "$W/error.log" -c "$W/nginx.conf" &
NPID=$!
TPORT=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$TPORT" >"$W/serve.log" 2>&1 &
TPID=$!
wait_port "$NP" && wait_port "$TPORT" || { echo "watchheap.sh: targets did not start"; exit 1; }
for proto in 1.1 2; do
    if [ "$proto" = 1.1 ]; then
        url="http://127.0.0.1:$TPORT" wpath="/v1/sites/north/gateways?watch=1" gpath=/v1/sites/north/gateways/a streams=""
    else
        url="http://127.0.0.1:$NP" wpath="/hold?watch=1" gpath=/x streams=", streams: 100"
    fi
    cat >"$W/plan.yaml" <<YAML
target: {url: "$url", http: "$proto", connections: 1, timeout: 20s$streams}
requests:
  poke: {kind: get, path: "$gpath"}
  follow: {kind: watch, path: "$wpath"}
phases:
  - {name: warm, duration: 2s, rate: 2/s, mix: {poke: 1}}
  - {name: hold, duration: 8s, watches: {follow: $N, open: at-once}}
YAML
    heaptrack -o "$W/ht-$proto" "$SQUALL" run "$W/plan.yaml" -o "$W/out-$proto" --quiet --keep >/dev/null 2>&1
    f=$(ls "$W"/ht-"$proto"*.zst | head -1)
    zstd -qdc "$f" >"$W/ht-$proto.raw"
    echo "== HTTP/$proto, $N streams: live heap by site at 1.5 s and 9 s (heapdiff.py, depth $DEPTH)"
    /usr/bin/python3 tools/bench/heapdiff.py "$W/ht-$proto.raw" 1.5 9 "$DEPTH"
done
