#!/usr/bin/env bash
# `squall profile` against a writer squall did not write: Debian's nginx logs a known plan's
# traffic (a 300-agent aligned fleet renewing every 10 s, 50/s Poisson reads with a list every
# 5 s on average, 20 watches held by nginx's echo_sleep for 5 s each) in its own `combined`
# format and in an NDJSON log_format with $msec and $request_time (nginx docs,
# ngx_http_log_module: both are taken when the request ends, so --time-at end). The plans
# derived from both logs must validate with `squall check` and give back the classes, the
# open-loop rate within 5 % and its mix within 2 points, Poisson arrivals, and the fleet with
# its agents, period and aligned timing; the NDJSON log, which carries durations, also the 20
# watches. About 80 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/profile-nginx"
rm -rf "$T"
mkdir -p "$T/tmp"
PORT=$(free_port)
USER_LINE=""
[ "$(id -u)" = 0 ] && USER_LINE="user root root;"
cat >"$T/nginx.conf" <<CONF
$USER_LINE
daemon off;
worker_processes 1;
pid $T/nginx.pid;
error_log $T/error.log warn;
load_module /usr/lib/nginx/modules/ngx_http_echo_module.so;
events { worker_connections 4096; }
http {
    client_body_temp_path $T/tmp;
    proxy_temp_path $T/tmp;
    fastcgi_temp_path $T/tmp;
    uwsgi_temp_path $T/tmp;
    scgi_temp_path $T/tmp;
    keepalive_requests 1000000;
    keepalive_timeout 120s;
    default_type application/json;
    log_format sqjson escape=json '{"msec":\$msec,"method":"\$request_method",'
        '"uri":"\$request_uri","status":\$status,"request_time":\$request_time,'
        '"client":"\$remote_addr","bytes":\$body_bytes_sent}';
    access_log $T/access.log combined;
    access_log $T/access.ndjson sqjson;
    server {
        listen 127.0.0.1:$PORT;
        location /v1/ {
            if (\$arg_watch) { rewrite ^ /watch-stream last; }
            return 200 '{"items":[]}\n';
        }
        # A long-lived watch: one NDJSON event, then the stream stays open 5 s.
        location = /watch-stream {
            internal;
            echo '{"type":"create","path":"/v1/sites/north/gateways/gw-1","version":1}';
            echo_flush;
            echo_sleep 5;
        }
    }
}
CONF
NGX_PID=
stop_nginx() {
    stop_pid "$NGX_PID"
    NGX_PID=
}
trap stop_nginx EXIT
nginx -p "$T" -e "$T/error.log" -c "$T/nginx.conf" &
NGX_PID=$!
wait_port "$PORT" || { echo "FAIL: nginx did not listen on $PORT"; cat "$T/error.log"; exit 1; }

run_plan "$T/run" "$SRCDIR/tests/data/plans/profile-known.yaml" --no-brakes \
    --set target.url="http://127.0.0.1:$PORT"
expect_rc "the known plan ran against nginx (exit $RUN_RC)" "$T/run" 0
sleep 6 # the last watches end (echo_sleep) and are logged
stop_nginx
SENT=$(rget "$T/run" "total('read-gateway', '2xx') + total('list-site', '2xx')")
echo "squall sent $SENT open-loop requests; nginx logged $(wc -l <"$T/access.log") lines"

"$SQUALL" profile "$T/access.log" -o "$T/combined.yaml" 2>"$T/combined.err"
rc=$?
expect "profile of the combined log exits 0 (got $rc: $(tail -1 "$T/combined.err"))" test $rc = 0
"$SQUALL" profile "$T/access.ndjson" --field time=msec --field path=uri \
    --field duration=request_time --time-at end -o "$T/ndjson.yaml" 2>"$T/ndjson.err"
rc=$?
expect "profile of the NDJSON log exits 0 (got $rc: $(tail -1 "$T/ndjson.err"))" test $rc = 0
for f in combined ndjson; do
    "$SQUALL" check "$T/$f.yaml" >"$T/$f.check" 2>&1
    rc=$?
    expect "squall check accepts the plan derived from the $f log (exit $rc)" test $rc = 0
done

# The derived plans against the known one (python3-yaml reads them as any YAML reader would).
/usr/bin/python3 "$SRCDIR/tests/integration/profile_check.py" "$T" "$SENT" combined ndjson || FAILED=1
[ "$FAILED" = 0 ] && echo "PASS: profile nginx" || echo "FAIL: profile nginx"
exit "$FAILED"
