#!/usr/bin/env bash
# Shards that split the work exactly: one plan with every kind of source (even open-loop reads
# and creates, a Poisson class, an aligned fleet, a watch set, closed-loop clients, churn and the
# run's own teardown) runs once as one process against a fresh embedded target, then as four
# shards in parallel (`--shard i/4`, the same plan and seed) against another fresh one. Checked
# against what the targets themselves saw (their /stats and their own access logs,
# `squall serve --access-log`, Common Log Format), not against squall's own figures:
#   - deterministic sources (even arrivals and their class picks, fleet renewals and the agents'
#     own watches, closed-loop requests, churn creates and deletes, teardown deletes, watch
#     streams opened): the four shards' requests equal the single run's exactly, method by
#     method and path by path;
#   - the Poisson class: a Poisson count has variance equal to its mean, and a superposition of
#     independent Poisson processes is Poisson with the summed rate (common practice): the
#     shards' total within 4 standard deviations of the planned mean rate x duration;
#   - no object name or agent path sent by two shards: every agent path is hit as often as in
#     the single run (a path two shards sent would be hit twice as often), every created name
#     created once, the shards' journals hold disjoint paths;
#   - each shard tore down what it created: the target holds only the objects the test put
#     there before the run (the reads find them);
#   - `squall check --shard i/4`: the four shards' expected counts add up to `check`'s;
#   - bad --shard values are refused with one line (exit 2) and send nothing.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/shards-split"
rm -rf "$T"
mkdir -p "$T"
POISSON_RATE=100
POISSON_S=3

plan() {
    cat >"$1" <<YAML
seed: 11
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
target: {url: "$2", connections: 32, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  make: {kind: write, method: PUT, path: "/v1/sites/north/made/m-{{seq}}", body: '{"n":1}', creates: true}
  roam: {kind: get, path: /v1/sites/south/gateways/gw-2}
  beat: {kind: write, method: PUT, path: "/v1/sites/north/leases/gw-{{agent}}", body: '{"stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/sites/north/leases?watch=1"}
  mine: {kind: watch, path: "/v1/sites/north/own/o-{{agent}}?watch=1"}
  add: {kind: write, method: PUT, path: "/v1/sites/west/turn/t-{{seq}}", body: '{"n":1}', creates: true}
  drop: {kind: write, method: DELETE, path: "/{{pick:add,path}}", deletes: true}
  ask: {kind: get, path: "/v1/sites/east/clients/c-{{agent}}"}
phases:
  - {name: steady, duration: 4s, rate: 40/s, mix: {read: 3, make: 1},
     fleet: {agents: 9, every: 1s, timing: aligned, send: beat, watch: mine}, watches: {follow: 6}}
  - {name: wander, duration: ${POISSON_S}s, rate: ${POISSON_RATE}/s, arrivals: poisson, mix: {roam: 1},
     churn: {create: add, delete: drop, rate: 20/s, population: 8}}
  - {name: askers, duration: 2500ms, clients: {count: 7, think: 1s}, mix: {ask: 1}}
YAML
}

# seed_store: the objects the reads find (so that they answer 200, not 404s the default brakes
# would stop on); the run must leave exactly these
SEEDED=9
seed_store() {
    local p
    for p in north/gateways/gw-1 south/gateways/gw-2 $(seq -f 'east/clients/c-%g' 0 6); do
        curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/$p" >/dev/null
    done
}

# after_run NAME: the target's /stats and access log of one run, into $T/NAME.*
after_run() {
    curl -s "$SERVE_URL/stats" >"$T/$1.stats"
    serve_stop
    cp "$T/$1.access" "$T/$1.access.done"
}

# --- one process --------------------------------------------------------------------------------
serve_start --access-log "$T/single.access" || exit 1
seed_store
plan "$T/single.yaml" "$SERVE_URL"
run_plan "$T/single" "$T/single.yaml"
SINGLE_RC=$RUN_RC
after_run single

# --- four shards in parallel, the same plan ------------------------------------------------------
serve_start --access-log "$T/shards.access" || exit 1
seed_store
plan "$T/shards.yaml" "$SERVE_URL"
pids=()
for i in 1 2 3 4; do
    timeout 120 "$SQUALL" run "$T/shards.yaml" -o "$T/shard-$i" --shard "$i/4" --quiet \
        >"$T/shard-$i.out" 2>&1 &
    pids+=($!)
done
SH_RC=""
for p in "${pids[@]}"; do
    wait "$p"
    SH_RC="$SH_RC$?"
done
after_run shards

expect "the single run exits 0 (got $SINGLE_RC; $(tail -2 "$T/single.stderr" | tr '\n' ' '))" \
    test "$SINGLE_RC" = 0
expect "the four shards exit 0 (got $SH_RC)" test "$SH_RC" = 0000

/usr/bin/python3 - "$T" "$POISSON_RATE" "$POISSON_S" "$SEEDED" <<'PY'
import collections, json, math, re, sys
T, rate, secs, seeded = sys.argv[1], float(sys.argv[2]), float(sys.argv[3]), int(sys.argv[4])
failed = False
def check(ok, what):
    global failed
    print(("ok: " if ok else "FAIL: ") + what)
    failed |= not ok

# Common Log Format request lines: "METHOD PATH HTTP/x" STATUS (squall serve writes one line per
# request at its end, as nginx does).
line_re = re.compile(r'"(\S+) (\S+) HTTP/[0-9.]+" (\d{3})')
def access(name):
    reqs = collections.Counter()
    for line in open(f"{T}/{name}.access.done"):
        m = line_re.search(line)
        if m:
            reqs[(m.group(1), m.group(2).split("?")[0], m.group(3))] += 1
    return reqs
one, four = access("single"), access("shards")
stats = {n: json.load(open(f"{T}/{n}.stats")) for n in ("single", "shards")}

def by(reqs, pred):
    return collections.Counter({k: v for k, v in reqs.items() if pred(k)})
det = [
    ("even reads", lambda k: k[1] == "/v1/sites/north/gateways/gw-1"),
    ("fleet renewals, per agent path", lambda k: k[1].startswith("/v1/sites/north/leases/gw-")),
    ("closed-loop requests, per client path", lambda k: k[1].startswith("/v1/sites/east/clients/")),
    ("watch streams opened", lambda k: k[1] == "/v1/sites/north/leases"),
    ("fleet agents' own watches, per agent path", lambda k: k[1].startswith("/v1/sites/north/own/")),
]
for what, pred in det:
    a, b = by(one, pred), by(four, pred)
    check(a == b and sum(a.values()) > 0,
          f"{what}: the shards sent exactly what one process sent ({sum(b.values())} = "
          f"{sum(a.values())} requests over {len(b)} = {len(a)} method/path/status keys)")

# Creates by even arrivals (the class picks are dealt too) and churn: counts equal exactly, every
# name created once; deletes equal (churn's and the teardown's).
for what, prefix in (("even creates", "/v1/sites/north/made/"), ("churn", "/v1/sites/west/turn/")):
    for n, reqs in (("single", one), ("shards", four)):
        made = [k[1] for k, v in reqs.items() if k[0] == "PUT" and k[1].startswith(prefix)
                for _ in range(v)]
        if n == "single":
            base = len(made)
        check(len(made) == len(set(made)) and len(made) > 0,
              f"{what} ({n}): {len(made)} names, each created once")
    got = sum(v for k, v in four.items() if k[0] == "PUT" and k[1].startswith(prefix))
    check(got == base, f"{what}: the shards created {got} objects, one process {base}")
    dels = [sum(v for k, v in r.items() if k[0] == "DELETE" and k[1].startswith(prefix))
            for r in (one, four)]
    check(dels[0] == dels[1] and dels[0] == base,
          f"{what}: deleted alike (churn and teardown: {dels[1]} = {dels[0]}, all {base} created)")
churn_names = lambda r: {k[1] for k in r if k[0] == "PUT" and k[1].startswith("/v1/sites/west/turn/")}
check(churn_names(one) == churn_names(four),
      f"churn names ({{{{seq}}}} dealt I-1 mod 4): the shards' union is the single run's "
      f"{len(churn_names(one))} names")

# Poisson: the shards' superposition against the planned mean rate x duration.
mean = rate * secs
for n, reqs in (("single", one), ("shards", four)):
    got = sum(v for k, v in reqs.items() if k[1] == "/v1/sites/south/gateways/gw-2")
    check(abs(got - mean) <= 4 * math.sqrt(mean),
          f"Poisson class ({n}): {got} within 4 sd ({4 * math.sqrt(mean):.1f}) of {mean:.0f}")

# Journals: each shard holds only its own creations, disjoint, their union the target's 201s.
paths = []
for i in range(1, 5):
    p = set()
    for line in open(f"{T}/shard-{i}/journal.ndjson"):
        e = json.loads(line)
        if e.get("op") == "created":
            p.add(e["path"].split("?")[0])
    paths.append(p)
union = set().union(*paths)
check(sum(len(p) for p in paths) == len(union), "the shards' journals hold disjoint paths ("
      + " + ".join(str(len(p)) for p in paths) + f" = {len(union)})")
created = {k[1] for k, v in four.items() if k[2] == "201" and "/made/" in k[1] or
           k[2] == "201" and ("/turn/" in k[1] or "/leases/" in k[1])}
check(union == created, f"... and together every object the target created ({len(created)})")

# The one model of "how many starts": series.csv's planned column, summed over the run per phase
# and class, is the shards' share (their four add up to the single run's).
import csv
def planned(path):
    out = collections.Counter()
    for row in csv.DictReader(open(path)):
        if row["planned"] not in ("", "nan"):
            out[(row["phase"], row["class"])] += float(row["planned"])
    return out
p1 = planned(f"{T}/single/series.csv")
p4 = collections.Counter()
for i in range(1, 5):
    p4.update(planned(f"{T}/shard-{i}/series.csv"))
check(set(p1) == set(p4) and all(abs(p1[k] - p4[k]) < 0.01 for k in p1),
      "series.csv planned: the shards' shares add up to the single run's per phase and class ("
      + ", ".join(f"{k[1]} {p4[k]:.0f}" for k in sorted(p1)) + ")")

# Everything torn down; the target's own counters agree.
for n in ("single", "shards"):
    s = stats[n]
    check(s["objects"] == seeded,
          f"{n}: everything the run created is torn down: the target holds the {seeded} objects "
          f"put there before it ({s['objects']})")
check(stats["single"]["store"]["creates"] == stats["shards"]["store"]["creates"]
      and stats["single"]["store"]["creates"] == stats["shards"]["store"]["deletes"] + seeded
      and stats["single"]["store"]["deletes"] == stats["shards"]["store"]["deletes"]
      and stats["single"]["streams"]["opened"] == stats["shards"]["streams"]["opened"] == 6 + 9,
      "target /stats: creates, deletes and watch streams opened equal "
      f"({stats['shards']['store']['creates']}, {stats['shards']['store']['deletes']}, "
      f"{stats['shards']['streams']['opened']})")
sys.exit(1 if failed else 0)
PY
[ $? -eq 0 ] || FAILED=1

# Results record the shard, the base seed and the shard's own seed.
rcheck "shard 3's results: shard 3 of 4, seed 11 and a shard seed of its own" \
    "d['meta']['shard'] == {'index': 3, 'count': 4} and d['sections']['run']['seed'] == 11
     and d['sections']['run']['shard_seed'] not in (11, None)" "$T/shard-3"

# --- check --shard: the shards' expected counts add up to the whole plan's ----------------------
"$SQUALL" check "$T/shards.yaml" --json >"$T/check.json" 2>/dev/null
for i in 1 2 3 4; do
    "$SQUALL" check "$T/shards.yaml" --json --shard "$i/4" >"$T/check-$i.json" 2>/dev/null
done
/usr/bin/python3 - "$T" <<'PY'
import json, sys
T = sys.argv[1]
whole = json.load(open(f"{T}/check.json"))
parts = [json.load(open(f"{T}/check-{i}.json")) for i in range(1, 5)]
def per_class(d):
    out = {}
    for ph in d["phases"]:
        for c, v in ph["expected"].items() if isinstance(ph["expected"], dict) else []:
            out[(ph["name"], c)] = out.get((ph["name"], c), 0) + v
    return out
w = per_class(whole)
s = {}
for p in parts:
    for k, v in per_class(p).items():
        s[k] = s.get(k, 0) + v
ok = w and set(w) == set(s) and all(abs(w[k] - s[k]) < 1e-6 for k in w)
tot = sum(p["total"]["requests"] for p in parts)
ok = ok and abs(tot - whole["total"]["requests"]) < 1e-6
print(("ok: " if ok else "FAIL: ") + f"check --shard i/4: per phase and class the four shards' "
      f"expected counts add up to check's ({tot:.1f} = {whole['total']['requests']:.1f} requests; "
      f"{len(w)} phase/class figures)")
if not ok:
    print({k: (w.get(k), s.get(k)) for k in set(w) | set(s)})
sys.exit(0 if ok else 1)
PY
[ $? -eq 0 ] || FAILED=1
"$SQUALL" check "$T/shards.yaml" --shard 2/4 >"$T/check-2.txt" 2>&1
expect "check --shard says the figures are the shard's" grep -q "shard    2 of 4" "$T/check-2.txt"

# --- bad input: one clear line, exit 2, nothing sent --------------------------------------------
serve_start || exit 1
plan "$T/bad.yaml" "$SERVE_URL"
for bad in 5/4 0/4 1/0 2/-1 x/4 3 "" 1/2/3; do
    timeout 20 "$SQUALL" run "$T/bad.yaml" -o "$T/bad" --shard "$bad" --quiet >"$T/bad.out" 2>&1
    rc=$?
    expect "--shard '$bad' is refused: exit 2, one line ($rc: $(head -1 "$T/bad.out"))" \
        test "$rc" = 2 -a "$(grep -c . "$T/bad.out")" = 1
done
expect "... naming what is wrong (5/4: I within 1..N)" \
    sh -c "'$SQUALL' run '$T/bad.yaml' --shard 5/4 2>&1 | grep -q 'I must be within 1..N'"
SENT=$(serve_stats 'sum(sum(v.values()) for v in s["requests"].values())')
expect "the target received nothing from the refused runs (got $SENT)" test "$SENT" = 0
serve_stop

# --- replay by client identity: 2 shards, one after the other, against one process -------------
# A Common Log Format log (user field = client identity) of six gateways, four requests each over
# two seconds; each request names its client and its place in the client's order.
for sec in 0 1; do
    for n in 0 1; do
        for g in a b c d e f; do
            k=$((2 * sec + n))
            echo "127.0.0.1 - gw-$g [02/Dec/2026:10:00:0$sec +0000] \"GET /v1/sites/south/gateways/gw-2?who=gw-$g&n=$k HTTP/1.1\" 200 12"
        done
    done
done >"$T/day.log"
cat >"$T/replay.yaml" <<YAML
seed: 11
accept: [generator-bound] # as above
target: {url: "http://127.0.0.1:9", connections: 8, timeout: 5s} # --set per run
phases:
  - {name: again, replay: {log: day.log, speed: 4}}
YAML
# Each run against a fresh target with its own access log (the target writes a line at each
# request's end and flushes on exit).
for who in single 1/2 2/2; do
    name=replay-${who/\//-}
    serve_start --access-log "$T/$name.access" || exit 1
    seed_store
    if [ "$who" = single ]; then extra=(); else extra=(--shard "$who"); fi
    run_plan "$T/$name" "$T/replay.yaml" --set "target.url=$SERVE_URL" "${extra[@]}"
    expect "replay ($who) exits 0 (got $RUN_RC; $(tail -1 "$T/$name.stderr"))" test "$RUN_RC" = 0
    after_run "$name"
done
/usr/bin/python3 - "$T" <<'PY'
import functools, re, sys
T = sys.argv[1]
def sent(name):
    return [re.search(r"who=(gw-\w)&n=(\d)", l).groups()
            for l in open(f"{T}/{name}.access.done") if "who=" in l]
one, s1, s2 = sent("replay-single"), sent("replay-1-2"), sent("replay-2-2")
# FNV-1a 64 written out again here (the published algorithm), not squall's.
fnv = lambda s: functools.reduce(lambda h, b: ((h ^ b) * 0x100000001b3) % (1 << 64), s.encode(),
                                 0xcbf29ce484222325)
ok = sorted(one) == sorted(s1 + s2) and len(one) == 24
print(("ok: " if ok else "FAIL: ") + f"replay: the two shards sent the single run's 24 requests "
      f"({len(s1)} + {len(s2)} = {len(one)})")
bad = not ok
for i, part in ((1, s1), (2, s2)):
    clients = {c for c, _ in part}
    want = {c for c, _ in one if fnv(c) % 2 == i - 1}
    order = all([int(n) for c2, n in part if c2 == c] == [0, 1, 2, 3] for c in clients)
    good = bool(clients) and clients == want and order
    print(("ok: " if good else "FAIL: ") + f"replay shard {i}/2 sent all of, and only, the clients "
          f"with FNV-1a mod 2 = {i - 1} ({', '.join(sorted(clients))}), each in recorded order")
    bad |= not good
sys.exit(1 if bad else 0)
PY
[ $? -eq 0 ] || FAILED=1
rcheck "shard 2/2's replay section counts the other shard's requests (other_shards 12)" \
    "d['sections']['replay']['again']['other_shards'] == 12" "$T/replay-2-2"

[ "$FAILED" = 0 ] && echo "shards-split: all checks passed"
exit "$FAILED"
