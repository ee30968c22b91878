#!/usr/bin/env bash
# Engine benchmark: the raw ceiling client (tools/bench/ceiling.c) and the engine probe
# (tests/integration/engine_probe.c, the engine API without the run glue) against the same
# nginx location, nginx's one worker pinned to CPU 1 and the client to CPU 0. Writes the engine
# section of tools/bench/RESULTS.md as ratios to the ceiling measured in the same run.
# Usage: tools/bench/engine.sh [BUILDDIR] [SECONDS]   (default build, 5 s per point)
# Once `squall run` exists, the probe rows should switch to it.
set -uo pipefail
cd "$(dirname "$0")/../.."
SRCDIR=$PWD
BUILDDIR=$(realpath "${1:-build}")
SECS=${2:-5}
export BUILDDIR SRCDIR
CEIL="$BUILDDIR/tools/bench/ceiling"
PROBE="$BUILDDIR/tests/integration/engine_probe"
for b in "$CEIL" "$PROBE"; do
    [ -x "$b" ] || { echo "engine.sh: $b not built (ninja -C $BUILDDIR)"; exit 1; }
done
source tests/integration/lib/nginx.sh
nginx_start bench-engine 1 || exit 1
OUT="$NGX_DIR/bench"
mkdir -p "$OUT"

j() { /usr/bin/python3 -c 'import json,sys; d=json.load(open(sys.argv[1])); print(eval(sys.argv[2]))' "$@"; }
ceiling() { taskset -c 0 timeout $((SECS + 30)) "$CEIL" --port "$NGX_PORT" --duration "$SECS" "$@"; }
probe() { taskset -c 0 timeout 120 "$PROBE" --max-s $((SECS * 4 + 10)) "$@"; }

ROWS_CLOSED="" ROWS_OPEN="" ROWS_H2=""
for c in 1 16 64 256; do
    ceiling --connections $c >"$OUT/ceil-$c.json"
    n=$(j "$OUT/ceil-$c.json" 'int(d["rps"] * '"$SECS"')')
    probe --url "http://127.0.0.1:$NGX_PORT" --path /small.json --requests "$n" \
        --concurrency $c --connections $c >"$OUT/eng-$c.json"
    ROWS_CLOSED+=$(/usr/bin/python3 - "$OUT/ceil-$c.json" "$OUT/eng-$c.json" $c <<'PY'
import json, sys
c = json.load(open(sys.argv[1])); e = json.load(open(sys.argv[2]))
errs = e["completed"] - e["outcomes"]["2xx"]
print(f"| {sys.argv[3]} | {c['rps']:.0f} | {c['cpu_us_per_req']:.1f} | {e['rps']:.0f} | "
      f"{e['cpu_us_per_req']:.1f} | {e['rps'] / c['rps']:.2f} | {errs} |")
PY
)$'\n'
done
for r in 2000 5000 10000 20000; do
    ceiling --connections 64 --rate $r >"$OUT/ceil-r$r.json"
    probe --url "http://127.0.0.1:$NGX_PORT" --path /small.json --requests $((r * SECS)) \
        --rate $r --connections 64 >"$OUT/eng-r$r.json"
    ROWS_OPEN+=$(/usr/bin/python3 - "$OUT/ceil-r$r.json" "$OUT/eng-r$r.json" $r <<'PY'
import json, sys
c = json.load(open(sys.argv[1])); e = json.load(open(sys.argv[2])); r = float(sys.argv[3])
cl, el = c["lag_ms"], e["lag_ms"]
print(f"| {r:.0f} | {c['rps']:.0f} | {cl['p50']:.2f} / {cl['p99']:.2f} / {cl['max']:.2f} | "
      f"{e['rps']:.0f} | {e['cpu_us_per_req']:.1f} | "
      f"{el['p50']:.2f} / {el['p99']:.2f} / {el['max']:.2f} | {e['loop_busy_max_ms']:.2f} |")
PY
)$'\n'
done
CEIL64=$(j "$OUT/ceil-64.json" 'd["rps"]')
for conf in "1 64" "1 256" "4 64" "4 256"; do
    set -- $conf
    probe --url "http://127.0.0.1:$NGX_H2_PORT" --path /small.json --requests 100000 \
        --concurrency $(($1 * $2)) --connections $1 --streams $2 --http 2 >"$OUT/h2-$1-$2.json"
    ROWS_H2+=$(/usr/bin/python3 - "$OUT/h2-$1-$2.json" "$CEIL64" $1 $2 <<'PY'
import json, sys
e = json.load(open(sys.argv[1])); c = float(sys.argv[2])
errs = e["completed"] - e["outcomes"]["2xx"]
print(f"| {sys.argv[3]} x {sys.argv[4]} | {e['rps']:.0f} | {e['cpu_us_per_req']:.1f} | "
      f"{e['rps'] / c:.2f} | {errs} | {e['loop_busy_max_ms']:.1f} |")
PY
)$'\n'
done

SECTION=$(cat <<MD
<!-- engine:begin (written by tools/bench/engine.sh; edit the script, not this section) -->
## Engine vs the raw ceiling client

$(date -u +%Y-%m-%d), $(nproc) CPUs, nginx 1 worker on CPU 1, client on CPU 0, loopback,
\`/small.json\` ($(stat -c %s "$NGX_DIR/www/small.json") bytes), ${SECS} s per ceiling point.
Engine = tests/integration/engine_probe (the engine API; \`squall run\` adds the scheduler and
statistics on top). CPU is the client's user+sys from getrusage, per completed request.

### Closed loop, HTTP/1.1
| connections | ceiling req/s | ceiling µs/req | engine req/s | engine µs/req | engine/ceiling | engine errors |
|---|---|---|---|---|---|---|
${ROWS_CLOSED}
### Open loop, HTTP/1.1, 64 connections (lag = send time − intended start, ms)
| target/s | ceiling achieved | ceiling lag p50/p99/max | engine achieved | engine µs/req | engine lag p50/p99/max | engine longest loop pass (ms) |
|---|---|---|---|---|---|---|
${ROWS_OPEN}
### HTTP/2 (h2c prior knowledge), closed loop at connections × streams in flight
| connections × streams | engine req/s | engine µs/req | ratio to the h1 ceiling at 64 connections | errors | longest loop pass (ms) |
|---|---|---|---|---|---|
${ROWS_H2}
<!-- engine:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- engine:begin.*?<!-- engine:end -->", re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "engine.sh: wrote the engine section of $RES"
sed -n '/engine:begin/,/engine:end/p' "$RES"
