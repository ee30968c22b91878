# Shared test helper: the embedded target (`$SQUALL serve`) on a free loopback port.
#     target_start [SERVE OPTIONS...]   sets TGT_PORT, TGT_PID, TGT_URL; EXIT trap stops it
#     target_stop                       stops it by pid (also run by the trap)
#     target_stats EXPR                 prints a Python expression over GET /stats as `s`
source "$(dirname "${BASH_SOURCE[0]}")/port.sh"

target_stop() {
    stop_pid "${TGT_PID:-}"
    TGT_PID=
}

target_start() {
    TGT_PORT=$(free_port)
    "$SQUALL" serve --listen "127.0.0.1:$TGT_PORT" "$@" >"${BUILDDIR:?}/target-$TGT_PORT.log" 2>&1 &
    TGT_PID=$!
    TGT_URL="http://127.0.0.1:$TGT_PORT"
    trap target_stop EXIT
    if ! wait_port "$TGT_PORT"; then
        echo "FAIL: squall serve did not listen on $TGT_PORT; its log:"
        cat "$BUILDDIR/target-$TGT_PORT.log"
        return 1
    fi
}

target_stats() {
    curl -s "$TGT_URL/stats" | /usr/bin/python3 -c 'import json, sys
s = json.load(sys.stdin)
print(eval(sys.argv[1]))' "$1"
}
