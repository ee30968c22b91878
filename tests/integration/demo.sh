#!/usr/bin/env bash
# The README's demo: `squall demo` starts the embedded target on a free loopback port, runs
# scenarios/demo.yaml against it and stops it. Checked against the plan's own arithmetic (the
# same figures `squall check` prints and tests/unit/test_plan.c derives by hand).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/demo-test"
rm -rf "$T"
mkdir -p "$T"
timeout 120 "$SQUALL" demo -o "$T/out" >"$T/out.stdout" 2>"$T/out.stderr"
RUN_RC=$?
expect "squall demo exits 0 (got $RUN_RC)" test "$RUN_RC" = 0
rcheck "fill: a 10/s -> 50/s ramp over 5 s registers (10 + 50) / 2 x 5 = 150 gateways, all 2xx" \
    'total("register-gateway", "2xx") == 150' "$T/out"
rcheck "rush: 200 aligned agents every 2 s for 6 s renew 200 x 3 = 600 times, all 2xx" \
    'total("renew-agent", "2xx") == 600' "$T/out"
rcheck "steady: reads hit gateways that exist (no 4xx), lists follow their pages" \
    'total("read-gateway", "4xx") == 0 and total("list-gateways/all-pages", "2xx") > 0' "$T/out"
expect "the summary table is printed" grep -q "^rush  *renew-agent  *600" "$T/out.stdout"
TPID=$(sed -n 's/.*embedded target listens on .* (pid \([0-9]*\)).*/\1/p' "$T/out.stderr")
expect "the demo named its target's pid ($TPID)" test -n "$TPID"
expect "and stopped that target when it was done" bash -c "! kill -0 ${TPID:-0} 2>/dev/null"
exit $FAILED
