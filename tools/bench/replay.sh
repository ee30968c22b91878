#!/usr/bin/env bash
# Replay source benchmark (not a test): memory must not grow with the log.
# 1. Streaming: `squall run` of a replay phase over generated Common Log Format logs of SMALL and
#    LARGE lines (alog-bench gen: sensor gateways at about 1,000 requests/s) whose `match` keeps
#    no request, so the run reads the whole log three times (validation, the phase's counts, the
#    streamed pass) and sends nothing: peak RSS (/usr/bin/time) must stay flat from SMALL to
#    LARGE, and lines per second over the three passes are reported on one core (taskset -c 0),
#    against `alog-bench parse` (the reader alone, one pass) on the same file in the same run.
# 2. Sending: the first 20,000 and 80,000 lines replayed at speed 8 (about 4,000 GETs/s; writes
#    have no body rule and are skipped) against the embedded target on CPU 1: peak RSS of the
#    run (the read-ahead is at most 16,384 requests; results grow by their per-second rows).
# Writes the replay section of tools/bench/RESULTS.md.
# Usage: tools/bench/replay.sh [BUILDDIR] [SMALL_LINES] [LARGE_LINES]  (default build 1000000
# 4000000; about 3 minutes)
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
SMALL=${2:-1000000}
LARGE=${3:-4000000}
SQ="$BUILDDIR/squall"
BENCH="$BUILDDIR/tools/bench/alog-bench"
[ -x "$BENCH" ] && [ -x "$SQ" ] || { echo "replay.sh: build $BUILDDIR first"; exit 1; }
W="$BUILDDIR/bench-replay"
rm -rf "$W"
mkdir -p "$W"
SERVE_PID=
cleanup() { [ -n "$SERVE_PID" ] && kill "$SERVE_PID" 2>/dev/null; rm -rf "$W"; }
trap cleanup EXIT
field() { sed -n "s/.* $1=\([^ ]*\).*/\1/p"; }

plan() { # FILE LOG MATCH SPEED URL
    cat >"$1" <<YAML
target: {url: "$5", connections: 32, timeout: 5s}
phases:
  - name: replay
    replay: {log: "$2", format: common, match: "$3", speed: $4}
YAML
}

ROWS=""
for n in "$SMALL" "$LARGE"; do
    f="$W/common-$n.log"
    "$BENCH" gen common "$n" "$f" || { echo "replay.sh: generating $f failed"; exit 1; }
    plan "$W/stream.yaml" "$f" "^/nothing-matches$" 1 "http://127.0.0.1:9"
    t0=$(date +%s.%N)
    taskset -c 0 /usr/bin/time -f "%M" -o "$W/rss" "$SQ" run "$W/stream.yaml" -o "$W/out" \
        --quiet --force >/dev/null 2>"$W/err"
    t1=$(date +%s.%N)
    rss=$(tail -1 "$W/rss")
    parse=$(taskset -c 0 "$BENCH" parse "$f" | field lines_per_s)
    rate=$(awk -v a="$t0" -v b="$t1" -v n="$n" 'BEGIN { printf "%.2f", 3 * n / (b - a) / 1e6 }')
    ROWS+="| stream, nothing sent | $n | 3 | $rate | $(awk -v p="$parse" 'BEGIN { printf "%.2f", p / 1e6 }') | $rss |"$'\n'
done

PORT=$(/usr/bin/python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
taskset -c 1 "$SQ" serve --listen "127.0.0.1:$PORT" 2>/dev/null &
SERVE_PID=$!
sleep 0.5
for n in 20000 80000; do
    head -n "$n" "$W/common-$SMALL.log" >"$W/head-$n.log"
    plan "$W/send.yaml" "$W/head-$n.log" "." 8 "http://127.0.0.1:$PORT"
    taskset -c 0 /usr/bin/time -f "%M" -o "$W/rss" "$SQ" run "$W/send.yaml" -o "$W/out" \
        --quiet --force --no-brakes >/dev/null 2>"$W/err"
    sent=$(/usr/bin/python3 -c 'import json, sys; print(json.load(open(sys.argv[1]))["sections"]["replay"]["replay"]["sent"])' "$W/out/results.json")
    ROWS+="| sent at speed 8 ($sent requests) | $n | 3 | - | - | $(tail -1 "$W/rss") |"$'\n'
done

SECTION=$(cat <<MD
<!-- replay:begin (written by tools/bench/replay.sh; edit the script, not this section) -->
## Replay source (\`src/source/replay.c\`)

$(date -u +%Y-%m-%d), $(nproc) CPUs, load average $(cut -d' ' -f1-3 /proc/loadavg) after the
run. \`tools/bench/replay.sh $(basename "$BUILDDIR") $SMALL $LARGE\`. "stream, nothing sent": a
replay phase whose \`match\` keeps nothing, so \`squall run\` reads the log in 3 passes (validation,
counts, the streamed pass) and sends nothing; million lines/s over the 3 passes on CPU 0, next to
\`alog-bench parse\` (one pass of the reader alone) on the same file in the same run. "sent": the
log's first lines replayed at speed 8 against the embedded target (CPU 1); GETs are sent,
writes skipped. Peak RSS is \`/usr/bin/time -f %M\` of the whole \`squall run\`: it must not grow
with the log's length (the read-ahead holds at most 16,384 requests; the per-second counts take
about 4 bytes per second of log and class).

| run | lines | passes | million lines/s (3 passes) | reader alone, million lines/s | peak RSS (KiB) |
|---|---|---|---|---|---|
${ROWS%$'\n'}
<!-- replay:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- replay:begin.*?<!-- replay:end -->", re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "replay.sh: wrote the replay section of $RES"
sed -n '/replay:begin/,/replay:end/p' "$RES"
