#!/usr/bin/env bash
# `meson install` of this build into a staging directory (DESTDIR): the binary, both man pages,
# the bash and zsh completions and the scenarios land where the README says, and the installed
# binary works from there (tests/integration/lib/installed.sh: version, man-db's lookup, bash
# completion, the demo run outside the checkout finding its installed plan).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/installed.sh"
S=$(mktemp -d /tmp/squall-installed.XXXXXX) # a directory outside the checkout
T="$BUILDDIR/install-test"
rm -rf "$T"
mkdir -p "$T/root"
meson install -C "$BUILDDIR" --no-rebuild --destdir "$T/root" >"$T/install.log" 2>&1
rc=$?
expect "meson install --destdir exits 0 (got $rc; $(tail -2 "$T/install.log"))" test "$rc" = 0
prefix=$(meson introspect "$BUILDDIR" --buildoptions | /usr/bin/python3 -c '
import json, sys
o = {x["name"]: x["value"] for x in json.load(sys.stdin)}
print(o["prefix"], o["bindir"], o["datadir"], o["mandir"])')
read -r pfx bindir datadir mandir <<<"$prefix"
R="$T/root$pfx"
for f in "$bindir/squall" "$mandir/man1/squall.1" "$mandir/man5/squall-plan.5" \
    "$datadir/bash-completion/completions/squall" "$datadir/zsh/vendor-completions/_squall" \
    "$datadir/squall/scenarios/demo.yaml" "$datadir/squall/scenarios/fleet-storm.yaml"; do
    expect "installed $pfx/$f" test -s "$R/$f"
done
expect "the installed scenarios are the tree's" diff -r "$SRCDIR/scenarios" "$R/$datadir/squall/scenarios"
installed_checks "$R/$bindir/squall" "$R/$datadir/squall" \
    "$R/$datadir/bash-completion/completions/squall" "$R/$mandir" "$S" \
    "$R/$datadir/zsh/vendor-completions"
rm -rf "$S"
exit $FAILED
