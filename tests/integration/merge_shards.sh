#!/usr/bin/env bash
# A merged two-shard run with objectives, judged as one run. The same plan (reads at a rate, then
# an aligned fleet storm) runs as two real shards in parallel (`run --shard 1/2` and `2/2`)
# against one embedded target whose `--delay fixed:50ms` adds a known server-side latency
# (README, "The embedded target"); `squall merge` combines them. Each shard sends its half of the
# plan (README, "Shards": every second even start, agents k mod 2), so the merged two shards are
# one run of the SAME plan, which runs beside them for comparison. Checked against sources
# outside the generator:
#   - the target's own /stats counts (GET and PUT answers) = the merged counts (cells,
#     series.csv, storm ticks);
#   - the known delay: a p99 <= 20 ms objective must FAIL merged (exit 1) as in a single run of
#     the same load; p99 <= 1 s must PASS (exit 0) alike (exit codes: README, "Exit codes");
#   - a percentile is resolved by 1 / (1 - p) samples (100 for p99; judge.h): shards of 60
#     reads each are INCONCLUSIVE alone (exit 7), and the merge of their 120 PASSes, as a single
#     run of 120 does: the merge is judged on all its samples;
#   - aligned fleets fire on the wall-clock multiple of their period (README, "Fleets and
#     storms"): the shards' ticks coincide, and merged ticks carry both shards' agents.
# Also: a one-input merge reproduces its input's verdict and sections; `squall compare` accepts a
# merged run against a single one.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/merge-shards"
rm -rf "$T"
mkdir -p "$T"
AGENTS=10 # per shard: the plan's fleet has 2 x AGENTS agents

plan() { # plan FILE P99 RATE AGENTS: 3 s of reads, then 3 s of an aligned storm of lease renewals
    cat >"$1" <<YAML
seed: 7 # shards of one run share a seed (merge refuses others)
target: {url: "$SERVE_URL", connections: 32, timeout: 5s}
accept: [generator-bound] # two shards and the target share 2 cores: a lagging second is listed
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  beat: {kind: write, method: PUT, path: "/v1/sites/north/leases/gw-{{agent}}", body: '{"n":1}'}
phases:
  - {name: steady, rate: $3, duration: 3s, mix: {read: 1}}
  - {name: storm, duration: 3s, fleet: {agents: $4, every: 1s, timing: aligned, send: beat}}
objectives:
  - {class: read, p99: $2}
YAML
}

counts() { serve_stats 's["requests"].get("GET", {}).get("200", 0), s["requests"].get("PUT", {}).get("200", 0)'; }

# shards NAME P99 RATE: both shards of the plan at once; SH_RC1, SH_RC2 their exit codes; GOT the
# target's GET and PUT answers during them
shards() {
    plan "$T/$1.yaml" "$2" "$3" $((2 * AGENTS))
    local before after p1 p2
    before=$(counts)
    timeout 120 "$SQUALL" run "$T/$1.yaml" -o "$T/$1-1" --shard 1/2 --quiet >"$T/$1-1.out" 2>&1 &
    p1=$!
    timeout 120 "$SQUALL" run "$T/$1.yaml" -o "$T/$1-2" --shard 2/2 --quiet >"$T/$1-2.out" 2>&1 &
    p2=$!
    wait $p1
    SH_RC1=$?
    wait $p2
    SH_RC2=$?
    after=$(counts)
    GOT=$(/usr/bin/python3 -c "b, a = $before, $after; print(a[0] - b[0], a[1] - b[1])")
}

# merged NAME: merges the shards of NAME into NAME-m; MRC its exit code
merged() {
    "$SQUALL" merge "$T/$1-1" "$T/$1-2" -o "$T/$1-m" >"$T/$1-m.out" 2>&1
    MRC=$?
}

# single NAME: one process running the shards' plan; SRC its exit code, SGOT the target's GET
# and PUT answers during it
single() {
    local before after
    before=$(counts)
    run_plan "$T/$1-s" "$T/$1.yaml"
    SRC=$RUN_RC
    after=$(counts)
    SGOT=$(/usr/bin/python3 -c "b, a = $before, $after; print(a[0] - b[0], a[1] - b[1])")
}

verdict() { rget "$1" 'd["sections"]["run"]["verdict"]'; }

serve_start --delay fixed:50ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
for a in $(seq 0 $((2 * AGENTS - 1))); do # the leases exist: renewals answer 200, create nothing
    curl -s -X PUT -d '{"n":0}' "$SERVE_URL/v1/sites/north/leases/gw-$a" >/dev/null
done

# --- p99 <= 20 ms under a 50 ms delay: FAIL merged, as in one run of the same load -------------
shards fail 20ms 100/s
merged fail
single fail
read -r GETS PUTS <<<"$GOT"
expect "the two shards sent what one process sends with the same plan: $GOT = $SGOT (GET, PUT)" \
    test "$GOT" = "$SGOT"
expect "both shards FAIL on their own (exit 1; got $SH_RC1 and $SH_RC2)" \
    test "$SH_RC1$SH_RC2" = 11
expect "the merge FAILs: exit 1 (got $MRC)" test "$MRC" = 1
expect "the single run of the same load FAILs: exit 1 (got $SRC)" test "$SRC" = 1
expect "merged and single verdicts agree: $(verdict "$T/fail-m") = $(verdict "$T/fail-s")" \
    test "$(verdict "$T/fail-m")" = "$(verdict "$T/fail-s")"
rcheck "the merged p99 check fails in steady and the run at >= 50 ms (the target's delay)" \
    "sorted(c['scope'] for c in d['sections']['objectives']['checks'] if c['objective'] == 0
            and c['verdict'] == 'fail' and c['observed'] >= 50) == ['run', 'steady']" "$T/fail-m"
# The target's own counts: GET 200s and PUT 200s it answered while the shards ran.
rcheck "merged reads = the target's GET answers during the shards ($GETS = 100/s x 3 s)" \
    "total('read', '2xx') == $GETS == 300" "$T/fail-m"
rcheck "each shard sent half of them (every second start: 150)" \
    "total('read', '2xx') == 150" "$T/fail-1"
rcheck "merged renewals = the target's PUT answers during the shards ($PUTS)" \
    "total('beat', '2xx') == $PUTS" "$T/fail-m"
SERIES=$(awk -F, 'NR > 1 && $3 == "read" { s += $5 } END { print s + 0 }' "$T/fail-m/series.csv")
expect "merged series.csv: the read seconds' completions add up to the target's $GETS (got $SERIES)" \
    test "$SERIES" = "$GETS"
rcheck "merged storm ticks carry the target's $PUTS renewals; each tick $AGENTS or $((2 * AGENTS)),
      at least 2 with both shards' agents (aligned on the wall clock)" \
    "sum(t['requests'] for t in d['sections']['storms']['storm']['actions'][0]['ticks']) == $PUTS
     and all(t['requests'] in ($AGENTS, $((2 * AGENTS)))
             for t in d['sections']['storms']['storm']['actions'][0]['ticks'])
     and sum(t['requests'] == $((2 * AGENTS))
             for t in d['sections']['storms']['storm']['actions'][0]['ticks']) >= 2" "$T/fail-m"
STORMS=$(awk -F, 'NR > 1 { s += $5 } END { print s + 0 }' "$T/fail-m/storms.csv")
expect "merged storms.csv: its ticks' requests add up to the target's $PUTS (got $STORMS)" \
    test "$STORMS" = "$PUTS"
rcheck "the merged run section lists both shards with their seed and command line" \
    "[(i['verdict'], '--shard' in i['command_line'], 'seed' in i)
      for i in d['sections']['run']['inputs']] == [('fail', True, True)] * 2
     and d['sections']['run']['exit_code'] == 1" "$T/fail-m"
expect "the merged report.html says FAIL" grep -q "FAIL: at least one objective did not hold" \
    "$T/fail-m/report.html"

# --- p99 <= 1 s holds under the same delay: PASS merged, as in one run ---------------------------
shards pass 1s 100/s
merged pass
single pass
expect "both shards PASS on their own (got $SH_RC1 and $SH_RC2)" test "$SH_RC1$SH_RC2" = 00
expect "the merge PASSes: exit 0 (got $MRC; $(tail -3 "$T/pass-m.out" | tr '\n' ' '))" \
    test "$MRC" = 0
expect "the single run of the same load PASSes: exit 0 (got $SRC)" test "$SRC" = 0
rcheck "every merged check passes and the merged p99 observes the delay (>= 50 ms, <= 1 s)" \
    "all(c['verdict'] == 'pass' for c in d['sections']['objectives']['checks'])
     and [50 <= c['observed'] <= 1000 for c in d['sections']['objectives']['checks']
          if c['objective'] == 0 and c['scope'] == 'run'] == [True]" "$T/pass-m"

# --- too few samples in each shard, enough merged ------------------------------------------------
# 40/s for 3 s split in two: 60 reads a shard, fewer than the 100 a p99 needs: INCONCLUSIVE
# alone. Merged, the 120 reads resolve it: the merge is judged on all its samples, as the single
# run of the same plan is.
shards few 1s 40/s
merged few
single few
expect "each shard alone is INCONCLUSIVE: exit 7 (got $SH_RC1 and $SH_RC2)" test "$SH_RC1$SH_RC2" = 77
rcheck "a shard's p99 check: too-few, 60 samples of the 100 needed" \
    "[(c['verdict'], c['samples'], c['needed']) for c in d['sections']['objectives']['checks']
      if c['objective'] == 0 and c['scope'] == 'run'] == [('too-few', 60, 100)]" "$T/few-1"
expect "the merge of 120 reads PASSes: exit 0 (got $MRC)" test "$MRC" = 0
expect "the single run of 120 reads PASSes: exit 0 (got $SRC)" test "$SRC" = 0
rcheck "the merged p99 check passes on 120 samples" \
    "[(c['verdict'], c['samples']) for c in d['sections']['objectives']['checks']
      if c['objective'] == 0 and c['scope'] == 'run'] == [('pass', 120)]" "$T/few-m"

# --- a merge of one input is that input ---------------------------------------------------------
"$SQUALL" merge "$T/fail-1" -o "$T/one" >/dev/null 2>&1
ORC=$?
expect "a one-input merge exits as its input did (1; got $ORC)" test "$ORC" = 1
/usr/bin/python3 - "$T/fail-1" "$T/one" <<'PY'
import json, sys
a, b = (json.load(open(p + "/results.json"))["sections"] for p in sys.argv[1:])
same = [k for k in a if k != "run" and a[k] == b.get(k)]
assert sorted(same) == sorted(k for k in a if k != "run"), sorted(set(a) - set(same))
assert (a["run"]["verdict"], a["run"]["reasons"]) == (b["run"]["verdict"], b["run"]["reasons"])
print("ok: a one-input merge has its input's sections and verdict:", ", ".join(sorted(same)))
PY
[ $? -eq 0 ] || FAILED=1
expect "a one-input merge has its input's series.csv" cmp -s "$T/fail-1/series.csv" "$T/one/series.csv"

# --- inputs judged on other objectives are refused ----------------------------------------------
"$SQUALL" merge "$T/fail-1" "$T/pass-2" -o "$T/mixed" >/dev/null 2>"$T/mixed.err"
XRC=$?
expect "merging shards of other objectives is refused: exit 2 (got $XRC)" test "$XRC" = 2
expect "... naming the section that differs" grep -q '"judgement" section differs' "$T/mixed.err"

# --- compare accepts a merged run ---------------------------------------------------------------
"$SQUALL" compare "$T/fail-s" "$T/fail-m" --json >"$T/cmp.json" 2>"$T/cmp.err"
CRC=$?
expect "compare single vs merged runs and decides (exit 0 or 1; got $CRC: $(head -2 "$T/cmp.err"))" \
    test "$CRC" -le 1
/usr/bin/python3 - "$T/cmp.json" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
lines = {(l["phase"], l["class"], l["metric"]): l for l in d["lines"]}
read = lines[("steady", "read", "p99.9")]
beat = lines[("storm", "beat", "p99")]
assert read["samples"] == "seconds" and read["n_base"] >= 3 and read["n_new"] >= 3, read
assert beat["samples"] == "ticks" and beat["n_base"] >= 3 and beat["n_new"] >= 3, beat
print(f"ok: compare reads the merged series ({read['n_new']} seconds of read) and storm ticks "
      f"({beat['n_new']} ticks of beat)")
PY
[ $? -eq 0 ] || FAILED=1

# --- only shards of one run merge; their journals become one -----------------------------------
# Two shards that kept (--keep) the 40 objects they created, with different seeds: not one run's
# shards, refused unless --force; the forced merge's journal holds both shards' creates, and
# `squall cleanup` of the merged directory deletes all 40 (the target answers 404 for each after).
cat >"$T/mk.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  make: {kind: write, method: PUT, path: "/v1/sites/north/made/k-{{seq}}", body: '{"n":1}', creates: true}
phases:
  - {name: fill, rate: 40/s, duration: 1s, mix: {make: 1}}
YAML
run_plan "$T/mk-1" "$T/mk.yaml" --shard 1/2 --seed 5 --keep
run_plan "$T/mk-2" "$T/mk.yaml" --shard 2/2 --seed 6 --keep
"$SQUALL" merge "$T/mk-1" "$T/mk-2" -o "$T/mk-x" >/dev/null 2>"$T/mk-x.err"
XRC=$?
expect "shards with different seeds are refused: exit 2 (got $XRC), naming the seeds" \
    bash -c "[ $XRC = 2 ] && grep -q 'ran with different seeds' '$T/mk-x.err' && [ ! -e '$T/mk-x/results.json' ]"
"$SQUALL" merge "$T/mk-1" "$T/mk-2" -o "$T/mk-m" --force >/dev/null 2>"$T/mk-m.err"
XRC=$?
expect "--force merges them (exit $XRC)" test "$XRC" = 0 -o "$XRC" = 7
expect "the merged journal holds both shards' 40 creates" \
    test "$(grep -c '"op":"created"' "$T/mk-m/journal.ndjson" 2>/dev/null)" = 40
"$SQUALL" cleanup "$T/mk-m" >"$T/mk-c.out" 2>&1
expect "cleanup of the merged run deletes all 40 ($(tail -1 "$T/mk-c.out"))" \
    grep -q "40 objects: 40 deleted" "$T/mk-c.out"
LEFT=$(/usr/bin/python3 - "$SERVE_URL" <<'PY'
import sys, urllib.error, urllib.request
left = 0
for k in range(40):
    try:
        urllib.request.urlopen(f"{sys.argv[1]}/v1/sites/north/made/k-{k}", timeout=5)
        left += 1
    except urllib.error.HTTPError as e:
        left += e.code != 404
print(left)
PY
)
expect "the target has none of them left (404 for k-0..k-39; left: $LEFT)" test "$LEFT" = 0
serve_stop

[ "$FAILED" = 0 ] && echo "merge-shards: all checks passed"
exit "$FAILED"
