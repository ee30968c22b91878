# Shared test fixture: a real nginx (Debian's, with its echo module) on free loopback ports,
# configured and run entirely under "$BUILDDIR/nginx-<name>/". Source it, then:
#     nginx_start NAME     # sets NGX_DIR, NGX_PORT (HTTP/1.1), NGX_H2_PORT (h2c, prior
#                          # knowledge), NGX_TLS_PORT (https, HTTP/2 by ALPN), NGX_PID, and the
#                          # certificate paths below; installs an EXIT trap that stops nginx
#     nginx_stop           # stops it by pid (also run by the trap)
# Locations (on every port):
#     /small.json           a small JSON file on disk ($NGX_DIR/www/small.json)
#     /delay/<N>ms          "ok\n" after a server-side echo_sleep of N ms, N in 1 10 50 200 1000
#     /fail/503             503 with a JSON body
#     /echo/body            echoes the request body (any method)
#     /echo/headers         "site=<X-Squall-Site header> auth=<Authorization header>\n"
#     /echo/args            "args=<the query string>\n"
#     /auth/bearer          200 only with "Authorization: Bearer $NGX_TOKEN", 401 otherwise
#     /mtls/ok              200 only when a client certificate signed by our CA was presented,
#                           403 otherwise (TLS port; the server asks for it as optional)
#     /stream/ticks         a watch stream held open: an NDJSON event every 100 ms for up to
#                           10 s; nginx notices a client that closed at its next write, so its
#                           $request_time says how long the client held it, to about 0.2 s
# Certificates (generated with openssl per test): $NGX_CA (CA), $NGX_CLIENT_CERT/$NGX_CLIENT_KEY
# (signed by that CA), $NGX_OTHER_CA (an unrelated CA, for verification failures). The server
# certificate is for IP 127.0.0.1.
# Caution: echo_sleep does not notice a client closing; abandoned delayed requests keep a server
# slot until their sleep ends.

# shellcheck source=port.sh
source "$(dirname "${BASH_SOURCE[0]}")/port.sh"

NGX_MODULE=/usr/lib/nginx/modules/ngx_http_echo_module.so
NGX_TOKEN=gw-fleet-test-token-7f3a

_ngx_certs() {
    local d=$1/tls
    mkdir -p "$d"
    (
        cd "$d"
        openssl req -x509 -newkey rsa:2048 -nodes -keyout ca.key -out ca.pem -days 2 \
            -subj "/CN=squall test CA" 2>/dev/null
        openssl req -x509 -newkey rsa:2048 -nodes -keyout other-ca.key -out other-ca.pem -days 2 \
            -subj "/CN=squall unrelated CA" 2>/dev/null
        openssl req -newkey rsa:2048 -nodes -keyout server.key -out server.csr \
            -subj "/CN=127.0.0.1" 2>/dev/null
        printf 'subjectAltName=IP:127.0.0.1\n' >server.ext
        openssl x509 -req -in server.csr -CA ca.pem -CAkey ca.key -CAcreateserial \
            -out server.pem -days 2 -extfile server.ext 2>/dev/null
        openssl req -newkey rsa:2048 -nodes -keyout client.key -out client.csr \
            -subj "/CN=gateway-north-1" 2>/dev/null
        openssl x509 -req -in client.csr -CA ca.pem -CAkey ca.key -CAcreateserial \
            -out client.pem -days 2 2>/dev/null
    ) || return 1
    NGX_CA=$d/ca.pem
    NGX_OTHER_CA=$d/other-ca.pem
    NGX_CLIENT_CERT=$d/client.pem
    NGX_CLIENT_KEY=$d/client.key
}

_ngx_delays() {
    local ms
    for ms in 1 10 50 200 1000; do
        printf '        location = /delay/%sms { echo_sleep %s; echo "ok"; }\n' \
            "$ms" "$(awk "BEGIN { print $ms / 1000 }")"
    done
}

_ngx_ticks() {
    local i
    printf '        location = /stream/ticks {\n'
    for ((i = 1; i <= 100; i++)); do
        printf '            echo '"'"'{"type":"update","version":%d}'"'"'; echo_flush; echo_sleep 0.1;\n' "$i"
    done
    printf '        }\n'
}

# With NGX_ACCESS_LOG=1 before nginx_start, nginx writes its own NDJSON access log to
# $NGX_DIR/access.ndjson: $msec (when the line is written, ms resolution), the method, the
# request URI with its query, the status, $request_time (from the request's first byte to the
# log line, s with ms resolution) (nginx docs, ngx_http_log_module).
_ngx_access_log() {
    if [ "${NGX_ACCESS_LOG:-0}" = 1 ]; then
        printf '%s\n' "    log_format sqjson escape=json '{\"msec\":\$msec,\"method\":\"\$request_method\",'" \
            "        '\"uri\":\"\$request_uri\",\"status\":\$status,\"rt\":\$request_time}';" \
            "    access_log $1/access.ndjson sqjson;"
    else
        echo "    access_log off;"
    fi
}

_ngx_conf() {
    local d=$1 user=""
    [ "$(id -u)" = 0 ] && user="user root root;"
    cat >"$d/nginx.conf" <<CONF
$user
daemon off;
worker_processes 1;
pid $d/nginx.pid;
error_log $d/error.log warn;
load_module $NGX_MODULE;
events { worker_connections 8192; }
http {
$(_ngx_access_log "$d")
    client_body_temp_path $d/tmp/body;
    proxy_temp_path $d/tmp/proxy;
    fastcgi_temp_path $d/tmp/fastcgi;
    uwsgi_temp_path $d/tmp/uwsgi;
    scgi_temp_path $d/tmp/scgi;
    keepalive_requests 10000000;
    keepalive_timeout 120s;
    http2_max_concurrent_streams 512;
    default_type application/json;
    server {
        listen 127.0.0.1:$NGX_PORT backlog=4096;
        listen 127.0.0.1:$NGX_H2_PORT http2;
        listen 127.0.0.1:$NGX_TLS_PORT ssl http2;
        ssl_certificate $d/tls/server.pem;
        ssl_certificate_key $d/tls/server.key;
        ssl_client_certificate $d/tls/ca.pem;
        ssl_verify_client optional;
        root $d/www;
        location = /small.json { }
$(_ngx_delays)
$(_ngx_ticks)
        location = /fail/503 { return 503 '{"error":"busy"}\n'; }
        location /v1/leases/ { echo_read_request_body; echo '{"renewed":true}'; }
        location = /echo/body { echo_read_request_body; echo_request_body; }
        location = /auth/bearer {
            if (\$http_authorization != "Bearer $NGX_TOKEN") { return 401 '{"auth":"refused"}\n'; }
            return 200 '{"auth":"ok"}\n';
        }
        location = /echo/headers { echo "site=\$http_x_squall_site auth=\$http_authorization"; }
        location = /echo/args { echo "args=\$args"; }
        location = /mtls/ok {
            if (\$ssl_client_verify != SUCCESS) { return 403 '{"mtls":"refused"}\n'; }
            return 200 '{"mtls":"ok"}\n';
        }
    }
}
CONF
}

nginx_stop() {
    stop_pid "${NGX_PID:-}"
    NGX_PID=
}

# nginx_start NAME [CPU]: CPU pins the server (one worker) with taskset, for benchmarks.
nginx_start() {
    local name=$1 cpu=${2:-}
    [ -r "$NGX_MODULE" ] || { echo "FAIL: nginx echo module missing ($NGX_MODULE)"; return 1; }
    NGX_DIR="${BUILDDIR:?}/nginx-$name"
    rm -rf "$NGX_DIR"
    mkdir -p "$NGX_DIR/www" "$NGX_DIR/tmp"
    NGX_PORT=$(free_port)
    NGX_H2_PORT=$(free_port)
    NGX_TLS_PORT=$(free_port)
    _ngx_certs "$NGX_DIR" || { echo "FAIL: openssl could not make test certificates"; return 1; }
    printf '{"site":"north","gateways":[{"id":"gw-0001","model":"t-a","online":true},' \
        >"$NGX_DIR/www/small.json"
    printf '{"id":"gw-0002","model":"t-b","online":false}]}\n' >>"$NGX_DIR/www/small.json"
    _ngx_conf "$NGX_DIR"
    local pin=()
    [ -n "$cpu" ] && pin=(taskset -c "$cpu")
    "${pin[@]}" nginx -p "$NGX_DIR" -e "$NGX_DIR/error.log" -c "$NGX_DIR/nginx.conf" &
    NGX_PID=$!
    trap nginx_stop EXIT
    local p
    for p in "$NGX_PORT" "$NGX_H2_PORT" "$NGX_TLS_PORT"; do
        if ! wait_port "$p"; then
            echo "FAIL: nginx did not listen on 127.0.0.1:$p; its log:"
            cat "$NGX_DIR/error.log"
            nginx_stop
            return 1
        fi
    done
}
