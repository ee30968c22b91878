#!/usr/bin/env bash
# The live line (stderr, a line a second when stderr is not a terminal) tells the truth of each
# second, checked against the embedded target's own counts (/stats, /admin/drop-watches) and the
# plan's arithmetic:
#   - fixed-width columns: the first column separator sits at the same place on every line,
#     whatever the phase's name (padded to the plan's longest, `reconnect-storm`);
#   - a fleet phase says which tick of how many and what the last tick did (its agents' count),
#     and the synchronisation gauge (R-bar of the last closed window of one period, 4 wide),
#     never "sent 0/s"; a second with no completion shows "–", never 0.0 ms;
#   - errors this second and in all: "in all" is the running sum, and ends at the target's count
#     of 404 answers;
#   - a reconnect storm (the target drops every watch stream) shows as dropped streams and
#     reconnects in the seconds it happens, as many as the target says it dropped;
#   - the teardown and `cleanup` show their progress (deleted of total, rate, time left), the
#     total being the objects the target created (its 201 answers);
#   - a run stopped by SIGINT says once to send it again, and its last lines do not.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/live-line"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1

cat >"$T/p.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 64, timeout: 5s}
accept: [generator-bound] # this test reads the live line, not the verdict
requests:
  make: {kind: write, method: PUT, path: "/v1/gw/g-{{seq}}", body: '{"n":1}', creates: true}
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"holder":"gw","stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/leases?watch=1", stamp-key: stamp, reconnect: {policy: immediate}}
  missing: {kind: get, path: /v1/sites/none/gateways/gw-0}
phases:
  - {name: warm, rate: 20/s, duration: 2s, mix: {make: 1}}
  - name: reconnect-storm
    duration: 4s
    fleet: {agents: 50, every: 2s, timing: aligned, send: renew}
    watches: {follow: 10}
  - {name: scan, rate: 10/s, duration: 1s, mix: {missing: 1}}
  - {name: clean, teardown: {rate: 30/s}}
objectives: # the reads of a missing object are the errors this test counts
  - {class: missing, error-rate: 100%}
YAML
"$SQUALL" run "$T/p.yaml" -o "$T/r" >"$T/r.stdout" 2>"$T/r.stderr" &
RUN_PID=$!
sleep 4.5 # inside reconnect-storm (2 s .. 6 s), after its watches opened
DROPPED=$(curl -s -X POST "$SERVE_URL/admin/drop-watches" | jq .dropped)
wait "$RUN_PID"
RUN_RC=$?
expect_rc "the run ends (exit $RUN_RC)" "$T/r" 0
N404=$(serve_stats 's["requests"]["GET"].get("404", 0)')
N201=$(serve_stats 's["requests"]["PUT"].get("201", 0)')

/usr/bin/python3 - "$T/r.stderr" "$DROPPED" "$N404" "$N201" <<'PY' || FAILED=1
import re, sys
lines = [l.rstrip("\n") for l in open(sys.argv[1], encoding="utf-8")]
dropped_by_target, n404, n201 = int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])
phases = ("warm", "reconnect-storm", "scan", "clean")
live = [l for l in lines if l.split(" ", 1)[0] in phases and " | " in l]
bad = 0
def expect(ok, what):
    global bad
    print(("ok: " if ok else "FAIL: ") + what)
    bad += not ok
expect(len(live) >= 8, f"{len(live)} live lines (a 7 s plan and its teardown)")
cols = {l.index(" | ") for l in live}
expect(len(cols) == 1, f"the first column separator sits at one place on every line: {sorted(cols)}")
expect(all(l.startswith(l.split(" ", 1)[0].ljust(len("reconnect-storm")) + " ") for l in live),
       "phase names are padded to the longest, reconnect-storm")
storm = [l for l in live if l.startswith("reconnect-storm")]
# (the second tick's answers may arrive after the phase ended: the next line tells them; a line
# printed while a tick's answers are still arriving tells the part done so far, so a tick's count
# may grow from one line to the next, never shrink, and ends at its 50 agents)
ticks = [re.search(r"[|;] (?:reconnect-storm )?tick (\d+) of (\d+): (\d+) done", l) for l in live]
seen = [(int(m[1]), int(m[2]), int(m[3])) for m in ticks if m]
last = {}
grows = True
for k, n, done in seen:
    grows &= done >= last.get((k, n), 0) and done <= 50
    last[(k, n)] = done
got = sorted((k, n, done) for (k, n), done in last.items())
expect(grows and got == [(1, 2, 50), (2, 2, 50)],
       f"the fleet phase names its 2 ticks of 50 agents each (4 s / every 2 s), each count "
       f"growing to 50: {seen}")
expect(not any("| sent " in l for l in storm), "no 'sent N/s of M/s' in the fleet phase")
# The synchronisation gauge of the fleet's renewals: R-bar of the last closed 2 s window, four
# columns ("–" until one closes). One aligned tick of 50 agents per window: R-bar near 1.
gauge = [re.search(r"; sync R\u0304 ( {3}–|\d\.\d\d) \|", l) for l in storm if " tick " in l]
vals = [m[1].strip() for m in gauge if m]
expect(gauge and all(gauge) and any(v != "–" for v in vals)
       and all(float(v) >= 0.9 for v in vals if v != "–"),
       f"the fleet phase's lines end their traffic with the last window's R-bar, 4 wide: {vals}")
quiet = [l for l in live if re.search(r"done +0/s", l)]
expect(quiet and all(re.search(r"p50 +– p99 +– ", l) for l in quiet),
       f"{len(quiet)} seconds without a completion show '–' for p50 and p99")
expect(not any(re.search(r"p(50|99) +0\.0ms", l) for l in live), "never a 0.0 ms latency")
errs = [(int(m[1]), int(m[2])) for m in (re.search(r"errors +(\d+)/s, (\d+) in all", l) for l in live) if m]
running, ok = 0, True
for this, total in errs:
    running += this
    ok &= total == running
expect(ok and errs[-1][1] == n404,
       f"errors in all is the running sum and ends at the target's 404 count {n404}: {errs[-1]}")
drops = [(int(m[1]), int(m[2])) for m in (re.search(r"watches \d+ open, (\d+) dropped, (\d+) reconnects", l) for l in live) if m]
expect(dropped_by_target == 10 and sum(d for d, _ in drops) == dropped_by_target,
       f"dropped streams on the live line {sum(d for d, _ in drops)} = the target's {dropped_by_target}")
expect(sum(r for _, r in drops) >= dropped_by_target, f"... and as many reconnects: {sum(r for _, r in drops)}")
td = [(int(m[1]), int(m[2])) for m in (re.search(r"\| deleted (\d+) of (\d+), \d+/s, [0-9.]+s left", l) for l in live) if m]
expect(td and all(total == n201 for _, total in td) and [d for d, _ in td] == sorted(d for d, _ in td),
       f"teardown progress of the target's {n201} created objects, growing: {td}")
sys.exit(1 if bad else 0)
PY

# --- cleanup's progress -------------------------------------------------------------------------
cat >"$T/k.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  make: {kind: write, method: PUT, path: "/v1/gw/k-{{seq}}", body: '{"n":1}', creates: true}
phases:
  - {name: fill, rate: 60/s, duration: 1s, mix: {make: 1}}
YAML
run_plan "$T/k" "$T/k.yaml" --keep
"$SQUALL" cleanup "$T/k" --rate 20/s >"$T/c.stdout" 2>"$T/c.stderr"
expect "cleanup shows its progress: deleted of 60, at 20/s, time left" \
    grep -Eq "^cleanup: deleted [0-9]+ of 60, 2[0-9]/s, [0-9.]+s left" "$T/c.stderr"

# --- a run stopped by SIGINT -------------------------------------------------------------------
cat >"$T/long.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  missing: {kind: get, path: /v1/sites/none/gateways/gw-0}
phases:
  - {name: long, rate: 20/s, duration: 30s, mix: {missing: 1}}
YAML
"$SQUALL" run "$T/long.yaml" -o "$T/long" >"$T/long.out" 2>&1 &
RUN_PID=$!
sleep 2
kill -INT "$RUN_PID"
wait "$RUN_PID"
expect "the signal's hint is said once" test "$(grep -c 'send the signal again' "$T/long.out")" = 1
expect "the run's last lines do not repeat it" bash -c "! tail -5 '$T/long.out' | grep -q 'again'"
rcheck "results say why it stopped: signal SIGINT" \
    'd["meta"]["stop_reason"] == "signal SIGINT"' "$T/long"
[ "$FAILED" = 0 ] && echo "live-line: all passed"
exit "$FAILED"
