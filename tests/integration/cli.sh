#!/usr/bin/env bash
# The command line as the README documents it: --help, --version, help COMMAND, every command's
# help, and mistakes answered with one line naming them and the closest valid word, exit 2.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/cli-test"
mkdir -p "$T"

"$SQUALL" --help >"$T/help" 2>&1
expect "squall --help exits 0 and lists every command" \
    bash -c "grep -q '^  check ' '$T/help' && grep -q '^  run ' '$T/help' && grep -q '^  serve ' '$T/help' && grep -q '^  merge ' '$T/help' && grep -q '^  demo ' '$T/help'"
expect "and lists the exit codes 0..6" bash -c "for c in 0 1 2 3 4 5 6; do grep -q \"^  \$c  \" '$T/help' || exit 1; done"
expect "and the cautions" grep -q "staging first" "$T/help"
expect "squall --version prints the version" bash -c "'$SQUALL' --version | grep -Eq '^squall [0-9]+\.[0-9]+\.[0-9]+$'"
for c in $(sed -n 's/^  \([a-z]*\)  .*/\1/p' "$T/help" | sort -u); do
    [ "$c" = "" ] && continue
    "$SQUALL" help "$c" >"$T/help-$c" 2>&1
    rc=$?
    expect "squall help $c exits 0 with its usage line" \
        bash -c "[ $rc = 0 ] && grep -q '^usage: squall $c' '$T/help-$c'"
done

mistake() { # mistake DESC EXPECTED-LINE ARGS...
    local desc=$1 want=$2
    shift 2
    "$SQUALL" "$@" >"$T/out" 2>"$T/err"
    local rc=$? lines
    lines=$(wc -l <"$T/err")
    if [ $rc = 2 ] && [ "$lines" = 1 ] && [ "$(cat "$T/err")" = "$want" ] && [ ! -s "$T/out" ]; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc: exit $rc, stderr:"
        sed 's/^/      /' "$T/err"
        echo "      wanted: $want"
        FAILED=1
    fi
}
mistake "an unknown command names the closest one" \
    "squall: error: unknown command 'chek'; did you mean 'check'? (see 'squall --help')" chek
mistake "an unknown option names the closest one" \
    "squall: error: run: unknown option '--quite'; did you mean '--quiet'? (see 'squall help run')" \
    run plan.yaml --quite
mistake "a misspelt option with a value too" \
    "squall: error: check: unknown option '--sett'; did you mean '--set'? (see 'squall help check')" \
    check plan.yaml --sett=a=b
mistake "an option missing its value" \
    "squall: error: run: option '--out' needs a value (DIR) (see 'squall help run')" run plan.yaml --out
mistake "a command without its plan" \
    "squall: error: run: which plan? (expected PLAN.yaml) (see 'squall help run')" run
mistake "help for an unknown command" \
    "squall: error: unknown command 'mrege'; did you mean 'merge'? (see 'squall --help')" help mrege
exit $FAILED
