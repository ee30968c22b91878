#!/usr/bin/env bash
# The Debian package: tools/package builds it with dpkg-buildpackage (debhelper + meson), dpkg -i
# installs it, the installed squall is checked as a user would use it (version, `man -w squall`,
# bash completion, the demo run outside the checkout from /usr/share/squall/scenarios), and it
# is purged again. Its Depends come from the binary's real shared libraries (dpkg-shlibdeps).
# CI runs as root on a clean machine; the test refuses (fails) instead of replacing a squall
# package someone installed, and always purges the one it installed.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
source "$SRCDIR/tests/integration/lib/installed.sh"
S=$(mktemp -d /tmp/squall-installed.XXXXXX) # a directory outside the checkout
T="$BUILDDIR/deb-test"
rm -rf "$T"
mkdir -p "$T"
if [ "$(id -u)" != 0 ]; then
    echo "FAIL: installing a .deb needs root (CI runs tools/test as root)"
    exit 1
fi
if dpkg-query -W -f='${Status}' squall 2>/dev/null | grep -q "installed"; then
    echo "FAIL: a squall package is already installed ($(dpkg-query -W squall)); this test installs and purges its own: remove it first (dpkg --purge squall)"
    exit 1
fi
deb=$("$SRCDIR/tools/package" "$T/pkg" 2>"$T/package.err")
rc=$?
expect "tools/package builds a .deb (exit $rc; $(tail -3 "$T/package.err"))" test "$rc" = 0 -a -f "$deb"
[ -f "$deb" ] || exit 1
depends=$(dpkg-deb -f "$deb" Depends)
# The libraries the binary itself needs (its DT_NEEDED entries, readelf), each resolved by the
# dynamic loader (ldd) to a file whose package (dpkg -S) Depends must name.
for soname in $(readelf -d "$BUILDDIR/squall" | sed -n 's/.*(NEEDED).*\[\(.*\)\]/\1/p'); do
    lib=$(ldd "$BUILDDIR/squall" | awk -v s="$soname" '$1 == s {print $3}')
    pkg=$(dpkg -S "$lib" 2>/dev/null | head -1 | cut -d: -f1)
    [ -z "$pkg" ] && pkg=$(dpkg -S "$(realpath "$lib")" 2>/dev/null | head -1 | cut -d: -f1)
    expect "Depends names $pkg, the package of needed $soname (Depends: $depends)" \
        grep -qw -- "$pkg" <<<"$depends"
done
purge() { dpkg --purge squall >"$T/purge.log" 2>&1; }
trap purge EXIT
dpkg -i "$deb" >"$T/install.log" 2>&1
rc=$?
expect "dpkg -i installs it (exit $rc; $(tail -2 "$T/install.log"))" test "$rc" = 0
expect "squall --version from PATH is the package's" \
    bash -c "[ \"\$(squall --version)\" = \"squall \$(dpkg-query -W -f='\${Version}' squall)\" ]"
installed_checks /usr/bin/squall /usr/share/squall \
    /usr/share/bash-completion/completions/squall "" "$S" /usr/share/zsh/vendor-completions
purge
trap - EXIT
expect "dpkg --purge removes it: no /usr/bin/squall, no /usr/share/squall" \
    bash -c "! dpkg-query -W -f='\${Status}' squall 2>/dev/null | grep -q ' installed' && [ ! -e /usr/bin/squall ] && [ ! -e /usr/share/squall ]"
rm -rf "$S"
exit $FAILED
