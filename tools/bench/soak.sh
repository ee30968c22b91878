#!/usr/bin/env bash
# Soak: `squall run` against `squall serve` for a long time at a few thousand requests per second
# with gets, lists, writes and long-lived watch streams, sampling both processes' RSS (VmRSS) and
# open files (/proc/PID/fd) every SAMPLE seconds. After the first minute (the warm-up: pools,
# histograms and buffers reach their working size) RSS should grow less than 2 % and the open
# files stay flat, on both sides; the baseline is each process's own sample at 60 s (or at a
# tenth of the run when it is shorter than 10 minutes), in the same run.
# Prints the samples and a markdown summary for tools/bench/RESULTS.md.
# Usage: tools/bench/soak.sh [BUILDDIR] [SECONDS] [RATE] [WATCHES] [SAMPLE]
#        (defaults build, 600, 2000, 500, 10)
# SOAK_WRAP (environment) runs `squall run` under a profiler, e.g.
#   SOAK_WRAP="heaptrack -o /tmp/soak-ht" tools/bench/soak.sh build 180 1000 500 10
# (the samples then are the profiler's, not squall's; read its own output).
set -uo pipefail
cd "$(dirname "$0")/../.."
SRCDIR=$PWD
BUILDDIR=$(realpath "${1:-build}")
SECS=${2:-600}
RATE=${3:-2000}
WATCHES=${4:-500}
SAMPLE=${5:-10}
SQUALL="$BUILDDIR/squall"
[ -x "$SQUALL" ] || { echo "soak.sh: $SQUALL not built (ninja -C $BUILDDIR)"; exit 1; }
source tests/integration/lib/port.sh
OUT=$(mktemp -d /tmp/squall-soak.XXXXXX)
TPID= RPID=
stop_all() {
    stop_pid "$RPID"
    stop_pid "$TPID"
}
trap stop_all EXIT

PORT=$(free_port)
taskset -c 1 "$SQUALL" serve --listen "127.0.0.1:$PORT" 2>"$OUT/serve.err" &
TPID=$!
wait_port "$PORT" 50 || { echo "soak.sh: serve did not start"; exit 1; }
cat >"$OUT/soak.yaml" <<YAML
seed: 11
target: {url: "http://127.0.0.1:$PORT", connections: 32, timeout: 10s}
vars: {site: [north, south, harbor, ridge]}
requests:
  read: {kind: get, path: "/v1/sites/{{site}}/gateways/gw-{{pick:0..199}}"}
  scan: {kind: list, path: "/v1/sites/{{site}}/gateways", page: 100}
  renew: {kind: write, method: PUT, path: "/v1/leases/agent-{{pick:0..999}}",
          body: '{"holder":"agent","stamp":{{now_ns}}}'}
  update: {kind: write, method: PUT, path: "/v1/sites/{{site}}/gateways/gw-{{pick:0..199}}",
           body: '{"model":"t-a","stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/sites/{{site}}/gateways?watch=1",
           reconnect: {policy: full-jitter, base: 200ms, cap: 5s}}
phases:
  - {name: soak, rate: $RATE/s, duration: ${SECS}s,
     mix: {read: 70, scan: 2, renew: 26, update: 2}, watches: {follow: $WATCHES}}
YAML
taskset -c 0 ${SOAK_WRAP:-} "$SQUALL" run "$OUT/soak.yaml" -o "$OUT/results" --quiet --keep --no-brakes \
    >"$OUT/run.out" 2>"$OUT/run.err" &
RPID=$!

sample() { # PID -> "rss_kib files"
    echo "$(awk '/^VmRSS:/ {print $2}' "/proc/$1/status" 2>/dev/null || echo 0)" \
        "$(ls "/proc/$1/fd" 2>/dev/null | wc -l)"
}
echo "t_s run_rss_kib run_files serve_rss_kib serve_files" >"$OUT/samples"
T0=$(date +%s)
while kill -0 "$RPID" 2>/dev/null; do
    sleep "$SAMPLE"
    kill -0 "$RPID" 2>/dev/null || break
    echo "$(($(date +%s) - T0)) $(sample "$RPID") $(sample "$TPID")" >>"$OUT/samples"
done
wait "$RPID"
RC=$?
cat "$OUT/samples"
/usr/bin/python3 - "$OUT/samples" "$SECS" "$RATE" "$WATCHES" "$RC" "$OUT/results" <<'PY'
import json, sys
rows = [list(map(int, l.split())) for l in open(sys.argv[1]).read().splitlines()[1:]]
secs, rate, watches, rc, res = int(sys.argv[2]), sys.argv[3], sys.argv[4], sys.argv[5], sys.argv[6]
warm = 60 if secs >= 600 else max(secs // 10, 10)
after = [r for r in rows if r[0] >= warm]
if len(after) < 2:
    sys.exit("soak.sh: too few samples after the warm-up; run longer")
d = json.load(open(res + "/results.json"))
# Requests only: not the watch class's event cell, not a list's whole-list twin.
cells = [c for c in d["cells"] if c["class"] in ("read", "scan", "renew", "update")]
done = sum(c["count"] for c in cells if c["outcome"] != "cancelled")
errs = sum(c["count"] for c in cells if c["outcome"] not in ("2xx", "cancelled"))
w = d["sections"]["watches"]["soak"]["classes"]["follow"]
print(f"\n### Soak: {secs} s at {rate}/s with {watches} watches (exit {rc})\n")
print(f"{done} requests ({errs} not 2xx), {w['events']} watch events, "
      f"{w['open_at_end']} of {w['streams']} streams open at the end, {w['reconnects']} reconnects.")
print(f"Baseline: each process's sample at {after[0][0]} s (warm-up {warm} s).\n")
print("| process | RSS at baseline | RSS at end | growth | RSS max | open files min..max |")
print("|---|---|---|---|---|---|")
for name, i in (("squall run", 1), ("squall serve", 3)):
    b, e = after[0][i], after[-1][i]
    files = [r[i + 1] for r in after]
    print(f"| {name} | {b / 1024:.1f} MiB | {e / 1024:.1f} MiB | {100 * (e - b) / b:+.2f} % "
          f"| {max(r[i] for r in after) / 1024:.1f} MiB | {min(files)}..{max(files)} |")
PY
echo "(samples and results in $OUT)"
