# Shared test helper: the embedded target (`$SQUALL serve`) on a free loopback port.
#     serve_start [SERVE OPTIONS...]  sets SERVE_PORT, SERVE_PID, SERVE_URL; EXIT trap stops it
#     serve_stop                      stops it by pid (also run by the trap)
#     serve_stats EXPR                prints a Python expression over GET /stats as `s`
source "$(dirname "${BASH_SOURCE[0]}")/port.sh"

serve_stop() {
    stop_pid "${SERVE_PID:-}"
    SERVE_PID=
}

serve_start() {
    SERVE_PORT=$(free_port)
    "$SQUALL" serve --listen "127.0.0.1:$SERVE_PORT" "$@" >"${BUILDDIR:?}/target-$SERVE_PORT.log" 2>&1 &
    SERVE_PID=$!
    SERVE_URL="http://127.0.0.1:$SERVE_PORT"
    trap serve_stop EXIT
    if ! wait_port "$SERVE_PORT"; then
        echo "FAIL: squall serve did not listen on $SERVE_PORT; its log:"
        cat "$BUILDDIR/target-$SERVE_PORT.log"
        return 1
    fi
}

serve_stats() {
    curl -s "$SERVE_URL/stats" | /usr/bin/python3 -c 'import json, sys
s = json.load(sys.stdin)
print(eval(sys.argv[1]))' "$1"
}
