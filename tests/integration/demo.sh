#!/usr/bin/env bash
# The README's demo: `squall demo` starts the embedded target on a free loopback port, runs
# scenarios/demo.yaml against it and stops it. Every class of the plan must have run, with the
# counts the plan's own arithmetic gives: computed below from the plan file (read with PyYAML,
# Debian python3-yaml), not copied from a run.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/target.sh"
T="$BUILDDIR/demo-test"
PLAN="$SRCDIR/scenarios/demo.yaml"
rm -rf "$T"
mkdir -p "$T"
timeout 120 "$SQUALL" demo -o "$T/out" >"$T/out.stdout" 2>"$T/out.stderr"
RUN_RC=$?
expect_rc "squall demo exits 0 (got $RUN_RC)" "$T/out" 0

/usr/bin/python3 - "$PLAN" "$T/out" "$T/out.stdout" <<'PY' || FAILED=1
import json, math, re, sys
import yaml

plan = yaml.safe_load(open(sys.argv[1]))
d = json.load(open(sys.argv[2] + "/results.json"))
summary = open(sys.argv[3]).read()
bad = 0


def check(desc, cond):
    global bad
    print(("ok: " if cond else "FAIL: ") + desc)
    bad |= not cond


def secs(text):  # the plan's durations here are whole seconds like "5s"
    m = re.fullmatch(r"(\d+)s", text)
    assert m, text
    return int(m.group(1))


def per_s(text):  # rates like "100/s"
    m = re.fullmatch(r"(\d+)/s", text)
    assert m, text
    return int(m.group(1))


cells = {}
for c in d["cells"]:
    cells.setdefault((c["phase"], c["class"]), {})[c["outcome"]] = c["count"]
ph = {p["name"]: p for p in plan["phases"]}
want_exact, want_poisson = {}, {}

# fill: an even ramp makes ceil(integral of the rate) starts: (from + to) / 2 x duration.
fill = ph["fill"]
n = (per_s(fill["ramp"]["from"]) + per_s(fill["ramp"]["to"])) / 2 * secs(fill["duration"])
(cls,) = fill["mix"]
want_exact[("fill", cls)] = math.ceil(n)
created = math.ceil(n)

# steady: Poisson arrivals at rate x duration; a class with share w / sum(w) of the mix gets a
# Poisson count of mean rate x duration x share (thinning a Poisson process), accepted within
# 4 standard deviations (sqrt of the mean; common practice, as in tests/unit/test_sched.c).
# A pick of a list class is one whole list: its count is that of CLASS/all-pages.
st = ph["steady"]
assert st["arrivals"] == "poisson"
lam = per_s(st["rate"]) * secs(st["duration"])
total_w = sum(st["mix"].values())
kind = {name: r["kind"] for name, r in plan["requests"].items()}
for cls, w in st["mix"].items():
    key = cls + "/all-pages" if kind[cls] == "list" else cls
    want_poisson[("steady", key)] = lam * w / total_w

# A list walks ceil(objects / page) pages (the embedded target sends no continuation token with
# the last page): the fill's gateways, all alive during steady.
page = plan["requests"]["list-gateways"]["page"]
pages = math.ceil(created / page)

# rush: an aligned fleet fires every agent at each wall-clock multiple of `every`; a phase
# whose duration is a multiple of `every` holds exactly duration / every ticks.
rush = ph["rush"]["fleet"]
dur, every = secs(ph["rush"]["duration"]), secs(rush["every"])
assert dur % every == 0 and rush["timing"] == "aligned"
want_exact[("rush", rush["send"])] = rush["agents"] * dur // every

# Every object the run created is torn down: the fill's gateways (creates: true) and the leases
# the renew classes' PUTs created (answered 201 Created; RFC 9110, 15.3.2), which the journal
# lists: one per agent of the rush (renew-agent) and one per gateway renew picked in steady.
leases = set()
for line in open(sys.argv[2] + "/journal.ndjson"):
    r = json.loads(line)
    if r.get("op") == "created" and r["class"] in ("renew", "renew-agent"):
        leases.add(r["path"])
rush_leases = {p for p in leases if p.startswith("/v1/leases/agent-")}
check("the journal holds one lease per rush agent (%d of %d) and at most one per gateway (%d of %d)"
      % (len(rush_leases), ph["rush"]["fleet"]["agents"], len(leases - rush_leases),
         plan["vars"]["gateway"]["to"] + 1),
      len(rush_leases) == ph["rush"]["fleet"]["agents"]
      and 0 < len(leases - rush_leases) <= plan["vars"]["gateway"]["to"] + 1)
want_exact[("teardown", "teardown")] = created + len(leases)

for key, n in want_exact.items():
    got = cells.get(key, {})
    check("%s %s: %d requests, all 2xx (got %s)" % (key + (n, got)),
          got == {"2xx": n})
for key, mean in want_poisson.items():
    got = cells.get(key, {})
    lo, hi = mean - 4 * math.sqrt(mean), mean + 4 * math.sqrt(mean)
    check("%s %s: Poisson count of mean %g within [%.0f, %.0f], all 2xx (got %s)"
          % (key + (mean, lo, hi, got)), set(got) == {"2xx"} and lo <= got["2xx"] <= hi)
steady_all = sum(sum(cells.get(k, {}).values()) for k in want_poisson)
lo, hi = lam - 4 * math.sqrt(lam), lam + 4 * math.sqrt(lam)
check("steady: %d requests in all, within [%.0f, %.0f] of mean %d" % (steady_all, lo, hi, lam),
      lo <= steady_all <= hi)
lists = cells.get(("steady", "list-gateways/all-pages"), {})
check("every list of %d gateways walked %d pages of %d: pages = %d x lists (%s, %s)"
      % (created, pages, page, pages, cells.get(("steady", "list-gateways")), lists),
      set(lists) == {"2xx"}
      and cells.get(("steady", "list-gateways")) == {"2xx": pages * lists["2xx"]})
expected_keys = set(want_exact) | set(want_poisson) | {("steady", "list-gateways")}
check("no other cells: %s" % sorted(set(cells) - expected_keys), set(cells) == expected_keys)
lc = d["sections"]["lifecycle"]
check("the lifecycle section agrees: %d created (%d by other writes), all deleted by teardown"
      % (created + len(leases), len(leases)),
      lc["created"] == created + len(leases) and lc["created_by_other_writes"] == len(leases)
      and lc["teardown"]["deleted"] == created + len(leases) and lc["teardown"]["left"] == 0
      and lc["teardown"]["not_tried"] == 0)
check("the run's verdict is PASS with no reasons", d["sections"]["run"]["verdict"] == "pass"
      and d["sections"]["run"]["reasons"] == [] and d["sections"]["run"]["exit_code"] == 0)
for (phase, cls), got in sorted(cells.items()):
    if phase == "teardown":
        continue
    check("the summary table has %s %s with %d requests" % (phase, cls, got["2xx"]),
          re.search(r"^%s +%s +%d " % (re.escape(phase), re.escape(cls), got["2xx"]), summary,
                    re.M) is not None)
sys.exit(bad)
PY
TPID=$(sed -n 's/.*embedded target listens on .* (pid \([0-9]*\)).*/\1/p' "$T/out.stderr")
expect "the demo named its target's pid ($TPID)" test -n "$TPID"
expect "and stopped that target when it was done" bash -c "! kill -0 ${TPID:-0} 2>/dev/null"

# demo takes run's options, as the README says: --set scales the plan (steady at 20/s is 200
# requests in 10 s, Poisson: within 4 standard deviations, 200 +- 57) and --keep leaves what the
# run created, listed by the journal for `squall cleanup`. At 20/s the renew and list classes get
# far fewer than the 100 samples their p99 objectives need: the run is INCONCLUSIVE (exit 7,
# README "Exit codes") and says how many each had.
timeout 120 "$SQUALL" demo -o "$T/kept" -q --set phases.steady.rate=20/s --keep \
    >"$T/kept.stdout" 2>"$T/kept.stderr"
RC=$?
expect "demo --set --keep is accepted and, with too few samples, exits 7 (got $RC: $(head -2 "$T/kept.stderr"))" \
    test "$RC" = 7
rcheck "its reasons name the class, how many samples it had and that it needs 100" \
    "d['sections']['run']['verdict'] == 'inconclusive' and
     any(re.match(r'renew in steady: p99 of response <= 1s: too few samples to resolve it \\(had \\d+, needs 100\\)', r)
         for r in d['sections']['run']['reasons'])" "$T/kept"
rcheck "--set phases.steady.rate=20/s: the steady phase started 200 +- 57 (a list counts once)" \
    "143 <= sum(c['count'] for c in d['cells'] if c['phase'] == 'steady' and
               c['class'] in ('read-gateway', 'renew', 'list-gateways/all-pages')) <= 257" \
    "$T/kept"
rcheck "--keep: everything created was kept (150 gateways and the leases), none deleted" \
    "d['sections']['lifecycle']['teardown']['kept'] and d['sections']['lifecycle']['teardown']['deleted'] == 0 and
     d['sections']['lifecycle']['teardown']['objects'] == d['sections']['lifecycle']['created'] > 150" "$T/kept"
CREATED=$(rget "$T/kept" "d['sections']['lifecycle']['created']")
ALIVE=$("$SQUALL" cleanup --dry-run "$T/kept" 2>/dev/null | grep -c '^/v1/')
expect "the journal lists all $CREATED kept objects for cleanup (lists $ALIVE)" test "$ALIVE" = "$CREATED"

# The demo plan with --keep, then `squall cleanup`, against a target this test keeps running:
# the target holds exactly the objects it held before (its own /stats count), 3 of them put
# there first, which the run must not touch.
serve_start || exit 1
for g in pre-1 pre-2 pre-3; do
    curl -s -X PUT -d '{"site":"north"}' "$SERVE_URL/v1/sites/north/gateways/$g" >/dev/null
done
BEFORE=$(serve_stats 's["objects"]')
run_plan "$T/keep-run" "$PLAN" --set "target.url=$SERVE_URL" --keep
DURING=$(serve_stats 's["objects"]')
"$SQUALL" cleanup "$T/keep-run" >"$T/keep-cleanup.out" 2>&1
CRC=$?
AFTER=$(serve_stats 's["objects"]')
serve_stop
expect "the target held $BEFORE objects before the run ($BEFORE = 3)" test "$BEFORE" = 3
expect "the kept run left objects on it ($DURING > $BEFORE)" test "$DURING" -gt "$BEFORE"
expect "cleanup exits 0 (got $CRC)" test "$CRC" = 0
expect "after cleanup the target holds exactly what it held before ($AFTER = $BEFORE objects)" \
    test "$AFTER" = "$BEFORE"
expect "cleanup said it deleted the $((DURING - BEFORE)) objects: $(head -c 300 "$T/keep-cleanup.out")" \
    grep -q "$((DURING - BEFORE)) objects: $((DURING - BEFORE)) deleted" "$T/keep-cleanup.out"
exit $FAILED
