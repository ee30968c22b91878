#!/usr/bin/env bash
# Propagation latency in `squall run`: writes carry a send stamp ({{now_ns}}), watchers measure
# now - stamp for every event. The embedded target holds each /v1/ request for a known 50 ms
# (--delay fixed:50ms) before it stores a write and publishes its event, so no event can be seen
# earlier than 50 ms after its stamp, and on an idle loopback it is seen soon after.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/watch-propagation"
rm -rf "$T"
mkdir -p "$T"
serve_start --delay fixed:50ms || exit 1
cat >"$T/p.yaml" <<YAML
seed: 3
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  put: {kind: write, method: PUT, path: "/v1/sites/harbor/gateways/gw-{{seq}}",
        body: '{"model":"t-b","stamp":{{now_ns}}}',
        keep: "the target's events_sent must not count the teardown's deletes"}
  follow: {kind: watch, path: "/v1/sites/harbor/gateways?watch=1", stamp-key: stamp}
  follow-other: {kind: watch, path: "/v1/sites/harbor/gateways?watch=1", stamp-key: written_at}
phases:
  # Writes stop 500 ms before the phase (and its watches) ends, so every event is published
  # while the watches are still open.
  - {name: w, duration: 4s, steps: [{rate: 50/s, for: 3500ms}, {rate: 0/s, for: 500ms}],
     mix: {put: 1}, watches: {follow: 4, follow-other: 2}}
YAML
run_plan "$T/p" "$T/p.yaml"
sent=$(serve_stats 's["streams"]["events_sent"]')
serve_stop
C='cell("w", "follow", "2xx")'
expect_rc "the run exits 0 (got $RUN_RC)" "$T/p" 0
rcheck "every event the target sent ($sent) was seen" \
    "$C['count'] + cell('w', 'follow-other', '2xx')['count'] == $sent" "$T/p"
rcheck "one propagation sample per event seen" \
    "$C['summary']['propagation']['count'] == $C['count'] > 500" "$T/p"
rcheck "no propagation below the injected 50 ms server delay (min $(rget "$T/p" "round(ms($C, 'propagation', 'min'), 2)" 2>/dev/null) ms)" \
    "ms($C, 'propagation', 'min') >= 50" "$T/p"
rcheck "propagation p50 = 50 ms + loopback, within 10 ms (p50 $(rget "$T/p" "round(ms($C, 'propagation', 'p50'), 2)" 2>/dev/null) ms)" \
    "50 <= ms($C, 'propagation', 'p50') <= 60" "$T/p"
rcheck "the write's own service time shows the same 50 ms (server-side delay, p50 50..60 ms)" \
    "50 <= ms(cell('w', 'put', '2xx'), 'service', 'p50') <= 60" "$T/p"
rcheck "a class whose stamp key the events lack records no propagation (and counts them)" \
    "'propagation' not in cell('w', 'follow-other', '2xx').get('summary', {}) and d['sections']['watches']['w']['classes']['follow-other']['no_stamp'] == cell('w', 'follow-other', '2xx')['count'] > 0" "$T/p"
rcheck "open latency (intended open -> first body byte) includes the 50 ms delay on the watch" \
    "ms($C, 'open', 'min') >= 50" "$T/p"
[ "$FAILED" = 0 ] && echo "PASS: watch propagation" || echo "FAIL: watch propagation"
exit "$FAILED"
