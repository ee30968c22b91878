#!/usr/bin/env bash
# `squall run --metrics`: squall's own live metrics, checked by real components from Debian.
#   - promtool (`check metrics`) accepts the Prometheus 0.0.4 rendering without a remark;
#   - a real prometheus server scrapes the running squall every second (it asks for
#     OpenMetrics 1.0 first, so this is the OpenMetrics rendering), finds it healthy, and its
#     HTTP query API returns, after the run, the request counters and the watch event counter of
#     the load phase equal to results.json (the run ends with a quiet phase of watches only, so
#     the load phase's counters are final in the last scrapes);
#   - --metrics off loopback is refused without --metrics-public. About 30 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
T="$BUILDDIR/metrics-endpoint"
rm -rf "$T"
mkdir -p "$T/data"
source "$SRCDIR/tests/integration/lib/run.sh"
FAILED=0
serve_start || exit 1
MPORT=$(free_port)
PPORT=$(free_port)
cat >"$T/prometheus.yml" <<CONF
global: {scrape_interval: 1s, scrape_timeout: 900ms}
scrape_configs:
- job_name: squall
  static_configs: [{targets: ['127.0.0.1:$MPORT']}]
CONF
prometheus --config.file="$T/prometheus.yml" --storage.tsdb.path="$T/data" \
    --web.listen-address="127.0.0.1:$PPORT" >"$T/prometheus.log" 2>&1 &
PROM_PID=$!
trap 'stop_pid "$PROM_PID"; serve_stop' EXIT
wait_port "$PPORT" 100 || { echo "prometheus did not start"; cat "$T/prometheus.log"; exit 1; }

cat >"$T/plan.yaml" <<PLAN
seed: 3
# This test is about what squall does beside the load, not the verdict: a second in which this
# shared machine held squall back (generator-bound) must not turn the run INCONCLUSIVE here.
accept: [generator-bound]
target: {url: "$SERVE_URL", connections: 8}
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{seq}}", body: '{"holder":"gw","stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/leases?watch=1", stamp-key: stamp, reconnect: {policy: immediate}}
phases:
  - {name: load, duration: 6s, rate: 100/s, mix: {renew: 1}, watches: {follow: 5}}
  - {name: quiet, duration: 5s, watches: {follow: 2}}
PLAN
"$SQUALL" run "$T/plan.yaml" -o "$T/out" -q --metrics "127.0.0.1:$MPORT" >"$T/run.out" 2>&1 &
RUN_PID=$!
sleep 3
curl -s "http://127.0.0.1:$MPORT/metrics" >"$T/m004.txt"
promtool check metrics <"$T/m004.txt" >"$T/promtool.out" 2>&1
prc=$?
expect "promtool accepts the 0.0.4 rendering without a remark (exit $prc)" test "$prc" = 0
curl -s -D "$T/om.headers" -H 'Accept: application/openmetrics-text;version=1.0.0' \
    "http://127.0.0.1:$MPORT/metrics" >"$T/om.txt"
expect "OpenMetrics when asked, ending in # EOF" \
    bash -c "grep -qi 'content-type: application/openmetrics-text' '$T/om.headers' && tail -1 '$T/om.txt' | grep -qx '# EOF'"
wait "$RUN_PID"
rc=$?
expect "the run passes (exit $rc)" test "$rc" = 0
expect "squall stopped serving at its end" bash -c "! curl -s -m 2 http://127.0.0.1:$MPORT/metrics >/dev/null"

q() { # q PROMQL: prints the first value, or "none"
    curl -s --get "http://127.0.0.1:$PPORT/api/v1/query" --data-urlencode "query=$1" |
        jq -r '.data.result[0].value[1] // "none"'
}
# Prometheus's own `up` series (1 for each successful scrape): squall answered its scrapes while it
# ran. (Not the target's current health: squall stopped serving at its end, so a scrape after that
# is down by design.)
scrapes_up=$(q 'sum_over_time(up{job="squall"}[5m])')
expect "prometheus scraped squall successfully during the ~11 s run ($scrapes_up scrapes up, >= 5)" \
    /usr/bin/python3 -c "import sys; sys.exit(not float('${scrapes_up/none/0}') >= 5)"
want_done=$(jq '[.cells[] | select(.phase=="load" and .class=="renew" and .outcome=="2xx") | .count] | add' "$T/out/results.json")
want_events=$(jq '[.cells[] | select(.phase=="load" and .class=="follow" and .outcome=="2xx") | .count] | add' "$T/out/results.json")
got_done=$(q 'last_over_time(squall_requests_total{phase="load",class="renew",outcome="2xx"}[5m])')
got_count=$(q 'last_over_time(squall_response_seconds_count{phase="load",class="renew"}[5m])')
got_started=$(q 'last_over_time(squall_requests_started_total{phase="load",class="renew"}[5m])')
got_events=$(q 'last_over_time(squall_watch_events_total{phase="load",class="follow"}[5m])')
got_sendlag=$(q 'last_over_time(squall_send_lag_seconds_count[5m])')
got_schedlag=$(q 'last_over_time(squall_schedule_lag_seconds_count[5m])')
expect "finished renewals: prometheus $got_done, results.json $want_done" test "$got_done" = "$want_done"
expect "response histogram count: prometheus $got_count" test "$got_count" = "$want_done"
expect "started renewals: prometheus $got_started" test "$got_started" = "$want_done"
expect "load-phase watch events: prometheus $got_events, results.json $want_events" \
    test "$got_events" = "$want_events"
expect "send lag counted for every request sent: $got_sendlag, as schedule lag $got_schedlag (>= $want_done)" \
    bash -c "[ '$got_sendlag' = '$got_schedlag' ] && [ '$got_sendlag' -ge '$want_done' ]"
expect "at least 600 renewals (100/s for 6 s)" test "${want_done:-0}" -ge 600

"$SQUALL" run "$T/plan.yaml" -o "$T/far" -q --metrics "10.255.255.1:9464" >"$T/far.out" 2>&1
frc=$?
expect "--metrics off loopback refused without --metrics-public (exit $frc)" \
    bash -c "[ $frc = 2 ] && grep -q 'metrics-public' '$T/far.out' && [ ! -e '$T/far/results.json' ]"
[ "$FAILED" = 0 ] && echo "metrics-endpoint: all passed"
