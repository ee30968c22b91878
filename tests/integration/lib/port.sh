# Shared test helper: free loopback TCP ports. Source it; needs /usr/bin/python3.
# free_port prints a port that was free on 127.0.0.1 a moment ago (the kernel picks it).

free_port() {
    /usr/bin/python3 -c 'import socket
s = socket.socket()
s.bind(("127.0.0.1", 0))
print(s.getsockname()[1])
s.close()'
}

# stop_pid PID: ends a process this test started: SIGTERM, up to 5 s for it to exit, then
# SIGKILL; reaps it. Does nothing for an empty or finished pid.
stop_pid() {
    local pid=${1:-} i
    [ -n "$pid" ] || return 0
    if kill -0 "$pid" 2>/dev/null; then
        kill -TERM "$pid" 2>/dev/null
        for ((i = 0; i < 50; i++)); do
            kill -0 "$pid" 2>/dev/null || break
            sleep 0.1
        done
        kill -KILL "$pid" 2>/dev/null || true
    fi
    wait "$pid" 2>/dev/null || true
}

# wait_port PORT [TRIES]: waits (0.1 s steps, at most TRIES, default 50) until 127.0.0.1:PORT
# accepts a connection; returns 1 if it never does.
wait_port() {
    local port=$1 tries=${2:-50} i
    for ((i = 0; i < tries; i++)); do
        if (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
            return 0
        fi
        sleep 0.1
    done
    return 1
}
