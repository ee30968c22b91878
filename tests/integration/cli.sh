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
expect "squall version, --version and -V print the same line" \
    bash -c "v=\$('$SQUALL' version) && [ \"\$('$SQUALL' --version)\" = \"\$v\" ] && [ \"\$('$SQUALL' -V)\" = \"\$v\" ]"
"$SQUALL" >"$T/bare.out" 2>"$T/bare.err"
expect "squall without a command exits 2 with the overview on stderr, nothing on stdout" \
    bash -c "[ $? = 2 ] && [ ! -s '$T/bare.out' ] && grep -q '^commands:' '$T/bare.err'"
for c in $(sed -n 's/^  \([a-z]*\)  .*/\1/p' "$T/help" | sort -u); do
    [ "$c" = "" ] && continue
    "$SQUALL" help "$c" >"$T/help-$c" 2>&1
    rc=$?
    expect "squall help $c exits 0 with its usage line" \
        bash -c "[ $rc = 0 ] && grep -q '^usage: squall $c' '$T/help-$c'"
done

# judge DESC EXPECTED-LINE RC: the command that just ran wrote exactly that one line to stderr,
# nothing to stdout, and exited 2.
judge() {
    local desc=$1 want=$2 rc=$3 lines
    lines=$(wc -l <"$T/err")
    if [ "$rc" = 2 ] && [ "$lines" = 1 ] && [ "$(cat "$T/err")" = "$want" ] && [ ! -s "$T/out" ]; then
        echo "ok: $desc"
    else
        echo "FAIL: $desc: exit $rc, stderr:"
        sed 's/^/      /' "$T/err"
        echo "      wanted: $want"
        FAILED=1
    fi
}
mistake() { # mistake DESC EXPECTED-LINE ARGS...
    local desc=$1 want=$2
    shift 2
    "$SQUALL" "$@" >"$T/out" 2>"$T/err"
    judge "$desc" "$want" $?
}
# serve_mistake DESC EXPECTED-LINE ARGS...: `squall serve --listen 127.0.0.1:0 ARGS`, which must
# refuse the options; a serve that starts anyway is stopped by pid after 5 s and fails the test.
serve_mistake() {
    local desc=$1 want=$2 pid i
    shift 2
    "$SQUALL" serve --listen 127.0.0.1:0 "$@" >"$T/out" 2>"$T/err" &
    pid=$!
    for i in $(seq 50); do
        kill -0 "$pid" 2>/dev/null || break
        sleep 0.1
    done
    if kill -0 "$pid" 2>/dev/null; then
        kill "$pid"
        wait "$pid"
        echo "FAIL: $desc: serve started instead of refusing $*"
        FAILED=1
        return
    fi
    wait "$pid"
    judge "$desc" "$want" $?
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
mistake "completion for a shell it does not write" \
    "squall: error: completion: unknown shell 'fish' (expected bash or zsh) (see 'squall help completion')" completion fish
mistake "version takes no arguments" \
    "squall: error: version: takes no arguments, got 'x' (see 'squall help version')" version x
mistake "a command without its plan" \
    "squall: error: run: which plan? (expected PLAN.yaml) (see 'squall help run')" run
mistake "help for an unknown command" \
    "squall: error: unknown command 'mrege'; did you mean 'merge'? (see 'squall --help')" help mrege

# squall serve: every bad option value is one line that names the option, what it needs and what
# it got, with the help hint once. Durations are the plan's (2m15s, 1m30s), also inside --delay.
H="(see 'squall help serve')"
serve_mistake "serve: a bad --delay" \
    "squall: error: serve: --delay needs one of none, fixed:D, uniform:A..B (A <= B) or exp:MEAN with durations like 50ms, got 'bogus' $H" \
    --delay bogus
serve_mistake "serve: a uniform delay whose ends are swapped" \
    "squall: error: serve: --delay needs one of none, fixed:D, uniform:A..B (A <= B) or exp:MEAN with durations like 50ms, got 'uniform:1m30s..10ms' $H" \
    --delay uniform:1m30s..10ms
serve_mistake "serve: a bad duration" \
    "squall: error: serve: --stall-at needs a duration like 250ms, 1.5s, 5m or 1h, got 'x' $H" \
    --stall-at x
serve_mistake "serve: a duration without its unit" \
    "squall: error: serve: --drop-watches-at needs a duration like 250ms, 1.5s, 5m or 1h, got '2m15' $H" \
    --drop-watches-at 2m15
serve_mistake "serve: --stall-at 1m30s is read, and needs --stall-for" \
    "squall: error: serve: --stall-at needs --stall-for (its length) $H" --stall-at 1m30s
serve_mistake "serve: a fail rate out of range" \
    "squall: error: serve: --fail-rate needs a number in [0, 1], got '1.5' $H" --fail-rate 1.5
serve_mistake "serve: a status it cannot inject" \
    "squall: error: serve: --fail-status needs 503 or 429, got '500' $H" --fail-status 500
serve_mistake "serve: a count that is not a whole number" \
    "squall: error: serve: --max-inflight needs a whole number in 0..1000000, got '2.5' $H" \
    --max-inflight 2.5
serve_mistake "serve: a bad listen address" \
    "squall: error: serve: --listen needs ADDR:PORT (127.0.0.1:7070, [::1]:7070 or :7070), got 'nowhere' $H" \
    --listen nowhere
exit $FAILED
