#!/usr/bin/env bash
# `squall run` with TLS and credentials against a real nginx: a CA bundle and mutual TLS with
# certificates made by openssl inside the test (lib/nginx.sh), verification on by default, an
# explicit insecure switch that warns, and a bearer token from a file or the environment that
# reaches the server but never the output or the results.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/nginx.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
nginx_start run-tls || exit 1
T="$NGX_DIR/out"
mkdir -p "$T"
URL="https://127.0.0.1:$NGX_TLS_PORT"

tls_plan() { # tls_plan NAME PATH TLS-YAML [TOKEN-YAML]
    local token=""
    [ -n "${4:-}" ] && token=", token: {$4}"
    cat >"$T/$1.yaml" <<YAML
target: {url: "$URL", http: "$HTTP", connections: 2, timeout: 5s, tls: {$3}$token}
requests:
  probe: {kind: get, path: $2}
phases:
  - {name: steady, rate: 20/s, duration: 1s, mix: {probe: 1}}
YAML
}

for HTTP in 1.1 2; do
    # nginx asks for a client certificate and answers /mtls/ok with 200 only when one signed by
    # our CA came with the handshake (lib/nginx.sh).
    tls_plan mtls /mtls/ok "ca: $NGX_CA, cert: $NGX_CLIENT_CERT, key: $NGX_CLIENT_KEY"
    run_plan "$T/mtls" "$T/mtls.yaml"
    rcheck "HTTP/$HTTP: mutual TLS with our client certificate: 20 of 20 answered 2xx" \
        'total("probe", "2xx") == 20' "$T/mtls"
    rcheck "HTTP/$HTTP: the TLS handshake time is recorded for new connections" \
        'any("tls" in c["hist"] for c in d["cells"])' "$T/mtls"
    tls_plan nocert /mtls/ok "ca: $NGX_CA"
    run_plan "$T/nocert" "$T/nocert.yaml" --no-brakes
    rcheck "HTTP/$HTTP: without the client certificate nginx refuses (4xx)" \
        'total("probe", "4xx") == 20' "$T/nocert"
done
HTTP=1.1

# Verification is on by default: a server certificate from a CA we were not given fails the
# handshake (outcome tls); --insecure skips verification and says so.
tls_plan badca /small.json "ca: $NGX_OTHER_CA"
run_plan "$T/badca" "$T/badca.yaml" --no-brakes
rcheck "an unknown CA is a TLS error, nothing answered" \
    'total("probe", "tls") > 0 and total("probe", "2xx") == 0' "$T/badca"
# It is named once, with libcurl's reason, and ends the run like an unreachable target (exit 4;
# it used to run to its end and exit 0 with every request a tls error).
expect "a verification failure ends the run as unreachable (exit $RUN_RC, 4)" test "$RUN_RC" = 4
expect "naming it once with libcurl's reason" \
    test "$(grep -c "fails TLS verification: its certificate could not be verified (SSL certificate problem" "$T/badca.stderr")" = 1
run_plan "$T/insecure" "$T/badca.yaml" --insecure
rcheck "--insecure skips verification: all 2xx" 'total("probe", "2xx") == 20' "$T/insecure"
expect "--insecure prints a warning" grep -q "TLS certificate verification is OFF" "$T/insecure.stderr"

# The bearer token: from a file, then from the environment. nginx's /auth/bearer answers 200
# only when "Authorization: Bearer $NGX_TOKEN" arrived.
printf '%s\n' "$NGX_TOKEN" >"$T/token"
tls_plan tokfile /auth/bearer "ca: $NGX_CA" "file: $T/token"
run_plan "$T/tokfile" "$T/tokfile.yaml"
rcheck "a token from a file reaches the server: 20 of 20 answered 2xx" \
    'total("probe", "2xx") == 20' "$T/tokfile"
tls_plan tokenv /auth/bearer "ca: $NGX_CA" "env: SQUALL_TEST_TOKEN"
SQUALL_TEST_TOKEN=$NGX_TOKEN run_plan "$T/tokenv" "$T/tokenv.yaml" --set phases.steady.rate=40/s
rcheck "a token from the environment reaches the server: 40 of 40 answered 2xx" \
    'total("probe", "2xx") == 40' "$T/tokenv"
run_plan "$T/tokmissing" "$T/tokenv.yaml"
expect "an unset token variable is a usage error, exit 2 (got $RUN_RC)" test "$RUN_RC" = 2
LEAKS=$(grep -rl -- "$NGX_TOKEN" "$T"/tokfile* "$T"/tokenv* 2>/dev/null | grep -v '/token$' || true)
expect "the token appears in no output, results.json or series.csv (found in: ${LEAKS:-none})" \
    test -z "$LEAKS"

exit $FAILED
