#!/usr/bin/env bash
# --json on check, run, merge and cleanup: stdout is exactly one JSON document with its format
# name and version (like compare --json), talk goes to stderr, and the figures agree with
# references outside the code: the plan's own arithmetic (read with PyYAML, Debian
# python3-yaml), the results.json files (read with Python's json), the embedded target's own
# object count (GET /stats) and answers (curl: 404 for what cleanup says it deleted).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/target.sh"
T="$BUILDDIR/json-test"
rm -rf "$T"
mkdir -p "$T"

# json_doc FILE FORMAT: FILE is one JSON document of that format, version 1.
json_doc() {
    /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
sys.exit(not (d.get("format") == sys.argv[2] and d.get("version") == 1))' "$1" "$2" 2>/dev/null
}

# --- check --json: the plan as understood, against the demo plan's own arithmetic ------------
PLAN="$SRCDIR/scenarios/demo.yaml"
"$SQUALL" check "$PLAN" --json >"$T/check.json" 2>"$T/check.err"
rc=$?
expect "check --json exits 0 (got $rc)" test "$rc" = 0
expect "check --json: stdout is one squall-check v1 document" json_doc "$T/check.json" squall-check
expect "check --json: nothing on stderr ($(head -c 200 "$T/check.err"))" test ! -s "$T/check.err"
/usr/bin/python3 - "$PLAN" "$T/check.json" <<'PY' || FAILED=1
import json, re, sys
import yaml

plan = yaml.safe_load(open(sys.argv[1]))
d = json.load(open(sys.argv[2]))
bad = 0


def check(desc, cond):
    global bad
    print(("ok: " if cond else "FAIL: ") + "check --json: " + desc)
    bad |= not cond


secs = lambda t: int(re.fullmatch(r"(\d+)s", t).group(1))
per_s = lambda t: int(re.fullmatch(r"(\d+)/s", t).group(1))
phases = {p["name"]: p for p in d["phases"]}
check("one entry per plan phase, in order",
      [p["name"] for p in d["phases"]] == [p["name"] for p in plan["phases"]])
for p in plan["phases"]:
    got = phases[p["name"]]
    if "ramp" in p:  # even arrivals on a linear ramp: the mean rate times the duration
        n = (per_s(p["ramp"]["from"]) + per_s(p["ramp"]["to"])) / 2 * secs(p["duration"])
        (cls,) = p["mix"]
        check(f"{p['name']}: ramp {p['ramp']} over {p['duration']} is {n:g} {cls}",
              abs(got["expected"][cls] - n) < 1e-6)
        check(f"{p['name']}: ramp shape from/to as planned",
              got["load"]["shape"] == "ramp" and got["load"]["ramp"]["to"] == per_s(p["ramp"]["to"]))
    elif "rate" in p:  # poisson: the expectation, split by the mix weights
        total = per_s(p["rate"]) * secs(p["duration"])
        w = sum(p["mix"].values())
        for cls, k in p["mix"].items():
            check(f"{p['name']}: {cls} expected {total * k / w:g}",
                  abs(got["expected"][cls] - total * k / w) < 1e-6)
        check(f"{p['name']}: {total} requests", abs(got["requests"] - total) < 1e-6)
        check(f"{p['name']}: peak rate {per_s(p['rate'])}/s", got["peak_rate"] == per_s(p["rate"]))
    elif "fleet" in p:  # aligned ticks at multiples of `every` in the phase: duration / every
        f = p["fleet"]
        n = f["agents"] * secs(p["duration"]) // secs(f["every"])
        check(f"{p['name']}: fleet {f['agents']} agents x {secs(p['duration']) // secs(f['every'])} ticks = {n}",
              got["expected"].get(f["send"]) == n and got["agents"] == f["agents"])
        check(f"{p['name']}: aligned bursts of {f['agents']}", got["burst"] == f["agents"])
    if p.get("teardown"):
        created = sum(q["expected"].get("register-gateway", 0) for q in d["phases"])
        check(f"{p['name']}: the teardown deletes the {created:g} registered gateways",
              abs(got["deleted"] - created) < 1e-6 and got["teardown"] is True)
check("objectives as in the plan",
      [(o["class"], o.get("max_s")) for o in d["objectives"]][:3] ==
      [(o["class"], float(o["p99"].rstrip("s"))) for o in plan["objectives"][:3]])
check("the '*' error-rate objective is 1%",
      d["objectives"][3]["limit"] == "error-rate" and abs(d["objectives"][3]["value"] - 0.01) < 1e-12)
check("a p99 needs 100 samples (1 / (1 - 0.99))",
      all(o["samples_needed"] == 100 for o in d["objectives"][:3]))
check("target as planned", d["target"]["url"] == plan["target"]["url"] and
      d["target"]["connections"] == plan["target"]["connections"])
check("brakes as planned", len(d["brakes"]) == len(plan["brakes"]))
sys.exit(bad)
PY
# The text and the JSON of check tell the same total.
total_text=$("$SQUALL" check "$PLAN" | sed -n 's/^plan: .*, \([0-9,]*\) requests expected.*/\1/p' | tr -d ,)
total_json=$(/usr/bin/python3 -c 'import json,sys; print(round(json.load(open(sys.argv[1]))["total"]["requests"]))' "$T/check.json")
expect "check's text total ($total_text) is the JSON's ($total_json)" test "$total_text" = "$total_json"
"$SQUALL" check "$T/missing.yaml" --json >"$T/check-bad.out" 2>"$T/check-bad.err"
rc=$?
expect "check --json of a missing plan: exit 2, the error on stderr" \
    bash -c "[ $rc = 2 ] && [ -s '$T/check-bad.err' ]"
expect "and a document on stdout saying valid: false, with the error stderr names" \
    /usr/bin/python3 -c 'import json,sys; d=json.load(open(sys.argv[1])); e=open(sys.argv[2]).read(); assert d["valid"] is False and d["errors"] and d["errors"][0]["message"] in e, d' \
    "$T/check-bad.out" "$T/check-bad.err"

# --- run --json and merge --json, against results.json ---------------------------------------
serve_start || exit 1
cat >"$T/small.yaml" <<YAML
seed: 3
target: {url: "$SERVE_URL", connections: 8}
requests:
  add-gateway: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"model":"t-a"}', creates: true}
  read-site: {kind: list, path: /v1/sites/north/gateways, page: 50}
phases:
  - {name: fill, rate: 40/s, duration: 2s, mix: {add-gateway: 1}}
  - {name: read, rate: 50/s, duration: 2s, mix: {read-site: 1}}
objectives:
  - {class: "*", error-rate: 1%}
YAML
for i in 1 2; do # the second run creates its own objects, at another site
    site=(x north south)
    timeout 60 "$SQUALL" run "$T/small.yaml" -o "$T/run$i" --json --keep \
        --set "requests.add-gateway.path=/v1/sites/${site[$i]}/gateways/gw-{{seq}}" \
        >"$T/run$i.json" 2>"$T/run$i.err"
    rc=$?
    expect "run --json $i exits 0 (got $rc; $(tail -1 "$T/run$i.err"))" test "$rc" = 0
    expect "run --json $i: stdout is one squall-run v1 document" json_doc "$T/run$i.json" squall-run
    expect "run --json $i: the summary table is not on stdout" bash -c "! grep -q '^verdict:' '$T/run$i.json'"
    rcheck "run --json $i: verdict, reasons, exit code and checks are results.json's" \
        "(lambda j: j['run'] == d['sections']['run'] and j['objectives'] == d['sections']['objectives'] and j['exit_code'] == 0 and j['run']['verdict'] == 'pass')(json.load(open('$T/run$i.json')))" "$T/run$i"
done
# (two runs with different --set, not shards of one run: merged with --force)
"$SQUALL" merge "$T/run1" "$T/run2" -o "$T/merged" --json --force >"$T/merge.json" 2>"$T/merge.err"
rc=$?
expect "merge --json exits 0 (got $rc; $(tail -1 "$T/merge.err"))" test "$rc" = 0
expect "merge --json: stdout is one squall-merge v1 document" json_doc "$T/merge.json" squall-merge
/usr/bin/python3 - "$T" <<'PY' || FAILED=1
import json, sys
t = sys.argv[1]
m = json.load(open(f"{t}/merge.json"))
r = json.load(open(f"{t}/merged/results.json"))
ins = [json.load(open(f"{t}/run{i}/results.json")) for i in (1, 2)]
n = sum(c["count"] for d in ins for c in d["cells"])
ok = (m["requests"] == n and m["inputs"] == 2 and m["run"] == r["sections"]["run"]
      and m["objectives"] == r["sections"]["objectives"] and m["cells"] == len(r["cells"]))
print(("ok: " if ok else "FAIL: ") +
      f"merge --json: {m['requests']} requests = the inputs' cells summed ({n}); run and checks as written")
sys.exit(not ok)
PY

# --- cleanup --json: what the two --keep runs left, each object under its fate ----------------
before=$(serve_stats "s['objects']")
"$SQUALL" cleanup "$T/run1" --json >"$T/cleanup.json" 2>"$T/cleanup.err"
rc=$?
expect "cleanup --json exits 0 (got $rc; $(tail -1 "$T/cleanup.err"))" test "$rc" = 0
expect "cleanup --json: stdout is one squall-cleanup v1 document" json_doc "$T/cleanup.json" squall-cleanup
expect "cleanup --json: the text lines went to stderr" grep -q "^cleanup http" "$T/cleanup.err"
after=$(serve_stats "s['objects']")
/usr/bin/python3 - "$T" "$before" "$after" "$SERVE_URL" <<'PY' || FAILED=1
import json, subprocess, sys
t, before, after, url = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
c = json.load(open(f"{t}/cleanup.json"))
made = [json.loads(l)["path"] for l in open(f"{t}/run1/journal.ndjson") if '"created"' in l]
bad = 0


def check(desc, cond):
    global bad
    print(("ok: " if cond else "FAIL: ") + "cleanup --json: " + desc)
    bad |= not cond


check(f"the {len(made)} objects run 1 created are listed as deleted",
      sorted(c["objects"]["deleted"]) == sorted(made) and c["counts"]["deleted"] == len(made))
check("nothing left, failed or not tried",
      not (c["objects"]["left"] or c["objects"]["failed"] or c["objects"]["not_tried"]))
check(f"the target's object count fell by {len(made)} ({before} -> {after})", before - after == len(made))
codes = {subprocess.run(["curl", "-s", "-o", "/dev/null", "-w", "%{http_code}", url + p],
                        capture_output=True, text=True).stdout for p in c["objects"]["deleted"][:5]}
check(f"the target answers 404 for the deleted paths (got {codes})", codes == {"404"})
sys.exit(bad)
PY
"$SQUALL" cleanup "$T/run2" --dry-run --json >"$T/dry.json" 2>"$T/dry.err"
rcheck "cleanup --dry-run --json lists run 2's 80 objects alive and deletes none" \
    "(lambda c: c['dry_run'] and len(c['alive']) == 80 and sorted(a['path'] for a in c['alive']) == sorted(json.loads(l)['path'] for l in open('$T/run2/journal.ndjson') if '\"created\"' in l) and 'counts' not in c)(json.load(open('$T/dry.json')))" "$T/run2"
"$SQUALL" cleanup "$T/run2" >/dev/null 2>&1
exit $FAILED
