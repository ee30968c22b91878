#!/usr/bin/env bash
# Fleet agents that leave, and agents that each keep their own watch, against the embedded
# target: squall's counts against the target's own /stats.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/fleet-life"
rm -rf "$T"
mkdir -p "$T"
serve_start || exit 1
# 6 agents renew every 1 s for 5 s, leaving evenly over the last 2 s: each is present 5 - 2/2 =
# 4 s on average, so about 6 x 4 = 24 renews, against 30 if they stayed. Exactly: agent k leaves
# at 5 - 2 + 2k/6 s (first in, first out; DEVELOPERS.md "Fleet lifetimes") and, spread, renews at
# its own phase p in (0, 1 s) and every second after, so it sends ceil(leave_k - p) renews: its
# leave time if that is a whole second, else floor or ceil of it. Summed (computed below): 21..25.
# Each agent watches its own lease collection, so every renew is an
# event for exactly one watcher: its own (the watch opens with the phase; a renew that beats its
# watcher's open is missed, at most one per agent).
cat >"$T/life.yaml" <<YAML
seed: 5
target: {url: "$SERVE_URL", connections: 16, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  renew: {kind: write, method: PUT, path: "/v1/agents/a-{{agent}}/lease/l", body: '{"stamp":{{now_ns}}}'}
  follow-own: {kind: watch, path: "/v1/agents/a-{{agent}}/lease?watch=1", stamp-key: stamp}
phases:
  - {name: life, duration: 5s, fleet: {agents: 6, every: 1s, leave: 2s, send: renew, watch: follow-own}}
YAML
run_plan "$T/life" "$T/life.yaml"
expect_rc "the run exits 0 (got $RUN_RC)" "$T/life" 0
N=$(rget "$T/life" 'total("renew", "2xx")')
read -r LO HI < <(/usr/bin/python3 -c 'from fractions import Fraction as F
import math
leave = [5 - 2 + F(2 * k, 6) for k in range(6)]
print(sum(math.floor(t) for t in leave), sum(math.ceil(t) for t in leave))')
expect "the bounds are 21..25 (got $LO..$HI)" test "$LO.$HI" = 21.25
expect "agents that leave send fewer renews: $N in $LO..$HI, not 30" test "$N" -ge "$LO" -a "$N" -le "$HI"
SAW=$(serve_stats 's["requests"]["PUT"].get("201", 0) + s["requests"]["PUT"].get("200", 0)')
expect "the target saw exactly the $N renews squall reports (saw $SAW)" test "$SAW" = "$N"
rcheck "each agent's own watch sees its own renews: events in [N - 6, N]" \
    "$N - 6 <= cell('life', 'follow-own', '2xx')['count'] <= $N" "$T/life"
rcheck "the 6 agents' watches were opened, one stream each" \
    'd["sections"]["watches"]["life"]["classes"]["follow-own"]["streams"] == 6' "$T/life"
exit $FAILED
