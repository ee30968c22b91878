#!/usr/bin/env bash
# Actions at planned instants and collected artifacts, against the embedded target:
#   - a plan whose action runs a program is refused without --allow-exec before any traffic
#     (the target's own /stats counts no request), and `check` names the program;
#   - an http action 5 s into a phase drops every watch (POST /admin/drop-watches): the target's
#     /stats counts the drop, and every watch's reconnect starts within a second of the action
#     (the watches' reconnect log against the action's own time in results.json);
#   - an exec action's output and exit code are kept, its environment names the phase; one that
#     outlives its timeout is killed by pid (gone afterwards, recorded as timed out);
#   - an action whose phase ends first does not fire, and says so;
#   - collects: /stats at the phase's end holds the objects the run created, at the run's end
#     (after the teardown) none; a collect over its `max` is cut and says so;
#   - each instant is named in series.csv's marks and drawn in report.html;
#   - `check` refuses an action timed after its phase ends. About 25 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
T="$BUILDDIR/actions"
rm -rf "$T"
mkdir -p "$T"
source "$SRCDIR/tests/integration/lib/run.sh"
FAILED=0
serve_start || exit 1
cat >"$T/plan.yaml" <<PLAN
seed: 5
# This test is about what squall does beside the load, not the verdict: a second in which this
# shared machine held squall back (generator-bound) must not turn the run INCONCLUSIVE here.
accept: [generator-bound]
target: {url: "$SERVE_URL", connections: 8}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{seq}}", body: '{"holder":"gw","stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/leases?watch=1", stamp-key: stamp, reconnect: {policy: immediate}}
phases:
  - name: steady
    duration: 8s
    rate: 40/s
    mix: {renew: 1}
    watches: {follow: 20}
    actions:
      - {name: drop-watches, at: 5s, http: {url: /admin/drop-watches}}
      - {name: say, at: 2s, exec: [/bin/sh, -c, 'echo "phase=\$SQUALL_PHASE"; exit 3']}
      - {name: slow, at: 3s, exec: [/bin/sleep, "31.7"], timeout: 1s}
      - {name: late, at: 7.9s, http: {url: /stats}}
  - {name: teardown, teardown: {rate: 1000/s}}
observe:
  collect:
    - {url: /stats, at: "phase-end:steady", save: stats-end.json}
    - {url: /stats, at: run-end, save: stats-final.json}
    - {url: /metrics, at: run-start, save: metrics-start.txt, max: 1}
PLAN

"$SQUALL" check "$T/plan.yaml" >"$T/check.out" 2>&1
expect "check names the programs" bash -c "grep -q \"action 'say' of phase steady runs /bin/sh\" '$T/check.out'"
"$SQUALL" run "$T/plan.yaml" -o "$T/refused" -q >"$T/refused.out" 2>&1
rc=$?
sent=$(serve_stats "sum(sum(v.values()) for v in s['requests'].values())")
expect "without --allow-exec: exit $rc, nothing sent ($sent requests)" \
    bash -c "[ $rc = 2 ] && [ '$sent' = 0 ] && grep -q 'refused without --allow-exec' '$T/refused.out'"

"$SQUALL" run "$T/plan.yaml" -o "$T/out" -q --allow-exec >"$T/run.out" 2>&1
rc=$?
expect "with --allow-exec the run passes (exit $rc)" test "$rc" = 0
expect "the timed-out program is gone" bash -c "! pgrep -f 'slee[p] 31.7' >/dev/null"

/usr/bin/python3 - "$T/out" <<'PY' || FAILED=1
import csv, json, sys
d = sys.argv[1]
res = json.load(open(f"{d}/results.json"))
items = {i["name"]: i for i in res["sections"]["actions"]["items"]}
bad = 0
def ok(what, cond):
    global bad
    print(("ok   " if cond else "FAIL ") + what)
    bad += not cond
drop = items["drop-watches"]
ok("drop-watches answered 2xx", drop["state"] == "done" and drop["outcome"] == "2xx")
say = items["say"]
out = open(f"{d}/{say['saved']}").read()
ok(f"exec output kept ({out.strip()!r}), exit code {say.get('exit_code')}",
   out.strip() == "phase=steady" and say["exit_code"] == 3)
slow = items["slow"]
ok(f"slow program killed at its timeout ({slow.get('elapsed_ms', 0):.0f} ms)",
   slow["timed_out"] and slow["signal"] == 9 and 900 <= slow["elapsed_ms"] <= 3000)
end = json.load(open(f"{d}/collected/stats-end.json"))
final = json.load(open(f"{d}/collected/stats-final.json"))
created = sum(c["count"] for c in res["cells"] if c["class"] == "renew" and c["outcome"] == "2xx")
ok(f"phase-end collect: {end['objects']} objects, the run created {created}", end["objects"] == created)
ok(f"run-end collect after the teardown: {final['objects']} objects", final["objects"] == 0)
ok(f"the target counted one drop of 20 streams ({end['faults']})",
   end["faults"]["drops"] == 1 and end["faults"]["dropped_streams"] == 20)
m = items["metrics-start.txt"]
ok(f"collect cut at max (1 MiB): {m['bytes']} bytes, truncated {m['truncated']}",
   m["bytes"] <= 1048576 and m["state"] == "done")
# Reconnects within a second of the action (times from the run's start; the phase starts at 0).
t0 = drop["fired_unix_ms"]
start = res["sections"]["phases"]["phases"][0]
import datetime
run0 = datetime.datetime.fromisoformat(res["meta"]["start"].replace("Z", "+00:00")).timestamp() * 1000
at = (t0 - run0) / 1000 - start["start_s"]
log = res["sections"]["watches"]["steady"]["reconnect_log"]
sent = [s / 1e9 for s in log["sent_ns"]]
ok(f"{len(sent)} reconnects, sent {min(sent) - at:+.3f}..{max(sent) - at:+.3f} s after the action",
   len(sent) == 20 and all(-0.05 <= s - at <= 1.0 for s in sent))
marks = {r["marks"] for r in csv.DictReader(open(f"{d}/series.csv")) if r["marks"]}
names = {n for m in marks for n in m.split(";")}
ok(f"series.csv marks {sorted(names)}", {"drop-watches", "say", "slow", "stats-end.json"} <= names)
sys.exit(1 if bad else 0)
PY
expect "report.html draws the marks" grep -q '<text[^>]*>drop-watches</text>' "$T/out/report.html"
expect "report.html links the collected artifact" \
    grep -q '<a href="collected/stats-end.json">' "$T/out/report.html"

# A run stopped by SIGINT 1.5 s into its phase: the action due at 5 s does not fire.
sed -e '/name: say/d' -e '/name: slow/d' "$T/plan.yaml" >"$T/short.yaml"
"$SQUALL" run "$T/short.yaml" -o "$T/short" -q >"$T/short.out" 2>&1 &
pid=$!
sleep 1.5
kill -INT "$pid"
wait "$pid"
expect "stopped early: the action due later did not fire" \
    bash -c "jq -e '.sections.actions.items[] | select(.name == \"drop-watches\") | .state == \"skipped\" and (.error | test(\"phase ended\"))' '$T/short/results.json' >/dev/null"

sed 's/at: 7.9s/at: 9s/' "$T/plan.yaml" >"$T/late.yaml"
"$SQUALL" check "$T/late.yaml" >"$T/late.out" 2>&1
expect "an action after its phase ends is refused by check (exit $?)" \
    grep -q 'late.yaml:[0-9]*:[0-9]*: error: phases.steady.actions\[3\].at: after the phase ends' "$T/late.out"

[ "$FAILED" = 0 ] && echo "actions: all passed"
