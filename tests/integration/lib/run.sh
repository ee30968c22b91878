# Shared test helper for `squall run` tests: write a plan, run it, read results.json.
#     run_plan OUT PLAN [ARGS...]   runs `$SQUALL run PLAN -o OUT --quiet ARGS` bounded by
#                                   timeout 120; sets RUN_RC
#     rget OUT EXPR                 prints a Python expression over results.json as `d`, with
#                                   cell(phase, cls, outcome) -> the cell dict (or {}) and
#                                   total(cls, outcome=None) -> summed count over phases
#     rcheck DESC PYEXPR OUT        "ok: DESC" or "FAIL: DESC" with figures; sets FAILED
FAILED=${FAILED:-0}

run_plan() {
    local out=$1 plan=$2
    shift 2
    rm -rf "$out"
    timeout 120 "$SQUALL" run "$plan" -o "$out" --quiet "$@" >"$out.stdout" 2>"$out.stderr"
    RUN_RC=$?
}

_rpy='import json, re, sys
d = json.load(open(sys.argv[1] + "/results.json"))
def cell(phase, cls, outcome):
    for c in d["cells"]:
        if c["phase"] == phase and c["class"] == cls and c["outcome"] == outcome:
            return c
    return {}
def total(cls, outcome=None):
    return sum(c["count"] for c in d["cells"]
               if c["class"] == cls and (outcome is None or c["outcome"] == outcome))
def ms(c, metric, key):
    return c["summary"][metric][key] / 1e6
'

rget() {
    /usr/bin/python3 -c "$_rpy
print(eval(sys.argv[2]))" "$1" "$2"
}

rcheck() {
    local desc=$1 expr=$2 out=$3
    if [ "$(rget "$out" "bool($expr)" 2>&1)" = True ]; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc"
        echo "      expected: $expr"
        echo "      exit code: ${RUN_RC:-?}; stderr: $(tail -3 "$out.stderr" 2>/dev/null)"
        /usr/bin/python3 -c "$_rpy
for c in d['cells']:
    print('      cell', c['phase'], c['class'], c['outcome'], c['count'],
          {m: {k: v for k, v in s.items() if k in ('p50', 'p90', 'p99', 'max')}
           for m, s in c['summary'].items() if m in ('response', 'service')})" "$out" 2>&1 | head -20
        FAILED=1
    fi
}

# expect DESC CONDITION-as-shell-test: a plain assertion on shell values.
expect() {
    local desc=$1
    shift
    if "$@"; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc ($*)"
        FAILED=1
    fi
}

# expect_rc DESC OUT CODE...: the last run's exit code ($RUN_RC) is one of CODE...; on a mismatch
# it prints the verdict's reasons from OUT/results.json and the end of OUT.stderr, so that a
# failure read from a CI log says why the run ended as it did.
expect_rc() {
    local desc=$1 out=$2 c
    shift 2
    for c in "$@"; do
        if [ "${RUN_RC:-}" = "$c" ]; then
            echo "ok: $desc"
            return
        fi
    done
    echo "FAIL: $desc (exit ${RUN_RC:-?}, wanted $*)"
    /usr/bin/python3 -c '
import json, sys
try:
    r = json.load(open(sys.argv[1] + "/results.json"))["sections"]["run"]
    for why in r.get("reasons") or []:
        print("      why:", why)
except (OSError, KeyError, ValueError) as e:
    print("      no results.json to say why:", e)' "$out" 2>&1 | head -8
    tail -3 "$out.stderr" 2>/dev/null | sed 's/^/      stderr: /'
    FAILED=1
}
