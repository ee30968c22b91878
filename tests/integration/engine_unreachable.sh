#!/usr/bin/env bash
# Engine unreachability: a refused loopback port and a name that does not resolve are detected
# after 3 consecutive failures (the engine's default), the queue is cancelled, and the probe
# stops quickly instead of sending all its requests.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
source "$SRCDIR/tests/integration/lib/probe.sh"
T="${BUILDDIR:?}/engine-unreachable"
rm -rf "$T"
mkdir -p "$T"

# A port nobody listens on: the kernel answers a connect with RST (ECONNREFUSED).
PORT=$(free_port)
probe "$T/refused.json" --url "http://127.0.0.1:$PORT" --path /small.json --requests 100000 \
    --concurrency 8 --connections 8
check "a refused port is detected as unreachable within 1 s, most requests never sent" \
    'd["unreachable"] and d["unreachable_after_ms"] < 1000 and \
     d["outcomes"]["connect-refused"] >= 3 and d["outcomes"]["2xx"] == 0 and \
     d["completed"] < 100 and d["loop_close"] == 0' "$T/refused.json"

# RFC 6761 §6.4: names under .invalid never resolve. The resolver may be slow here, so the
# bound is loose; the point is the outcome kind and the early stop.
probe "$T/resolve.json" --url "http://gateway.north.invalid:80" --path / --requests 100000 \
    --concurrency 4 --connections 4
check "a name that does not resolve is reported as a resolve failure and stops the run" \
    'd["unreachable"] and d["outcomes"]["resolve"] >= 3 and d["completed"] < 100' \
    "$T/resolve.json"

exit $FAILED
