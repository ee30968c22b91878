#!/usr/bin/env bash
# A target restart is survived: the embedded target is killed with SIGKILL mid-run under 2,000
# watch streams and restarted on the same port 3 s later; the run carries on (the engine's
# "refuses connections" is left to the unreachable brake, whose 10 s window a 3 s outage does not
# fill), every watch reconnects (the new target's own /stats counts 2,000 open streams), the
# gets in between are counted as connect-refused and the results are complete. Then the
# reproduction of a crash fixed before: one watch reconnecting every 50 ms against a target that
# fails every request outgrew the reconnect log sized for 4 reconnects per watcher.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/target-restart"
rm -rf "$T"
mkdir -p "$T"
N=2000

serve_start || exit 1
PORT=$SERVE_PORT
cat >"$T/plan.yaml" <<YAML
seed: 3
target: {url: "$SERVE_URL", connections: 4, timeout: 2s}
vars: {site: [north, south, harbor, ridge]}
requests:
  read: {kind: list, path: /v1/sites/north/gateways}
  follow: {kind: watch, path: "/v1/sites/{{site}}/gateways?watch=1",
           reconnect: {policy: full-jitter, base: 200ms, cap: 2s}}
phases:
  - {name: steady, rate: 20/s, duration: 14s, mix: {read: 1}, watches: {follow: $N}}
# The outage's refused gets are 3 s of 10: more than the default 10 % error brake allows.
brakes:
  - {error-rate: 50%, for: 10s}
YAML
timeout 90 "$SQUALL" run "$T/plan.yaml" -o "$T/out" --quiet >"$T/run.stdout" 2>"$T/run.stderr" &
RP=$!
trap 'kill -KILL $RP 2>/dev/null; serve_stop' EXIT
# Wait until every watch is open on the first target (at most 6 s), then kill it.
for ((i = 0; i < 60; i++)); do
    [ "$(serve_stats 's["streams"]["open"]' 2>/dev/null)" = $N ] && break
    sleep 0.1
done
FIRST=$(serve_stats 's["streams"]["open"]')
expect "the first target holds all $N streams before the kill (got $FIRST)" test "$FIRST" = $N
kill -KILL "$SERVE_PID"
wait "$SERVE_PID" 2>/dev/null
SERVE_PID=
sleep 3
expect "squall is still running 3 s after the target died" kill -0 $RP
"$SQUALL" serve --listen "127.0.0.1:$PORT" >"$T/target2.log" 2>&1 &
SERVE_PID=$!
wait_port "$PORT" || echo "FAIL: the target did not listen again on $PORT"
BACK=0
for ((i = 0; i < 80; i++)); do
    BACK=$(serve_stats 's["streams"]["open"]' 2>/dev/null)
    [ "$BACK" = $N ] && break
    sleep 0.1
done
expect "every watch reconnected to the restarted target within 8 s (open: $BACK of $N)" \
    test "$BACK" = $N
wait $RP
RUN_RC=$?
expect "the run ended on its own at its planned end (exit $RUN_RC: 0, 1 or 7; no brake, 3 or 4)" \
    test "$RUN_RC" = 0 -o "$RUN_RC" = 1 -o "$RUN_RC" = 7
expect "squall named the refused connections and left them to the brake" \
    grep -q "refuses connections: the unreachable brake decides" "$T/run.stderr"
rcheck "results are complete: not interrupted, refused gets counted, answers before and after" \
    "not d['meta']['interrupted'] and total('read', 'connect-refused') > 0 and \
     total('read', '2xx') > 150" "$T/out"
rcheck "the watches section counts $N streams, all open at the end, each reconnected at least once" \
    "d['sections']['watches']['steady']['classes']['follow']['streams'] == $N and \
     d['sections']['watches']['steady']['classes']['follow']['open_at_end'] == $N and \
     d['sections']['watches']['steady']['classes']['follow']['reconnects'] >= $N" "$T/out"
serve_stop

# --- squall serve closes idle connections, never a watch stream waiting for events -------------
serve_start --idle-timeout 1 || exit 1
# The embedded target's own input checks: two different Content-Lengths are an unrecoverable
# error (RFC 9112, 6.3: 400), a %00 in a path is refused (it used to cut the path short), a
# watch from a version the store never reached is sent to relist (410), not left waiting.
TWO=$(printf 'PUT /v1/sites/north/gateways/gw-1 HTTP/1.1\r\nHost: t\r\nContent-Length: 2\r\nContent-Length: 5\r\n\r\n{}' |
    /usr/bin/python3 -c 'import socket, sys
s = socket.create_connection(("127.0.0.1", int(sys.argv[1])))
s.sendall(sys.stdin.buffer.read())
s.settimeout(2)
print(s.recv(64).split(b"\r\n")[0].decode())' "$SERVE_PORT")
expect "two different Content-Lengths: 400 (got '$TWO')" test "$TWO" = "HTTP/1.1 400 Bad Request"
NUL=$(curl -s -o /dev/null -w '%{http_code}' -X PUT -d '{}' "$SERVE_URL/v1/sites/north/gateways/gw-%00x")
expect "a %00 in a path: 400 (got $NUL), and nothing stored at the cut path" \
    test "$NUL" = 400 -a "$(curl -s -o /dev/null -w '%{http_code}' "$SERVE_URL/v1/sites/north/gateways/gw-")" = 404
AHEAD=$(curl -s -o /dev/null -w '%{http_code}' -m 2 "$SERVE_URL/v1/sites/north/gateways?watch=1&since=999999")
expect "a watch from a version ahead of the store: 410 (got $AHEAD)" test "$AHEAD" = 410
IDLE=$(/usr/bin/python3 - "$SERVE_PORT" <<'PY'
import socket, sys, time
port = int(sys.argv[1])
idle = socket.create_connection(("127.0.0.1", port))          # says nothing at all
watch = socket.create_connection(("127.0.0.1", port))
watch.sendall(b"GET /v1/sites/north/gateways?watch=1 HTTP/1.1\r\nHost: t\r\n\r\n")
idle.settimeout(4)
t0 = time.monotonic()
try:
    closed = idle.recv(1) == b""
except OSError:
    closed = True
took = time.monotonic() - t0
watch.settimeout(0.5)
head = watch.recv(4096)
time.sleep(max(0, 2.5 - took))
watch.settimeout(0.2)
try:
    alive = watch.recv(1) != b""   # an event would be data; a close is b""
except socket.timeout:
    alive = True
print("%d %.1f %d %d" % (closed, took, head.startswith(b"HTTP/1.1 200"), alive))
PY
)
read -r closed took head alive <<<"$IDLE"
expect "an idle connection is closed after --idle-timeout 1 (closed=$closed after ${took}s)" \
    test "$closed" = 1
expect "a watch stream with no events stays open past it (answered=$head, open=$alive)" \
    test "$head" = 1 -a "$alive" = 1
serve_stop

# --- the reconnect log past 4 entries per watcher (fixed on main before; a regression test) ----
serve_start --fail-rate 1 || exit 1
cat >"$T/flap.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 1, timeout: 2s}
requests:
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1",
           reconnect: {policy: fixed, base: 50ms}}
phases:
  - {name: w, duration: 2s, watches: {follow: 1}}
YAML
run_plan "$T/flap" "$T/flap.yaml"
expect "one watch failing every 50 ms for 2 s: the run ends by itself (exit $RUN_RC: 0, 1, 3 or 7)" \
    test "$RUN_RC" = 0 -o "$RUN_RC" = 1 -o "$RUN_RC" = 3 -o "$RUN_RC" = 7
rcheck "its reconnect log holds every reconnect (more than 4; none dropped)" \
    "len(d['sections']['watches']['w']['reconnect_log']['delay_ns']) > 10 and \
     not d['sections']['watches']['w']['reconnect_log']['truncated']" "$T/flap"
exit $FAILED
