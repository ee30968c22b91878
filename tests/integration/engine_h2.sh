#!/usr/bin/env bash
# Engine over HTTP/2 against a real nginx: many requests over reused h2c (prior knowledge) and
# TLS (ALPN) connections with zero errors, within the connection cap.
# Source of the trap: curl issue #10634 (libcurl 7.88.1 fails the second transfer on a reused
# h2c connection opened with prior knowledge; fixed by curl pull request #10643, in 8.0.0).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/probe.sh"
nginx_start engine-h2 || exit 1
T="$NGX_DIR/out"
mkdir -p "$T"
SIZE=$(stat -c %s "$NGX_DIR/www/small.json")

# The h2c port speaks only HTTP/2 (nginx "listen ... http2" without TLS), so any request that
# fell back to HTTP/1.1 would fail: all 2xx proves every request went over h2.
for conf in "1 64" "4 64" "4 256"; do
    set -- $conf
    N=20000
    probe "$T/h2c-$1-$2.json" --url "http://127.0.0.1:$NGX_H2_PORT" --path /small.json \
        --requests $N --concurrency $(($1 * $2)) --connections "$1" --streams "$2" --http 2
    check "h2c, $1 connection(s) x $2 streams: $N requests, all 2xx, <= $1 connections" \
        "d['outcomes']['2xx'] == $N and d['bytes_in_body'] == $SIZE * $N and \
         d['max_connections'] <= $1 and d['loop_close'] == 0" "$T/h2c-$1-$2.json"
done

# Reuse after idle: sequential requests (concurrency 1) each reuse the one connection.
probe "$T/h2c-seq.json" --url "http://127.0.0.1:$NGX_H2_PORT" --path /small.json \
    --requests 500 --concurrency 1 --connections 1 --http 2
check "h2c, 500 sequential requests on one reused connection, all 2xx" \
    'd["outcomes"]["2xx"] == 500 and d["max_connections"] == 1' "$T/h2c-seq.json"

probe "$T/h2-tls.json" --url "https://127.0.0.1:$NGX_TLS_PORT" --path /small.json \
    --requests 5000 --concurrency 128 --connections 2 --streams 64 --http 2 --ca "$NGX_CA"
check "h2 over TLS (ALPN), 2 connections x 64 streams: 5000 requests, all 2xx" \
    'd["outcomes"]["2xx"] == 5000 and d["max_connections"] <= 2' "$T/h2-tls.json"

exit $FAILED
