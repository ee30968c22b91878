# Shared checks of an installed squall (meson install, the .deb): source after run.sh.
#     installed_checks BIN DATADIR COMPLETION MANPATH SCRATCH ZSHDIR
# BIN the installed binary; DATADIR where its scenarios must be (…/share/squall); COMPLETION the
# installed bash completion file; MANPATH the man hierarchy holding squall(1) and
# squall-plan(5) ("" = man's own search path); SCRATCH an empty directory outside the checkout;
# ZSHDIR the directory of the installed zsh completion (_squall).

# complete_words COMPLETION WORD... : the candidates bash's completion function offers for the
# last WORD, with the words before it typed (run in a clean bash without rc files).
complete_words() {
    local file=$1
    shift
    bash --norc --noprofile -c '
        source "$1"; shift
        COMP_WORDS=("$@"); COMP_CWORD=$(($# - 1)); COMP_LINE="$*"; COMP_POINT=${#COMP_LINE}
        _squall squall "${COMP_WORDS[COMP_CWORD]}" "${COMP_WORDS[COMP_CWORD-1]}"
        printf "%s\n" "${COMPREPLY[@]}"' bash "$file" "$@"
}

# zsh_line ZSHCOMP_DIR BIN LINE: what zsh's completion made of LINE after a TAB.
zsh_line() {
    mkdir -p "$t/zbin"
    ln -sf "$2" "$t/zbin/squall"
    rm -f "$t/zline"
    timeout 30 zsh -f "$SRCDIR/tests/integration/lib/zsh_complete.zsh" "$1" "$t/zbin" "$3" \
        "$t/zline" >/dev/null 2>&1
    cat "$t/zline" 2>/dev/null
}

installed_checks() {
    local bin=$1 data=$2 comp=$3 manpath=$4 t=$5 zcomp=$6 want
    want=$("$SQUALL" version)
    expect "installed squall version prints '$want' like the built one" \
        test "$("$bin" version)" = "$want"
    expect "squall --version and -V say the same as squall version" \
        bash -c "[ \"\$('$bin' --version)\" = '$want' ] && [ \"\$('$bin' -V)\" = '$want' ]"

    # The man pages: found by man-db's own lookup and rendered with their sections.
    local mflag=()
    [ -n "$manpath" ] && mflag=(-M "$manpath")
    local page1 page5
    page1=$(man "${mflag[@]}" -w squall 2>/dev/null)
    page5=$(man "${mflag[@]}" -w 5 squall-plan 2>/dev/null)
    expect "man -w squall finds squall(1) ($page1)" test -n "$page1"
    expect "man -w 5 squall-plan finds squall-plan(5) ($page5)" test -n "$page5"
    expect "squall(1) renders with its COMMANDS and EXIT STATUS sections" \
        bash -c "man -l '$page1' 2>/dev/null | grep -q '^COMMANDS' && man -l '$page1' 2>/dev/null | grep -q '^EXIT STATUS'"
    expect "squall-plan(5) renders and documents phases[].fleet.agents" \
        bash -c "man -l '$page5' 2>/dev/null | grep -q 'phases\[\]\.fleet\.agents'"

    # The installed completion is the binary's own, and bash completes a command and an option.
    expect "the installed bash completion is what 'squall completion bash' prints" \
        bash -c "'$bin' completion bash | cmp -s - '$comp'"
    local got
    got=$(complete_words "$comp" squall chec | tr '\n' ' ')
    expect "bash completes 'squall chec' to check (got: $got)" test "$got" = "check "
    got=$(complete_words "$comp" squall run plan.yaml --no-b | tr '\n' ' ')
    expect "bash completes 'squall run plan.yaml --no-b' to --no-brakes (got: $got)" \
        test "$got" = "--no-brakes "
    got=$(complete_words "$comp" squall cleanup --dry | tr '\n' ' ')
    expect "bash completes 'squall cleanup --dry' to --dry-run (got: $got)" test "$got" = "--dry-run "
    got=$(complete_words "$comp" squall help comp | tr '\n' ' ')
    expect "bash completes 'squall help comp' to compare and completion (got: $got)" \
        test "$got" = "compare completion "

    # The zsh completion, loaded by compinit in an interactive zsh, completes a command and an
    # option when TAB is typed.
    expect "the installed zsh completion is what 'squall completion zsh' prints" \
        bash -c "'$bin' completion zsh | cmp -s - '$zcomp/_squall'"
    got=$(zsh_line "$zcomp" "$bin" "squall chec")
    expect "zsh completes 'squall chec' to 'squall check' (got: $got)" test "$got" = "squall check"
    got=$(zsh_line "$zcomp" "$bin" "squall cleanup --dry")
    expect "zsh completes 'squall cleanup --dry' to --dry-run (got: $got)" \
        test "$got" = "squall cleanup --dry-run"

    # The installed demo, run from a directory outside the checkout, with a bare environment:
    # it must find the plan in the installed data directory and pass against the embedded
    # target on loopback.
    (cd "$t" && env -i PATH=/usr/bin:/bin HOME="$t" timeout 120 "$bin" demo -o "$t/demo" -q \
        >"$t/demo.stdout" 2>"$t/demo.stderr")
    local rc=$?
    expect "installed squall demo exits 0 outside the checkout (got $rc; $(tail -2 "$t/demo.stderr"))" \
        test "$rc" = 0
    local ran
    ran=$(sed -n 's/.*; running \(.*\)$/\1/p' "$t/demo.stderr")
    expect "it ran the installed plan $data/scenarios/demo.yaml (ran: $ran)" \
        test "$(realpath -m "$ran")" = "$(realpath -m "$data/scenarios/demo.yaml")"
    expect "and wrote a passing results.json" \
        /usr/bin/python3 -c "import json,sys; d=json.load(open(sys.argv[1])); sys.exit(d['sections']['run']['verdict'] != 'pass')" "$t/demo/results.json"
}
