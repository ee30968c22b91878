#!/usr/bin/env bash
# `squall run` with `http: "2"`: PUTs with bodies and GETs over multiplexed, reused h2c
# connections with zero errors, and never a silent fall-back to HTTP/1.1.
# Against nginx's h2c port (HTTP/2 only, prior knowledge; Debian's nginx 1.22.1) every request
# must succeed. Against the embedded target (`squall serve`): if it speaks cleartext HTTP/2
# (checked first with curl --http2-prior-knowledge) the same holds; if it does not, the run must
# stop at once with exit 4 and a message saying so, counting no request as a success.
# Sources: curl issue #10634 (libcurl 7.88.1 fails the second transfer on a reused h2c
# connection opened with prior knowledge; fixed by curl pull request #10643, in 8.0.0); RFC 9113
# §3.3 (prior knowledge: the client sends the preface first; a server that does not speak
# HTTP/2 cannot answer it).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/run-h2-target"
rm -rf "$T"
mkdir -p "$T"
stop_all() { serve_stop; nginx_stop; }

# plan URL CONNECTIONS STREAMS PUT_PATH GET_PATH: 2,000 PUTs with bodies and 2,000 GETs in 2 s.
plan() {
    cat <<YAML
target: {url: "$1", http: "2", connections: $2, streams: $3, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  put: {kind: write, method: PUT, path: "$4", body: '{"model":"t-{{seq}}","site":"harbor"}'}
  get: {kind: get, path: "$5"}
phases:
  - {name: steady, rate: 2000/s, duration: 2s, mix: {put: 1, get: 1}}
YAML
}

nginx_start run-h2 || exit 1
trap stop_all EXIT
for conf in "1 64" "4 16"; do
    set -- $conf
    plan "http://127.0.0.1:$NGX_H2_PORT" "$1" "$2" /echo/body /small.json >"$T/ngx-$1.yaml"
    run_plan "$T/ngx-$1" "$T/ngx-$1.yaml"
    expect_rc "nginx h2c, $1 x $2: exit code 0" "$T/ngx-$1" 0
    rcheck "nginx h2c, $1 connection(s) x $2 streams: 4,000 requests, all 2xx, PUTs and GETs" \
        'total("put", "2xx") + total("get", "2xx") == 4000 and total("put", "2xx") > 1500 and total("get", "2xx") > 1500 and total("put") + total("get") == 4000' \
        "$T/ngx-$1"
done
# The h1-only port: prior-knowledge openers get no HTTP/2 answer; nothing may count as a success.
plan "http://127.0.0.1:$NGX_PORT" 4 16 /echo/body /small.json >"$T/ngx-h1.yaml"
run_plan "$T/ngx-h1" "$T/ngx-h1.yaml"
expect "nginx HTTP/1.1-only port with http: 2: exit 4 (target unusable)" [ "$RUN_RC" = 4 ]
expect "... with a message saying it does not speak HTTP/2" grep -q "HTTP/2" "$T/ngx-h1.stderr"
rcheck "... and no request counted as 2xx" 'total("put", "2xx") + total("get", "2xx") == 0' \
    "$T/ngx-h1"
nginx_stop

serve_start || exit 1
plan "$SERVE_URL" 4 16 "/v1/sites/harbor/gateways/gw-{{seq}}" /v1/sites/harbor/gateways/gw-1 \
    >"$T/tgt.yaml"
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/harbor/gateways/gw-1" >/dev/null
if curl -s -o /dev/null --max-time 2 --http2-prior-knowledge "$SERVE_URL/v1/sites/harbor/gateways/gw-1"; then
    echo "note: squall serve speaks cleartext HTTP/2 (prior knowledge)"
    run_plan "$T/tgt" "$T/tgt.yaml"
    expect_rc "squall serve h2c: exit code 0" "$T/tgt" 0
    rcheck "squall serve h2c, 4 x 16: 4,000 requests, all 2xx (zero resets)" \
        'total("put", "2xx") + total("get", "2xx") == 4000' "$T/tgt"
    puts=$(serve_stats 's["requests"]["by_method"]["PUT"]' 2>/dev/null || echo "?")
    echo "note: the target counted $puts PUTs"
else
    echo "note: squall serve does not speak cleartext HTTP/2 (the preface gets an HTTP/1.1 answer)"
    run_plan "$T/tgt" "$T/tgt.yaml"
    expect "squall serve with http: 2: exit 4 (target unusable), not silent HTTP/1.1" \
        [ "$RUN_RC" = 4 ]
    expect "... with a message saying it does not speak HTTP/2" grep -q "HTTP/2" "$T/tgt.stderr"
    rcheck "... no request counted as 2xx, and the run stopped within a few requests" \
        'total("put", "2xx") + total("get", "2xx") == 0 and total("put") + total("get") < 200' \
        "$T/tgt"
fi
exit $FAILED
