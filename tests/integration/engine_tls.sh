#!/usr/bin/env bash
# Engine TLS against a real nginx with certificates made by openssl in this test: mutual TLS
# succeeds with the client certificate and is refused without it; a server certificate from an
# unknown CA is a TLS error; `insecure` skips verification.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/probe.sh"
nginx_start engine-tls || exit 1
T="$NGX_DIR/out"
mkdir -p "$T"
BASE="https://127.0.0.1:$NGX_TLS_PORT"
CLIENT=(--cert "$NGX_CLIENT_CERT" --key "$NGX_CLIENT_KEY")

for http in 1.1 2; do
    probe "$T/mtls-$http.json" --url "$BASE" --path /mtls/ok --requests 20 --concurrency 4 \
        --connections 2 --http $http --ca "$NGX_CA" "${CLIENT[@]}"
    check "HTTP/$http mTLS with the client certificate: 200 (nginx ssl_client_verify SUCCESS)" \
        'd["outcomes"]["2xx"] == 20 and d["last_status"] == 200' "$T/mtls-$http.json"
done

# nginx's location answers 403 when $ssl_client_verify != SUCCESS (lib/nginx.sh).
probe "$T/nocert.json" --url "$BASE" --path /mtls/ok --requests 5 --ca "$NGX_CA"
check "without the client certificate the mTLS location refuses (403)" \
    'd["outcomes"]["4xx"] == 5 and d["last_status"] == 403' "$T/nocert.json"

# CURLE_PEER_FAILED_VERIFICATION is 60 in curl's include/curl/curl.h.
probe "$T/badca.json" --url "$BASE" --path /small.json --requests 5 --ca "$NGX_OTHER_CA"
# The first verification failure makes the target unreachable (nothing later can succeed), so
# the probe stops: the requests already in flight fail the same way, the rest are never sent.
check "a server certificate from an unknown CA is a TLS error (curl code 60), unreachable at once" \
    'd["outcomes"]["tls"] >= 1 and d["outcomes"]["2xx"] == 0 and \
     d["first_curl_error"] == 60 and d["unreachable"]' "$T/badca.json"

probe "$T/insecure.json" --url "$BASE" --path /small.json --requests 5 --ca "$NGX_OTHER_CA" \
    --insecure
check "insecure skips verification" 'd["outcomes"]["2xx"] == 5' "$T/insecure.json"

exit $FAILED
