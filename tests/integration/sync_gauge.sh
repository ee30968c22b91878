#!/usr/bin/env bash
# The synchronisation gauge of fleet actions (README, "Fleets and storms", "Objectives") against
# the embedded target, checked from outside the generator:
#   - an aligned fleet (every agent at the same instant of each period) gauges R-bar near 1 in
#     every whole window, a spread fleet (agents evenly over the period) below 0.1;
#   - the target's own NDJSON access log (`squall serve --access-log F --access-log-format
#     ndjson`: each request's receive time, README "The embedded target") gives, through numpy,
#     the same R-bar per whole window within 0.05: R-bar = |mean(exp(i 2 pi (t - w0) / P))| over
#     the renewals the target received in the window [w0, w0 + P) on the wall clock (Mardia &
#     Jupp, "Directional Statistics", 2000, the mean resultant length; from memory), w0 = the run's
#     start (results.json meta.start) + the window's start_s;
#   - {class: renew, max-sync: 0.3} FAILs the aligned run (exit 1) and PASSes the spread one
#     (exit 0); a fleet of 40 agents cannot fill a window with the 77 sends the bound needs
#     (ln(1000)/0.3^2, README "Judgement"): INCONCLUSIVE (exit 7) (exit codes: README, "Exit
#     codes");
#   - two real shards (`run --shard 1/2` and `2/2`) of the spread plan, merged: each merged
#     window's n is the sum of the shards' (the merge adds them), the merged sends equal a
#     single run's of the same plan and the target's count of PUT answers, and the merged R-bar
#     stays below 0.1 (exactness of the merged R-bar against numpy: unit test `gauge`).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/sync-gauge"
rm -rf "$T"
mkdir -p "$T"
serve_start --access-log "$T/access.ndjson" --access-log-format ndjson || exit 1

plan() { # plan FILE NAME TIMING AGENTS
    cat >"$1" <<YAML
seed: 20 # shards of one run share a seed
target: {url: "$SERVE_URL", connections: 64, timeout: 5s}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/$2-{{agent}}", body: '{"holder":"gw-{{agent}}"}'}
phases:
  - {name: $2, duration: 4s, fleet: {agents: $4, every: 1s, timing: $3, send: renew}}
objectives:
  - {class: renew, max-sync: 0.3}
# 300 renewals at once wait for the 64 connections by design: squall says so (generator-bound),
# which this plan accepts; the gauge measures the sends as they went out.
accept: [generator-bound]
YAML
}

puts() { serve_stats 's["requests"].get("PUT", {}).get("200", 0) + s["requests"].get("PUT", {}).get("201", 0)'; }

# numpy's R-bar per whole window of OUT's phase NAME from the target's access log, against
# squall's: prints "ok"/"FAIL" lines.
logcheck() {
    sleep 2.5 # the target flushes its access log every 2 s
    /usr/bin/python3 - "$1/results.json" "$T/access.ndjson" "$2" <<'PY'
import datetime, json, sys
import numpy as np
d = json.load(open(sys.argv[1]))
name = sys.argv[3]
start = datetime.datetime.fromisoformat(d["meta"]["start"].replace("Z", "+00:00")).timestamp()
lines = [l for l in open(sys.argv[2]) if l.endswith("\n")]  # whole lines: it is still written
recv = np.array([r["time"] for r in map(json.loads, lines)
                 if r["method"] == "PUT" and r["path"].startswith("/v1/leases/%s-" % name)])
a = d["sections"]["sync"][name]["actions"][0]
P = a["period_ns"] / 1e9
bad, rows = 0, []
for w in a["windows"]:
    if w["partial"] or w["n"] < 50:
        continue
    w0 = start + w["start_s"]
    t = recv[(recv >= w0) & (recv < w0 + P)]
    r = float(np.abs(np.exp(2j * np.pi * (t - w0) / P).mean())) if len(t) else float("nan")
    rows.append((w["index"], w["n"], len(t), round(w["r_bar"], 4), round(r, 4)))
    bad += not abs(r - w["r_bar"]) <= 0.05
ok = rows and not bad
print(("ok: " if ok else "FAIL: ") + "%s: R-bar per whole window, squall vs numpy over the "
      "target's access log within 0.05 (index, n, log n, squall, log): %s" % (name, rows))
sys.exit(0 if ok else 1)
PY
}

W='d["sections"]["sync"]'
# windows OUT PHASE: (index, n, R-bar to 4 places or None) of the phase's first action, for messages.
windows() {
    rget "$1" "[(w['index'], w['n'], None if w['r_bar'] is None else round(w['r_bar'], 4)) for w in $W['$2']['actions'][0]['windows']]" 2>/dev/null
}

# --- aligned: bunched, max-sync fails ------------------------------------------------------------
plan "$T/a.yaml" aligned aligned 300
run_plan "$T/a" "$T/a.yaml"
expect_rc "aligned: max-sync 0.3 fails the run (exit 1, got $RUN_RC)" "$T/a" 1
rcheck "aligned: every whole window's R-bar >= 0.95 ($(windows "$T/a" aligned))" \
    "all(w['r_bar'] >= 0.95 for w in $W['aligned']['actions'][0]['windows'] if not w['partial'] and w['n'] >= 50)
     and sum(not w['partial'] for w in $W['aligned']['actions'][0]['windows']) >= 3" "$T/a"
rcheck "aligned: the max-sync checks fail in the phase and the run, observed R-bar >= 0.95" \
    "sorted((c['scope'], c['verdict']) for c in d['sections']['objectives']['checks'] if c['unit'] == 'r_bar') == [('aligned', 'fail'), ('run', 'fail')]
     and all(c['observed'] >= 0.95 and c['threshold'] == 0.3 for c in d['sections']['objectives']['checks'] if c['unit'] == 'r_bar')" "$T/a"
logcheck "$T/a" aligned || FAILED=1
# The ticks are aligned on the wall clock, so one can sit just before a window's end: a CI run
# whose first tick went out late had no send in window 0 (then series.csv wrote R-bar 0.0000, as
# if spread); such a window has its index and n = 0 and no gauge.
expect "aligned: series.csv's renew rows carry the last closed window's R-bar (>= 0.95) once one closed, none for a window without sends" \
    /usr/bin/python3 -c "
import csv, sys
rows = [r for r in csv.DictReader(open('$T/a/series.csv')) if r['class'] == 'renew' and r['sync_window']]
ok = [r for r in rows if r['sync_n'] != '0' and float(r['sync_r_bar']) >= 0.95]
empty = [r for r in rows if r['sync_n'] == '0' and r['sync_r_bar'] == r['sync_p'] == r['sync_peak_to_mean'] == '']
sys.exit(not (ok and len(ok) + len(empty) == len(rows)))"

# --- spread: even, max-sync passes ---------------------------------------------------------------
plan "$T/s.yaml" spread spread 300
BEFORE=$(puts)
run_plan "$T/s" "$T/s.yaml"
SPUTS=$(($(puts) - BEFORE))
expect_rc "spread: max-sync 0.3 passes the run (exit 0, got $RUN_RC)" "$T/s" 0
rcheck "spread: every whole window's R-bar < 0.1 ($(windows "$T/s" spread))" \
    "all(w['r_bar'] is not None and w['r_bar'] < 0.1 for w in $W['spread']['actions'][0]['windows'] if not w['partial'])
     and sum(not w['partial'] for w in $W['spread']['actions'][0]['windows']) >= 3" "$T/s"
rcheck "spread: the sends gauged (windows and past the last) = the target's PUT answers ($SPUTS)" \
    "sum(w['n'] for w in $W['spread']['actions'][0]['windows']) + $W['spread']['actions'][0]['outside'] == $SPUTS" "$T/s"
logcheck "$T/s" spread || FAILED=1

# --- too few sends per window: INCONCLUSIVE, never a pass ------------------------------------------
plan "$T/f.yaml" few spread 40
run_plan "$T/f" "$T/f.yaml"
expect_rc "few: 40 agents cannot fill a window with the 77 sends max-sync 0.3 needs: INCONCLUSIVE (exit 7, got $RUN_RC)" "$T/f" 7
rcheck "few: the max-sync checks are too-few with no window counted, and say why" \
    "[(c['verdict'], c['samples'], c.get('why')) for c in d['sections']['objectives']['checks'] if c['unit'] == 'r_bar'] == [('too-few', 0, 'no whole window with at least 77 sends')] * 2" "$T/f"

# --- two shards of the spread plan, merged --------------------------------------------------------
plan "$T/m.yaml" shard spread 300
BEFORE=$(puts)
timeout 120 "$SQUALL" run "$T/m.yaml" -o "$T/m1" --shard 1/2 --quiet >"$T/m1.out" 2>&1 &
P1=$!
timeout 120 "$SQUALL" run "$T/m.yaml" -o "$T/m2" --shard 2/2 --quiet >"$T/m2.out" 2>&1 &
P2=$!
wait "$P1"
R1=$?
wait "$P2"
R2=$?
MPUTS=$(($(puts) - BEFORE))
"$SQUALL" merge "$T/m1" "$T/m2" -o "$T/mm" >"$T/mm.out" 2>&1
MRC=$?
expect "both shards and their merge pass max-sync (exit 0, got $R1 $R2 $MRC)" test "$R1$R2$MRC" = 000
N1=$(rget "$T/m1" "{w['index']: w['n'] for w in d['sections']['sync']['shard']['actions'][0]['windows']}")
N2=$(rget "$T/m2" "{w['index']: w['n'] for w in d['sections']['sync']['shard']['actions'][0]['windows']}")
rcheck "merged windows: each n is the sum of the shards' ($N1 + $N2)" \
    "{w['index']: w['n'] for w in $W['shard']['actions'][0]['windows']} == {k: $N1.get(k, 0) + $N2.get(k, 0) for k in set($N1) | set($N2)}" "$T/mm"
rcheck "merged sends = the target's PUT answers during the shards ($MPUTS) = the single run's sends" \
    "sum(w['n'] for w in $W['shard']['actions'][0]['windows']) + $W['shard']['actions'][0]['outside'] == $MPUTS == $SPUTS" "$T/mm"
rcheck "merged whole windows: R-bar < 0.1 ($(windows "$T/mm" shard))" \
    "all(w['r_bar'] is not None and w['r_bar'] < 0.1 for w in $W['shard']['actions'][0]['windows'] if not w['partial'])" "$T/mm"
[ "$FAILED" = 0 ] && echo "sync-gauge: all passed"
exit "$FAILED"
