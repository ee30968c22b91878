#!/usr/bin/env bash
# Target benchmark: GET throughput of `squall serve` on one core (CPU 1) against nginx serving a
# static file of about the same size on the same core (one worker), both driven by the raw-socket
# ceiling client (tools/bench/ceiling.c) on CPU 0, in the same run; then as many concurrent watch
# streams as the open-file limit allows, with the target's memory per stream (RSS delta / streams).
# Writes the target section of tools/bench/RESULTS.md.
# Usage: tools/bench/target.sh [BUILDDIR] [SECONDS] [STREAMS]  (defaults build, 5, 19000)
set -uo pipefail
cd "$(dirname "$0")/../.."
SRCDIR=$PWD
BUILDDIR=$(realpath "${1:-build}")
SECS=${2:-5}
STREAMS=${3:-19000}
export BUILDDIR SRCDIR
CEIL="$BUILDDIR/tools/bench/ceiling"
SQUALL="$BUILDDIR/squall"
for b in "$CEIL" "$SQUALL"; do
    [ -x "$b" ] || { echo "target.sh: $b not built (ninja -C $BUILDDIR)"; exit 1; }
done
source tests/integration/lib/nginx.sh
nginx_start bench-target 1 || exit 1
OUT="$NGX_DIR/bench"
mkdir -p "$OUT"
TPID=
serve_stop() {
    [ -n "$TPID" ] && kill -TERM "$TPID" 2>/dev/null && wait "$TPID" 2>/dev/null
    TPID=
}
trap 'serve_stop; nginx_stop' EXIT

serve_start() {
    TPORT=$(free_port)
    taskset -c 1 "$SQUALL" serve --listen "127.0.0.1:$TPORT" "$@" 2>"$OUT/serve.err" &
    TPID=$!
    wait_port "$TPORT" 50 || { echo "target.sh: serve did not start"; exit 1; }
}

# An object whose GET answer is about as long as nginx's file (body bytes).
serve_start
NGX_BYTES=$(stat -c %s "$NGX_DIR/www/small.json")
pad=x
for i in $(seq 200); do
    curl -s -X PUT --data "{\"model\":\"t-b\",\"site\":\"north\",\"note\":\"$pad\"}" \
        "http://127.0.0.1:$TPORT/v1/sites/north/gateways/gw-0001" >/dev/null
    len=$(curl -s "http://127.0.0.1:$TPORT/v1/sites/north/gateways/gw-0001" | wc -c)
    [ "$len" -ge "$NGX_BYTES" ] && break
    pad+=x
done
SERVE_BYTES=$len

med3() { sort -n | sed -n 2p; }
j() { /usr/bin/python3 -c 'import json,sys; d=json.load(sys.stdin); print(d[sys.argv[1]])' "$1"; }
ROWS=""
for c in 1 16 64; do
    for who in nginx target; do
        port=$NGX_PORT path=/small.json
        [ $who = target ] && port=$TPORT path=/v1/sites/north/gateways/gw-0001
        for r in 1 2 3; do
            taskset -c 0 timeout $((SECS + 30)) "$CEIL" --port "$port" --path "$path" \
                --connections $c --duration "$SECS" >"$OUT/$who-$c-$r.json"
        done
        eval "${who}_rps=$(for r in 1 2 3; do j rps <"$OUT/$who-$c-$r.json"; done | med3)"
        eval "${who}_err=$(for r in 1 2 3; do j errors <"$OUT/$who-$c-$r.json"; done |
            awk '{s+=$1} END{print s}')"
    done
    ROWS+=$(awk -v c=$c -v n="$nginx_rps" -v t="$target_rps" -v ne="$nginx_err" -v te="$target_err" \
        'BEGIN{printf "| %d | %.0f | %.0f | %.2f | %d / %d |", c, n, t, t / n, ne, te}')$'\n'
done
serve_stop

# Watch streams held: HTTP/1.1 needs one descriptor per stream on each side; the hard
# RLIMIT_NOFILE in this container is 20,000 (`ulimit -Hn`), so STREAMS stays below it.
ulimit -n "$(ulimit -Hn)"
serve_start --stream-buffer 65536
rss() { awk '/^VmRSS/{print $2}' "/proc/$TPID/status"; }
RSS0=$(rss)
/usr/bin/python3 - "$TPORT" "$STREAMS" "$TPID" >"$OUT/watch.json" <<'PY'
import json, resource, socket, sys, time, urllib.request
port, n, pid = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
resource.setrlimit(resource.RLIMIT_NOFILE, (20000, 20000))
base = f"http://127.0.0.1:{port}"
req = b"GET /v1/sites/harbor/gateways?watch=1 HTTP/1.1\r\nHost: t\r\n\r\n"
socks, t0 = [], time.monotonic()
for i in range(n):
    # Spread over 8 source addresses: with one, connect() slows to ~1 ms as the kernel searches
    # a nearly full ephemeral port range (measured: 19.5 s vs 2.5 s for 19,000 connections).
    s = socket.create_connection(("127.0.0.1", port), source_address=(f"127.0.0.{2 + i % 8}", 0))
    s.sendall(req)
    socks.append(s)
def stats():
    return json.load(urllib.request.urlopen(base + "/stats"))
deadline = time.monotonic() + 60
while stats()["streams"]["open"] < n and time.monotonic() < deadline:
    time.sleep(0.2)
opened = stats()["streams"]["open"]
t_open = time.monotonic() - t0
rss = int([l.split()[1] for l in open(f"/proc/{pid}/status") if l.startswith("VmRSS")][0])
# One write fans out to every stream; count the streams that received it.
t1 = time.monotonic()
urllib.request.urlopen(urllib.request.Request(base + "/v1/sites/harbor/gateways/gw-1",
                       data=b'{"k":1}', method="PUT")).read()
got = 0
for s in socks:
    s.settimeout(5)
    buf = b""
    try:
        while b'"type":"create"' not in buf:
            chunk = s.recv(65536)
            if not chunk:
                break
            buf += chunk
    except OSError:
        pass
    got += b'"type":"create"' in buf
t_fan = time.monotonic() - t1
print(json.dumps({"requested": n, "open": opened, "open_s": t_open, "rss_kib": rss,
                  "received": got, "fanout_s": t_fan,
                  "events_sent": stats()["events_sent"] if "events_sent" in stats() else
                  stats()["streams"]["events_sent"]}))
for s in socks:
    s.close()
PY
RSS1=$(j rss_kib <"$OUT/watch.json")
OPEN=$(j open <"$OUT/watch.json")
GOT=$(j received <"$OUT/watch.json")
OPEN_S=$(j open_s <"$OUT/watch.json")
FAN_S=$(j fanout_s <"$OUT/watch.json")
PER=$(awk -v a="$RSS0" -v b="$RSS1" -v n="$OPEN" 'BEGIN{printf "%.1f", (b - a) / n}')
serve_stop

SECTION=$(cat <<MD
<!-- target:begin (written by tools/bench/target.sh; edit the script, not this section) -->
## The embedded target (\`squall serve\`) vs nginx

$(date -u +%Y-%m-%d), $(nproc) CPUs; the server under test (squall serve, or nginx with one
worker) pinned to CPU 1, the ceiling client (tools/bench/ceiling) to CPU 0; loopback,
HTTP/1.1 keep-alive, closed loop, median of 3 runs of ${SECS} s. nginx serves \`/small.json\`
(${NGX_BYTES} bytes); the target answers GET of one object (${SERVE_BYTES} bytes of JSON, built
per request from the cached rendering). Goal: target/nginx >= 0.5.

### GET throughput on one core
| connections | nginx req/s | target req/s | target/nginx | errors nginx / target |
|---|---|---|---|---|
${ROWS}
### Watch streams held (HTTP/1.1, one connection each)
The hard open-file limit here is 20,000 per process (\`ulimit -Hn\`), and HTTP/1.1
needs one descriptor per stream on each side, so ${STREAMS} streams were requested (not 20,000;
the target has no HTTP/2, see DEVELOPERS.md).

| streams requested | open (target's /stats) | time to open all (s) | target RSS before / after (KiB) | RSS per stream (KiB) | streams that got one write's event | fan-out time (s) |
|---|---|---|---|---|---|---|
| ${STREAMS} | ${OPEN} | $(printf %.1f "$OPEN_S") | ${RSS0} / ${RSS1} | ${PER} | ${GOT} | $(printf %.2f "$FAN_S") |
<!-- target:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- target:begin.*?<!-- target:end -->", re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "target.sh: wrote the target section of $RES"
sed -n '/target:begin/,/target:end/p' "$RES"
