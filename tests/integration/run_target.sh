#!/usr/bin/env bash
# `squall run` against the embedded target: the classic coordinated-omission case (a server
# stall during a constant-rate run), list pagination, counts agreeing with what the target saw,
# and SIGINT handling.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/run-target"
rm -rf "$T"
mkdir -p "$T"

# --- Coordinated omission -------------------------------------------------------------------
# A constant-rate run of T = 10 s during which the server answers nothing for S = 2 s (the
# target's stall fault, from 1 s after it starts). Analytic values (the situation of the
# HdrHistogram README's "Corrected vs. Raw" example, derived here): the requests whose intended
# start falls in the stall,
# a fraction S/T = 0.2, each wait until the stall ends, so their response time is uniform on
# [0, S]; the other 80 % see only the quiet-time latency. Hence the response-time percentile p
# (as a fraction) is about (p - (1 - S/T)) * T for p > 0.8: p90 = 1.0 s, p99 = 1.9 s,
# p99.9 = 1.99 s, and p50 is the quiet-time latency. Service time (from the actual send) must not
# show the stall: only the 8 requests on the wire when it began (8 connections, 0.4 % of 2,000)
# wait in the server; the rest wait in squall's own queue, before being sent.
serve_start --stall-at 1s --stall-for 2s || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
cat >"$T/co.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 10s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 200/s, duration: 10s, mix: {read: 1}}
YAML
run_plan "$T/co" "$T/co.yaml"
C='cell("steady", "read", "2xx")'
rcheck "all 2,000 requests answered 2xx" "$C['count'] == 2000" "$T/co"
rcheck "response p50 is the quiet-time latency (< 20 ms), not the stall" \
    "ms($C, 'response', 'p50') < 20" "$T/co"
rcheck "response p90 = (0.90 - 0.8) x 10 s = 1.0 s within 10 %" \
    "abs(ms($C, 'response', 'p90') - 1000) <= 100" "$T/co"
rcheck "response p99 = (0.99 - 0.8) x 10 s = 1.9 s within 10 %" \
    "abs(ms($C, 'response', 'p99') - 1900) <= 190" "$T/co"
rcheck "response p99.9 = 1.99 s within 10 %, and max below S + 10 %" \
    "abs(ms($C, 'response', 'p99.9') - 1990) <= 199 and ms($C, 'response', 'max') <= 2200" "$T/co"
rcheck "service time does not show the stall: p99 < 50 ms" \
    "ms($C, 'service', 'p99') < 50" "$T/co"
rcheck "the run says its requests waited for a connection the stalled target held (connection-bound, not generator-bound)" \
    'd["sections"]["generator"]["connection_bound"]["seconds"] >= 1 and d["sections"]["generator"]["generator_bound"]["seconds"] == 0 and d["sections"]["generator"]["max_queue_wait_ms"] > 1000' \
    "$T/co"
rcheck "and its verdict stands: PASS, exit 0 (the times from the intended start judge the target)" \
    'd["sections"]["run"]["verdict"] == "pass" and d["sections"]["run"]["exit_code"] == 0' "$T/co"
serve_stop

# --- Pagination and exact counts --------------------------------------------------------------
# 90 gateways are created through squall, then listed 30 per page, so each list is 3 pages (the
# target sends no continuation token with the last one); the target's own /stats must count
# exactly what squall says it sent.
serve_start || exit 1
cat >"$T/pages.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 4, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  create: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"n":{{seq}}}'}
  list: {kind: list, path: /v1/sites/north/gateways, page: 30}
phases:
  - {name: fill, rate: 90/s, duration: 1s, mix: {create: 1}}
  - {name: scan, rate: 10/s, duration: 2s, mix: {list: 1}}
YAML
run_plan "$T/pages" "$T/pages.yaml"
rcheck "90 creates answered 201 (2xx)" 'total("create", "2xx") == 90' "$T/pages"
rcheck "20 lists (10/s x 2 s) of 90 objects at 30 per page = 3 pages each" \
    'total("list/all-pages", "2xx") == 20 and total("list", "2xx") == 60' "$T/pages"
SAW_PUT=$(serve_stats 's["requests"]["PUT"].get("201", 0)')
SAW_GET=$(serve_stats 's["requests"]["GET"].get("200", 0)')
expect "the target saw exactly the 90 PUTs squall reports (saw $SAW_PUT)" test "$SAW_PUT" = 90
expect "and exactly the 60 list pages (saw $SAW_GET)" test "$SAW_GET" = 60
serve_stop

# --- Planned silence is not an unreachable target ---------------------------------------------
# An aligned fleet ticks every 4 s; between ticks nothing is in flight, so an "unreachable for
# 2 s" brake must not trip (it only counts time spent waiting for an answer).
serve_start || exit 1
cat >"$T/quiet.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 4, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  renew: {kind: write, method: PUT, path: "/v1/leases/gw-{{agent}}", body: '{"n":1}'}
phases:
  - {name: ticks, duration: 9s, fleet: {agents: 3, every: 4s, timing: aligned, send: renew}}
brakes:
  - {unreachable: 2s}
YAML
run_plan "$T/quiet" "$T/quiet.yaml"
expect "a fleet's quiet time between ticks does not trip the unreachable brake (exit $RUN_RC)" \
    test "$RUN_RC" = 0
rcheck "and its ticks were all sent: 3 agents x 2 or 3 ticks" \
    'total("renew", "2xx") in (6, 9)' "$T/quiet"
serve_stop

# --- SIGINT -------------------------------------------------------------------------------------
# The first signal stops new requests and lets in-flight ones finish; results are complete and
# marked interrupted; the exit code is 5 (README, "Exit codes").
serve_start --delay fixed:200ms || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
cat >"$T/sig.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 16, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 50/s, duration: 60s, mix: {read: 1}}
YAML
rm -rf "$T/sig"
timeout 60 "$SQUALL" run "$T/sig.yaml" -o "$T/sig" >"$T/sig.stdout" 2>"$T/sig.stderr" &
RUN_PID=$!
sleep 2
kill -INT "$RUN_PID"
START=$(date +%s)
wait "$RUN_PID"
RUN_RC=$?
ELAPSED=$(($(date +%s) - START))
expect "SIGINT ends the run with exit code 5 (got $RUN_RC)" test "$RUN_RC" = 5
expect "within the 2 s grace (took ${ELAPSED}s)" test "$ELAPSED" -le 3
# Requests on the wire get the grace to finish; any still waiting for a connection when the
# signal came are cancelled (never sent), so every request is either answered or cancelled.
rcheck "results are written, marked interrupted by the signal, in-flight requests answered" \
    'd["meta"]["interrupted"] and "SIGINT" in d["meta"]["stop_reason"] and total("read", "2xx") >= 80 and total("read", "2xx") + total("read", "cancelled") == total("read")' \
    "$T/sig"
expect "the summary is printed" grep -q "stopped early: signal SIGINT" "$T/sig.stdout"
serve_stop

exit $FAILED
