# Shared test helper for the engine tests: runs tests/integration/engine_probe and reads its JSON.
#     probe OUTFILE ARGS...     runs the probe (bounded by --max-s 30 and timeout 60)
#     jget OUTFILE EXPR         prints a Python expression over the JSON `d`
#     check DESC PYEXPR OUTFILE prints "ok: DESC" or "FAIL: DESC" with the figures; sets FAILED

PROBE="${BUILDDIR:?}/tests/integration/engine_probe"
FAILED=0

probe() {
    local out=$1
    shift
    if ! timeout 60 "$PROBE" --max-s 30 "$@" >"$out"; then
        echo "FAIL: engine_probe $* exited non-zero; output: $(cat "$out")"
        FAILED=1
        return 1
    fi
}

jget() {
    /usr/bin/python3 -c 'import json, sys
d = json.load(open(sys.argv[1]))
print(eval(sys.argv[2]))' "$1" "$2"
}

check() {
    local desc=$1 expr=$2 out=$3
    if [ "$(jget "$out" "bool($expr)")" = True ]; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc"
        echo "      expected: $expr"
        echo "      figures:  $(cat "$out")"
        FAILED=1
    fi
}
