#!/usr/bin/env bash
# Benchmark of `squall run` against the raw ceiling client (tools/bench/ceiling.c), both driving
# the same nginx location in the same run: nginx's one worker pinned to CPU 1, the client to
# CPU 0 (taskset), loopback only. Writes the "run" section of tools/bench/RESULTS.md (between
# its markers; other sections are kept) with ratios to the ceiling measured here and now.
#   closed loop, HTTP/1.1, 1/16/64/256 connections: requests/s, client CPU µs per request
#       (user+sys of the whole process, /usr/bin/time), squall/ceiling ratio, errors
#   open loop, HTTP/1.1, 64 connections, 2k/5k/10k/20k per s: achieved rate, schedule lag
#       (issue - intended, results.json's generator section) and send lag (sent - intended,
#       the cells' lag histogram) p50/p99/max, CPU µs per request
#   HTTP/2 (h2c prior knowledge), closed loop at 1 and 4 connections x 64 and 256 streams
# Usage: tools/bench/run.sh [BUILDDIR] [SECONDS] [REPS]   (default build, 3 s per point, 3 runs
# per point, the median run reported). 20 runs x REPS x (SECONDS + ~2 s): about 5 minutes at the
# defaults; SECONDS x REPS <= 15 is enforced, which keeps the whole script under 10 minutes.
set -uo pipefail
cd "$(dirname "$0")/../.."
SRCDIR=$PWD
BUILDDIR=$(realpath "${1:-build}")
SECS=${2:-3}
REPS=${3:-3}
export BUILDDIR SRCDIR
CEIL="$BUILDDIR/tools/bench/ceiling"
SQUALL="$BUILDDIR/squall"
for b in "$CEIL" "$SQUALL"; do
    [ -x "$b" ] || { echo "run.sh: $b not built (ninja -C $BUILDDIR)"; exit 1; }
done
[ "$SECS" -ge 1 ] && [ "$SECS" -le 10 ] || { echo "run.sh: SECONDS must be 1..10"; exit 1; }
[ "$REPS" -ge 1 ] && [ "$REPS" -le 5 ] || { echo "run.sh: REPS must be 1..5"; exit 1; }
[ $((SECS * REPS)) -le 15 ] || { echo "run.sh: SECONDS x REPS must be <= 15 (10 min bound)"; exit 1; }
LOAD_BEFORE=$(cut -d' ' -f1-3 /proc/loadavg)
source tests/integration/lib/nginx.sh
nginx_start bench-run 1 || exit 1
OUT="$NGX_DIR/bench"
mkdir -p "$OUT"

ceiling() { taskset -c 0 timeout $((SECS + 30)) "$CEIL" --port "$NGX_PORT" --duration "$SECS" "$@"; }

# squall_point NAME PLAN-TEXT: runs one plan pinned to CPU 0; results in $OUT/NAME, the
# process's user and system CPU seconds in $OUT/NAME.cpu.
squall_point() {
    local name=$1
    printf '%s\n' "$2" >"$OUT/$name.yaml"
    rm -rf "${OUT:?}/$name"
    /usr/bin/time -f "%U %S" -o "$OUT/$name.cpu" taskset -c 0 timeout $((SECS + 20)) \
        "$SQUALL" run "$OUT/$name.yaml" -o "$OUT/$name" --quiet >"$OUT/$name.log" 2>&1
    [ -f "$OUT/$name/results.json" ] || { echo "run.sh: $name wrote no results"; cat "$OUT/$name.log"; }
}

closed_plan() { # URL HTTP CONNECTIONS STREAMS CLIENTS
    cat <<YAML
target: {url: "$1", http: "$2", connections: $3, streams: $4, timeout: 10s}
requests:
  small: {kind: get, path: /small.json}
phases:
  - {name: closed, duration: ${SECS}s, clients: {count: $5, think: 0s}, mix: {small: 1}}
YAML
}

open_plan() { # RATE
    cat <<YAML
target: {url: "http://127.0.0.1:$NGX_PORT", connections: 64, timeout: 10s}
requests:
  small: {kind: get, path: /small.json}
phases:
  - {name: open, duration: ${SECS}s, rate: $1/s, mix: {small: 1}}
YAML
}

# Figures of one squall point as a Python dict literal: requests, rps, cpu_us, errors, lags.
figures() {
    /usr/bin/python3 - "$OUT/$1" <<'PY'
import json, sys
base = sys.argv[1]
try:
    d = json.load(open(base + "/results.json"))
except OSError:
    print({"requests": 0, "rps": 0, "cpu_us": 0, "errors": -1, "gen": {}, "lag": {}})
    sys.exit()
cpu = sum(float(x) for x in open(base + ".cpu").read().split()[-2:])
cells = [c for c in d["cells"] if c["outcome"] != "cancelled"]
n = sum(c["count"] for c in cells)
errors = sum(c["count"] for c in cells if c["outcome"] not in ("2xx", "3xx"))
lag = {"p50": 0, "p99": 0, "max": 0}
for c in cells:  # one class, one phase: the 2xx cell holds nearly all samples
    if c["outcome"] == "2xx":
        lag = {k: c["summary"]["lag"][k] / 1e6 for k in lag}
secs = d["meta"]["duration_ns"] / 1e9
print({"requests": n, "rps": n / secs, "cpu_us": cpu * 1e6 / n if n else 0, "errors": errors,
       "gen": d["sections"]["generator"], "lag": lag})
PY
}

# median_ceiling NAME / median_squall NAME: of the REPS runs NAME.1 .. NAME.REPS, the one with
# the median requests/s becomes NAME (one whole run, so its figures stay consistent).
median_ceiling() {
    /usr/bin/python3 - "$OUT/$1" "$REPS" <<'PY'
import json, shutil, sys
runs = sorted((json.load(open(f"{sys.argv[1]}.{k}.json"))["rps"], k)
              for k in range(1, int(sys.argv[2]) + 1))
shutil.copy(f"{sys.argv[1]}.{runs[len(runs) // 2][1]}.json", sys.argv[1] + ".json")
PY
}

median_squall() {
    /usr/bin/python3 - "$OUT/$1" "$REPS" <<'PY'
import json, os, shutil, sys
def rps(k):
    try:
        d = json.load(open(f"{sys.argv[1]}.{k}/results.json"))
    except OSError:
        return 0.0
    return sum(c["count"] for c in d["cells"]) / (d["meta"]["duration_ns"] / 1e9)
runs = sorted((rps(k), k) for k in range(1, int(sys.argv[2]) + 1))
k = runs[len(runs) // 2][1]
shutil.rmtree(sys.argv[1], ignore_errors=True)
if os.path.isdir(f"{sys.argv[1]}.{k}"):
    shutil.copytree(f"{sys.argv[1]}.{k}", sys.argv[1])
shutil.copy(f"{sys.argv[1]}.{k}.cpu", sys.argv[1] + ".cpu")
PY
}

# The table rows, from the ceiling's JSON and a squall point's figures.
closed_row() {
    /usr/bin/python3 - "$OUT/ceil-$1.json" "$(figures "closed-$1")" "$1" <<'PY'
import ast, json, sys
c = json.load(open(sys.argv[1])); s = ast.literal_eval(sys.argv[2])
print(f"| {sys.argv[3]} | {c['rps']:.0f} | {c['cpu_us_per_req']:.1f} | {s['rps']:.0f} | "
      f"{s['cpu_us']:.1f} | {s['rps'] / c['rps']:.2f} | {s['errors']} |")
PY
}

open_row() {
    /usr/bin/python3 - "$OUT/ceil-r$1.json" "$(figures "open-$1")" "$1" <<'PY'
import ast, json, sys
c = json.load(open(sys.argv[1])); s = ast.literal_eval(sys.argv[2]); r = float(sys.argv[3])
g, l, cl = s["gen"], s["lag"], c["lag_ms"]
gl = [g.get("schedule_lag_%s_ms" % k, 0) for k in ("p50", "p99", "max")]
print(f"| {r:.0f} | {c['rps']:.0f} | {cl['p50']:.2f} / {cl['p99']:.2f} / {cl['max']:.2f} | "
      f"{s['rps']:.0f} ({s['rps'] / r:.3f}) | {s['cpu_us']:.1f} | "
      f"{gl[0]:.2f} / {gl[1]:.2f} / {gl[2]:.2f} | {l['p50']:.2f} / {l['p99']:.2f} / {l['max']:.2f} | "
      f"{'yes' if g.get('generator_limited') else 'no'} | {s['errors']} |")
PY
}

h2_row() {
    /usr/bin/python3 - "$OUT/ceil-64.json" "$(figures "h2-$1-$2")" "$1" "$2" <<'PY'
import ast, json, sys
c = json.load(open(sys.argv[1])); s = ast.literal_eval(sys.argv[2])
print(f"| {sys.argv[3]} x {sys.argv[4]} | {s['rps']:.0f} | {s['cpu_us']:.1f} | "
      f"{s['rps'] / c['rps']:.2f} | {s['errors']} | {s['gen'].get('max_loop_pass_ms', 0):.1f} |")
PY
}

# Each point runs REPS times, the ceiling and squall alternating, and reports the median run.
ROWS_CLOSED="" ROWS_OPEN="" ROWS_H2=""
for c in 1 16 64 256; do
    for k in $(seq "$REPS"); do
        ceiling --connections $c >"$OUT/ceil-$c.$k.json"
        squall_point "closed-$c.$k" "$(closed_plan "http://127.0.0.1:$NGX_PORT" 1.1 $c 1 $c)"
    done
    median_ceiling "ceil-$c"
    median_squall "closed-$c"
    ROWS_CLOSED+=$(closed_row $c)$'\n'
done
for r in 2000 5000 10000 20000; do
    for k in $(seq "$REPS"); do
        ceiling --connections 64 --rate $r >"$OUT/ceil-r$r.$k.json"
        squall_point "open-$r.$k" "$(open_plan $r)"
    done
    median_ceiling "ceil-r$r"
    median_squall "open-$r"
    ROWS_OPEN+=$(open_row $r)$'\n'
done
for conf in "1 64" "1 256" "4 64" "4 256"; do
    set -- $conf
    for k in $(seq "$REPS"); do
        squall_point "h2-$1-$2.$k" \
            "$(closed_plan "http://127.0.0.1:$NGX_H2_PORT" 2 $1 $2 $(($1 * $2)))"
    done
    median_squall "h2-$1-$2"
    ROWS_H2+=$(h2_row $1 $2)$'\n'
done

SECTION=$(cat <<MD
<!-- run:begin (written by tools/bench/run.sh; edit the script, not this section) -->
## \`squall run\` vs the raw ceiling client

$(date -u '+%Y-%m-%d %H:%M UTC'), $(nproc) CPUs, kernel $(uname -r), libcurl
$(curl-config --version 2>/dev/null | cut -d' ' -f2), nginx 1 worker on CPU 1, client on CPU 0,
loopback, \`/small.json\` ($(stat -c %s "$NGX_DIR/www/small.json") bytes), ${SECS} s per point,
median of ${REPS} runs per point (the machine is shared and noisy; load average before / after:
${LOAD_BEFORE} / $(cut -d' ' -f1-3 /proc/loadavg)). Command:
\`tools/bench/run.sh $(basename "$BUILDDIR") $SECS $REPS\`. CPU is the client process's user+sys
(\`/usr/bin/time\`, so squall's includes plan loading and writing results) per completed request.
Goals (issue 3): closed loop at 64 connections ≥ 0.8 of the ceiling and ≤ 25 µs per request;
open loop at 20k/s within 1 % with schedule lag p99 ≤ 5 ms; zero errors over HTTP/2 reuse.

### Closed loop, HTTP/1.1 (\`clients: {count: N, think: 0s}\`, \`connections: N\`)
| connections | ceiling req/s | ceiling µs/req | squall req/s | squall µs/req | squall/ceiling | squall errors |
|---|---|---|---|---|---|---|
${ROWS_CLOSED}
### Open loop, HTTP/1.1, 64 connections (ms; schedule lag = handed to the engine − intended, send lag = on the wire − intended, includes waiting for a free connection)
| target/s | ceiling achieved | ceiling lag p50/p99/max | squall achieved (fraction) | squall µs/req | squall schedule lag p50/p99/max | squall send lag p50/p99/max | generator_limited | errors |
|---|---|---|---|---|---|---|---|---|
${ROWS_OPEN}
### HTTP/2 (h2c prior knowledge, \`http: "2"\`, \`streams:\`), closed loop with connections × streams clients
| connections × streams | squall req/s | squall µs/req | ratio to the h1 ceiling at 64 connections | errors | longest loop pass (ms) |
|---|---|---|---|---|---|
${ROWS_H2}
<!-- run:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
# The run section replaces the older engine-probe section (tools/bench/engine.sh, retired).
for name in ("run", "engine"):
    pat = re.compile(r"<!-- %s:begin.*?<!-- %s:end -->" % (name, name), re.S)
    if pat.search(text):
        text = pat.sub(lambda m: section, text, count=1)
        break
else:
    text = text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "run.sh: wrote the run section of $RES"
sed -n '/run:begin/,/run:end/p' "$RES"
