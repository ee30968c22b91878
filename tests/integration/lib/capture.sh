# Shared helper: squall's HTTP/1.1 requests as the wire sees them, captured on loopback with
# Debian's tcpdump (needs root or CAP_NET_RAW). Source it (after port.sh), then:
#     capture_start PORT FILE [METHODS]
#                               captures the client's packets to 127.0.0.1:PORT whose TCP payload
#                               starts with "GET " (or any of METHODS, e.g. "GET HEAD PUT": one
#                               packet per request, as libcurl writes a small request's line and
#                               headers in one send with TCP_NODELAY), nanosecond stamps, the
#                               first 256 bytes of each; sets CAP_PID; returns 1 if tcpdump does
#                               not start listening
#     capture_stop              ends it by pid (SIGINT: it flushes the file) and prints the
#                               kernel's drop count from tcpdump's own report (CAP_DROPPED)
#     ref_filter FILE           prints the pcap filter "src port A or src port B ..." of the
#                               client ports wire_ref listed in its JSON report FILE ("ports")
#     wire_plan FILE PORT RATE ARRIVALS SECONDS   writes the plan both the wire test and
#                               tools/bench/wire.sh run: GET /small.json on 64 connections
# The filter's payload offset is the TCP header length, tcp[12] >> 4 in 32-bit words (RFC 9293,
# section 3.1, "Data Offset"); 0x47455420 is "GET " in ASCII, and so on for each method's
# first four bytes (RFC 9110 method names).

capture_start() {
    local port=$1 file=$2 methods=${3:-GET} i m hex first=""
    CAP_LOG="$file.log"
    for m in $methods; do
        hex=$(printf '%-4.4s' "$m" | od -An -tx1 | tr -d ' \n')
        first+="${first:+ or }tcp[((tcp[12:1] & 0xf0) >> 2):4] = 0x$hex"
    done
    tcpdump -i lo -n -s 256 -B 32768 --immediate-mode --time-stamp-precision=nano -w "$file" \
        "tcp dst port $port and ($first)" \
        >"$CAP_LOG" 2>&1 &
    CAP_PID=$!
    for ((i = 0; i < 100; i++)); do
        grep -q "listening on" "$CAP_LOG" 2>/dev/null && return 0
        kill -0 "$CAP_PID" 2>/dev/null || break
        sleep 0.05
    done
    echo "tcpdump did not start: $(tail -2 "$CAP_LOG")"
    return 1
}

capture_stop() {
    local i
    [ -n "${CAP_PID:-}" ] || return 0
    kill -INT "$CAP_PID" 2>/dev/null
    for ((i = 0; i < 100; i++)); do
        kill -0 "$CAP_PID" 2>/dev/null || break
        sleep 0.05
    done
    stop_pid "$CAP_PID"
    CAP_PID=
    CAP_DROPPED=$(sed -n 's/^\([0-9]*\) packets dropped by kernel.*/\1/p' "$CAP_LOG")
    CAP_DROPPED=${CAP_DROPPED:-unknown}
}

ref_filter() {
    /usr/bin/python3 -c "import json, sys
print(' or '.join('src port %d' % p for p in json.load(open(sys.argv[1]))['ports']))" "$1" \
        2>/dev/null
}

wire_plan() {
    cat >"$1" <<YAML
seed: 7
target: {url: "http://127.0.0.1:$2", connections: 64, timeout: 5s}
requests:
  small: {kind: get, path: /small.json}
phases:
  - {name: p, rate: $3/s, arrivals: $4, duration: ${5}s, mix: {small: 1}}
YAML
}
