#!/usr/bin/env bash
# `squall serve` as a process: start-up and clean stop on SIGTERM, the loopback refusal, and every
# fault measured from outside with curl (libcurl): added latency seen by the client against the
# known injected delay, the injected error count exactly equal to what the client saw, the stall
# window, dropping every watch (flag-free, at run time), and the in-flight limit in both modes.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
tmp=$(mktemp -d /tmp/squall-target-XXXXXX)
pid=
cleanup() {
    [ -n "$pid" ] && kill "$pid" 2>/dev/null
    rm -rf "$tmp"
}
trap cleanup EXIT
fail() {
    echo "FAIL: $*"
    [ -f "$tmp/err" ] && sed 's/^/  server: /' "$tmp/err"
    exit 1
}

port=$(free_port)
U=http://127.0.0.1:$port
t0=$(date +%s%N)
"$SQUALL" serve --listen "127.0.0.1:$port" 2>"$tmp/err" &
pid=$!
wait_port "$port" 50 || fail "serve did not listen on $port"
ms=$((($(date +%s%N) - t0) / 1000000))
echo "ok: serve listening after ${ms} ms (includes this script's polling in 100 ms steps)"
[ "$ms" -lt 1500 ] || fail "start-up took ${ms} ms"
grep -q "listening on http://127.0.0.1:$port (pid $pid)" "$tmp/err" || fail "no listen line"

stat() { curl -s "$U/stats" | jq -r "$1"; }
faults() { curl -s -o /dev/null -w '%{http_code}' -X POST --data "$1" "$U/admin/faults"; }
curl -s -X PUT --data '{"model":"t-a"}' "$U/v1/sites/north/gateways/gw-1" >/dev/null

# Added latency: a fixed 50 ms server-side delay. No answer can come before the delay has passed,
# so the client's minimum is at least 50 ms; on loopback the client's own overhead is well under
# a millisecond (a bound we measured on these machines, not a published figure), and the 15 ms
# margin is our allowance for a shared 2-core machine, so the median must land in [50, 65] ms.
[ "$(faults '{"delay":"fixed:50ms"}')" = 200 ] || fail "POST /admin/faults"
for i in $(seq 20); do
    curl -s -o /dev/null -w '%{time_total}\n' "$U/v1/sites/north/gateways/gw-1"
done >"$tmp/lat"
med=$(sort -n "$tmp/lat" | sed -n 10p)
min=$(sort -n "$tmp/lat" | head -1)
awk -v m="$med" -v n="$min" 'BEGIN{exit !(m >= 0.050 && m <= 0.065 && n >= 0.050)}' ||
    fail "fixed 50 ms delay: client median ${med}s, min ${min}s"
[ "$(curl -s "$U/admin/faults" | jq .counts.delayed)" = 20 ] || fail "delayed count != 20"
echo "ok: fixed 50 ms delay seen by the client: median ${med}s, min ${min}s; delayed count 20"

# Uniform delay 20..40 ms: every client time at least 20 ms, and the 18th of 20 sorted (the 90th
# percentile) at most 40 ms + 15 ms slack: one scheduling hiccup of this shared machine does not
# fail it, a delay drawn too long (say 40..80 ms: about 15 of 20 above 55 ms) does.
faults '{"delay":"uniform:20ms..40ms"}' >/dev/null
for i in $(seq 20); do
    curl -s -o /dev/null -w '%{time_total}\n' "$U/v1/sites/north/gateways/gw-1"
done >"$tmp/lat"
sort -n "$tmp/lat" | awk '$1 < 0.020 {bad=1} NR == 18 && $1 > 0.055 {bad=1} END{exit bad}' ||
    fail "uniform 20..40 ms: times $(tr '\n' ' ' <"$tmp/lat")"
echo "ok: uniform 20..40 ms delay: client times $(sort -n "$tmp/lat" | head -1)..$(sort -n "$tmp/lat" | tail -1) s"

# Exponential delay, mean 20 ms: the mean of 100 draws (the target's exact sum / count) lies
# within 4 standard errors of 20 ms (for Exp, sd = mean: se = 2 ms), and the client's mean time
# is at least the drawn mean (each answer waits its own draw).
faults '{"delay":"exp:20ms"}' >/dev/null
read -r s0 n0 < <(curl -s "$U/admin/faults" | jq -r '"\(.counts.delay_seconds_total) \(.counts.delayed)"')
for i in $(seq 100); do
    curl -s -o /dev/null -w '%{time_total}\n' "$U/v1/sites/north/gateways/gw-1"
done >"$tmp/lat"
drawn=$(curl -s "$U/admin/faults" |
    jq --argjson s0 "$s0" --argjson n0 "$n0" '(.counts.delay_seconds_total - $s0) / (.counts.delayed - $n0)')
cmean=$(awk '{s+=$1} END{print s/NR}' "$tmp/lat")
awk -v d="$drawn" -v c="$cmean" 'BEGIN{exit !(d >= 0.012 && d <= 0.028 && c >= d)}' ||
    fail "exp:20ms: drawn mean ${drawn}s, client mean ${cmean}s"
echo "ok: exp:20ms delay: drawn mean ${drawn}s over 100, client mean ${cmean}s"

# Error rate: 30 % answered 503 with Retry-After: 2. The client's count must equal the target's
# exactly; the share must be plausible for Binomial(300, 0.3) (mean 90, sd 7.9: within 4 sd).
faults '{"fail_rate":0.3,"fail_status":503,"retry_after":2}' >/dev/null
before=$(stat '.requests.GET."503" // 0')
for i in $(seq 300); do
    curl -s -o /dev/null -w '%{http_code}\n' "$U/v1/sites/north/gateways/gw-1"
done >"$tmp/codes"
n503=$(grep -c '^503$' "$tmp/codes")
n200=$(grep -c '^200$' "$tmp/codes")
[ $((n503 + n200)) = 300 ] || fail "unexpected codes: $(sort "$tmp/codes" | uniq -c)"
failed=$(curl -s "$U/admin/faults" | jq .counts.failed)
[ "$failed" = "$n503" ] || fail "client saw $n503 503s, target counted $failed"
after=$(stat '.requests.GET."503"')
[ $((after - before)) = "$n503" ] || fail "requests.GET.503 moved by $((after - before))"
[ "$n503" -ge 58 ] && [ "$n503" -le 122 ] || fail "$n503 of 300 failed at rate 0.3"
ra=$(curl -s -D - -o /dev/null "$U/v1/sites/north/gateways/gw-1?x" | tr -d '\r' |
    awk -F': ' 'tolower($1)=="retry-after"{print $2}')
echo "ok: error rate 0.3: $n503/300 answered 503, target counted $failed (exact)"
faults '{"fail_rate":1,"fail_status":429,"retry_after":7}' >/dev/null
hdr=$(curl -s -D - -o /dev/null "$U/v1/sites/north/gateways/gw-1" | tr -d '\r')
echo "$hdr" | grep -q '^HTTP/1.1 429' || fail "fail_status 429 not used: $hdr"
echo "$hdr" | grep -qi '^retry-after: 7$' || fail "no Retry-After: 7 on 429: $hdr"
echo "ok: fail_status 429 answered with Retry-After: 7 (503 run had Retry-After: ${ra:-none})"

# Stall window: no /v1/ answers from 0.5 s to 2.0 s after the POST. A request sent at ~0.6 s
# (curl's start-up on a loaded machine can add 0.3 s and still be inside the window) returns at
# ~2.0 s, so takes 1.05 to 1.6 s; /stats keeps answering during the stall.
faults '{"stall_at":"0.5s","stall_for":"1.5s"}' >/dev/null
sleep 0.6
curl -s -o /dev/null -w '%{time_total} %{http_code}\n' "$U/v1/sites/north/gateways/gw-1" \
    >"$tmp/stall" &
sleep 0.2
during=$(curl -s -o /dev/null -w '%{http_code}' --max-time 1 "$U/stats")
wait $!
read -r t code <"$tmp/stall"
[ "$during" = 200 ] || fail "/stats did not answer during the stall ($during)"
awk -v t="$t" 'BEGIN{exit !(t >= 1.05 && t <= 1.6)}' || fail "stalled request took ${t}s"
[ "$code" = 200 ] || fail "stalled request answered $code"
[ "$(curl -s "$U/admin/faults" | jq .counts.stalled)" = 1 ] || fail "stalled count != 1"
echo "ok: stall 0.5s+1.5s: a request at ~0.6 s took ${t}s; /stats answered meanwhile"

# Error window: every /v1/ answer is fail_status from 0.5 s to 1.5 s after the POST, none before
# or after (curl's own status codes, sampled every 0.1 s for 2 s; the first and last 0.1 s around
# each edge are left out, so a loaded machine's late sample cannot land on the wrong side).
faults '{"fail_at":"0.5s","fail_for":"1s","fail_status":503}' >/dev/null
t0=$(date +%s%N)
: >"$tmp/errwin"
for _ in $(seq 20); do
    c=$(curl -s -o /dev/null -w '%{http_code}' "$U/v1/sites/north/gateways/gw-1")
    echo "$((($(date +%s%N) - t0) / 1000000)) $c" >>"$tmp/errwin"
    sleep 0.1
done
bad=$(awk '($1 < 400 && $2 != 200) || ($1 > 600 && $1 < 1400 && $2 != 503) ||
           ($1 > 1600 && $2 != 200)' "$tmp/errwin")
inside=$(awk '$1 > 600 && $1 < 1400 && $2 == 503' "$tmp/errwin" | wc -l)
[ -z "$bad" ] && [ "$inside" -ge 3 ] || fail "error window: $(tr '\n' ' ' <"$tmp/errwin")"
curl -s "$U/admin/faults" | jq -e '.faults.fail_at == "0.5s" and .faults.fail_for == "1s"' \
    >/dev/null || fail "fail_at/fail_for not echoed: $(curl -s "$U/admin/faults")"
echo "ok: error window 0.5s+1s: 503 inside ($inside samples), 200 before and after"

# Drop every watch at T = 0.5 s (set at run time): 5 open streams all end abruptly (curl 18,
# partial transfer), not by their own 10 s limit; counts 5 dropped streams.
faults '{}' >/dev/null
wpids=()
for i in 1 2 3 4 5; do
    curl -s -N --max-time 10 "$U/v1/sites/north/gateways?watch=1&since=0" >"$tmp/w$i" &
    wpids+=($!)
done
for i in $(seq 50); do [ "$(stat .streams.open)" = 5 ] && break; sleep 0.1; done
[ "$(stat .streams.open)" = 5 ] || fail "5 watches did not open: $(stat .streams)"
faults '{"drop_watches_at":"0.5s"}' >/dev/null
for i in 0 1 2 3 4; do
    wait "${wpids[$i]}"
    rc=$?
    [ $rc -ne 0 ] && [ $rc -ne 28 ] || fail "watch $i ended with curl code $rc, not a drop"
    grep -q '"type":"create"' "$tmp/w$((i + 1))" || fail "watch $i saw no history event"
done
[ "$(curl -s "$U/admin/faults" | jq .counts.dropped_streams)" = 5 ] || fail "dropped != 5"
[ "$(stat .streams.open)" = 0 ] || fail "streams still open after the drop"
# The same by hand: POST /admin/drop-watches.
curl -s -N --max-time 10 "$U/v1/sites/north/gateways?watch=1" >/dev/null &
w=$!
for i in $(seq 50); do [ "$(stat .streams.open)" = 1 ] && break; sleep 0.1; done
d=$(curl -s -X POST "$U/admin/drop-watches" | jq .dropped)
wait $w
rc=$?
[ "$d" = 1 ] && [ $rc -ne 28 ] || fail "drop-watches: dropped=$d, curl $rc"
echo "ok: drop at 0.5 s ended 5 watches abruptly; POST /admin/drop-watches ended 1 more"

# A watcher that goes away while its stream is idle is noticed by the 2 s sweep: its socket is
# released and the open count falls back, without any event on the collection.
curl -s -N --max-time 1 "$U/v1/sites/quiet/gateways?watch=1" >/dev/null
for i in $(seq 60); do [ "$(stat .streams.open)" = 0 ] && break; sleep 0.1; done
[ "$(stat .streams.open)" = 0 ] && [ "$(stat .streams.gone)" = 1 ] ||
    fail "a vanished idle watcher still counted: $(stat .streams)"
echo "ok: an idle watcher that left was released by the sweep (streams.gone = 1)"

# In-flight limit 2, reject: 6 simultaneous requests held 1 s each -> exactly 2 answered 200
# and 4 answered 429 with Retry-After (1 s, not less: six curl start-ups on a loaded machine must
# all arrive while the first two are held).
faults '{"max_inflight":2,"over_limit":"reject","delay":"fixed:1s","retry_after":3}' >/dev/null
cp=()
for i in $(seq 6); do
    curl -s -o /dev/null -w '%{http_code}\n' "$U/v1/sites/north/gateways/gw-1" >"$tmp/c$i" &
    cp+=($!)
done
wait "${cp[@]}"
codes=$(cat "$tmp"/c? | sort | uniq -c | tr -s ' ' | tr '\n' ',')
[ "$(cat "$tmp"/c? | grep -c 200)" = 2 ] && [ "$(cat "$tmp"/c? | grep -c 429)" = 4 ] ||
    fail "reject mode codes: $codes"
[ "$(curl -s "$U/admin/faults" | jq .counts.rejected)" = 4 ] || fail "rejected != 4"
echo "ok: in-flight limit 2 (reject): codes $codes; rejected count 4"

# In-flight limit 2, queue: 6 simultaneous 200 ms requests all succeed, in three waves. The curl
# processes start a few ms apart, so the last wave's wait is judged loosely: without queueing
# every request would take ~0.2 s; with 2 slots the slowest waits at least two waves (>= 0.4 s).
faults '{"max_inflight":2,"over_limit":"queue","delay":"fixed:200ms"}' >/dev/null
cp=()
for i in $(seq 6); do
    curl -s -o /dev/null -w '%{http_code} %{time_total}\n' "$U/v1/sites/north/gateways/gw-1" \
        >"$tmp/c$i" &
    cp+=($!)
done
wait "${cp[@]}"
[ "$(cat "$tmp"/c? | grep -c '^200 ')" = 6 ] || fail "queue mode: $(cat "$tmp"/c?)"
slow=$(cat "$tmp"/c? | awk '{print $2}' | sort -n | tail -1)
awk -v t="$slow" 'BEGIN{exit !(t >= 0.4)}' || fail "queue mode: slowest ${slow}s < 0.4 s"
[ "$(curl -s "$U/admin/faults" | jq .counts.queued)" = 4 ] || fail "queued != 4"
echo "ok: in-flight limit 2 (queue): 6 x 200, slowest ${slow}s (three waves), queued count 4"

# Bad admin input is refused and changes nothing.
[ "$(faults '{"delay":"sometimes"}')" = 400 ] || fail "bad delay accepted"
[ "$(faults '{"bogus":1}')" = 400 ] || fail "unknown fault accepted"
[ "$(curl -s "$U/admin/faults" | jq -r .faults.delay)" = "fixed:0.2s" ] || fail "faults changed"
echo "ok: malformed fault settings answered 400, the settings stayed"

# Flags set the same faults at start-up; a non-loopback address is refused without --public.
"$SQUALL" serve --listen 0.0.0.0:"$(free_port)" 2>"$tmp/pub"
rc=$?
[ $rc = 2 ] && grep -q "not a loopback address" "$tmp/pub" || fail "0.0.0.0 not refused ($rc)"
"$SQUALL" serve --delay sometimes 2>"$tmp/bad"
[ $? = 2 ] || fail "--delay sometimes not refused"
echo "ok: 0.0.0.0 refused without --public (exit 2); a bad --delay refused (exit 2)"

kill -TERM "$pid"
wait "$pid"
rc=$?
pid=
[ $rc = 0 ] || fail "serve exited $rc after SIGTERM"
grep -q "stopped cleanly" "$tmp/err" || fail "no clean-stop line"
echo "ok: SIGTERM stopped serve with exit 0, every libuv handle closed (uv_loop_close == 0)"

port=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$port" --delay fixed:30ms --fail-rate 1 --fail-status 429 \
    2>"$tmp/err" &
pid=$!
wait_port "$port" 50 || fail "serve with fault flags did not start"
out=$(curl -s -o /dev/null -w '%{http_code} %{time_total}' "http://127.0.0.1:$port/v1/a/b")
kill -INT "$pid"
wait "$pid"
rc=$?
pid=
set -- $out
[ "$1" = 429 ] && awk -v t="$2" 'BEGIN{exit !(t >= 0.030)}' || fail "flags: got $out"
[ $rc = 0 ] || fail "serve exited $rc after SIGINT"
echo "ok: fault flags at start-up: 429 after ${2}s (>= 30 ms); SIGINT stopped it with exit 0"

# Durations are read in the plan's syntax everywhere the target takes one (flags, the admin JSON,
# --delay specs), so the README's `--drop-watches-at 2m15s` starts. /admin/faults shows each
# back in seconds: 2m15s = 2*60+15 = 135 s, 1m30s = 90 s, 1h30m = 5400 s (1 min = 60 s, 1 h =
# 3600 s). The times lie far ahead, so nothing fires while this runs.
port=$(free_port)
"$SQUALL" serve --listen "127.0.0.1:$port" --drop-watches-at 2m15s --stall-at 1m30s \
    --stall-for 1.5s --delay uniform:10ms..1m 2>"$tmp/err" &
pid=$!
wait_port "$port" 50 || fail "serve --drop-watches-at 2m15s --stall-at 1m30s did not start"
got=$(curl -s "http://127.0.0.1:$port/admin/faults" |
    jq -c '.faults | [.drop_watches_at, .stall_at, .stall_for, .delay]')
want='["135s","90s","1.5s","uniform:0.01s..60s"]'
[ "$got" = "$want" ] || fail "flags read as $got, expected $want"
code=$(curl -s -o "$tmp/admin" -w '%{http_code}' -X POST \
    --data '{"stall_at":"1h30m","stall_for":"2m15s","drop_watches_at":"1m0.5s","delay":"exp:1m30s"}' \
    "http://127.0.0.1:$port/admin/faults")
[ "$code" = 200 ] || fail "compound durations in /admin/faults: $code $(cat "$tmp/admin")"
got=$(curl -s "http://127.0.0.1:$port/admin/faults" |
    jq -c '.faults | [.stall_at, .stall_for, .drop_watches_at, .delay]')
want='["5400s","135s","60.5s","exp:90s"]'
[ "$got" = "$want" ] || fail "admin JSON read as $got, expected $want"
kill -TERM "$pid"
wait "$pid"
rc=$?
pid=
[ $rc = 0 ] || fail "serve exited $rc after SIGTERM"
echo "ok: durations as in plans: flags 2m15s, 1m30s, 1.5s, uniform:10ms..1m and admin 1h30m, 2m15s, 1m0.5s, exp:1m30s read back exactly"
echo "PASS: target faults"
