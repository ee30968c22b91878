#!/usr/bin/env bash
# Reconnect storms in `squall run`: after the embedded target drops every watch at once,
# full-jitter reconnects are spread over the window as the formula says, U(0, expo(0)) =
# U(0, base) for a first failure ("Exponential Backoff and Jitter", AWS Architecture Blog,
# 2015), checked with the one-sample Kolmogorov-Smirnov test against its published asymptotic
# critical value; with the immediate policy the same streams all come back at once.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/watch-reconnect"
rm -rf "$T"
mkdir -p "$T"
N=200

plan() { # plan FILE POLICY
    cat >"$1" <<YAML
seed: 9
target: {url: "$SERVE_URL", connections: 2, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
vars: {site: [north, south, harbor, ridge]}
requests:
  follow: {kind: watch, path: "/v1/sites/{{site}}/gateways?watch=1",
           reconnect: {policy: $2, base: 2s, cap: 10s}}
phases:
  - {name: w, duration: 6s, watches: {follow: $N}}
YAML
}

# The reconnect log: per reconnect, when squall saw the stream end, the delay it drew and when
# the new request was handed to the connection (libcurl's PREREQFUNCTION), ns from phase start.
ks_check() { # ks_check OUT WHAT: prints "ok ..." or "FAIL ..."
    /usr/bin/python3 - "$1" "$2" "$N" <<'PY'
import json, math, sys
d = json.load(open(sys.argv[1] + "/results.json"))
what, n_want = sys.argv[2], int(sys.argv[3])
log = d["sections"]["watches"]["w"]["reconnect_log"]
end, delay, sent, att = log["ended_ns"], log["delay_ns"], log["sent_ns"], log["attempt"]
ok = True
def check(desc, cond):
    global ok
    print(("ok: " if cond else "FAIL: ") + desc)
    ok = ok and cond
check("%d reconnects logged, all first failures (attempt 0): got %d" % (n_want, len(delay)),
      len(delay) == n_want and set(att) == {0})
waited = [(s - e) / 1e9 for s, e in zip(sent, end)]
late = sorted(w - dl / 1e9 for w, dl in zip(waited, delay))
lateness = late[-1]
late_p99 = late[min(len(late) - 1, int(0.99 * len(late)))]
check("every reconnect was sent at or after its drawn delay (latest by %.1f ms)" % (lateness * 1e3),
      all(w >= dl / 1e9 - 1e-4 for w, dl in zip(waited, delay)))
if what == "jitter":
    # Spread out, each reconnect goes out within the 1 ms wake-up plus a loopback connect. The
    # 99th percentile, not the max: one pause of this shared VM (tens of ms, seen on the wire in
    # replay-nginx) delays the one or two reconnects due in it, and says nothing of squall.
    check("spread reconnects are at most 20 ms late at p99 (%.1f ms; the latest %.1f ms, under 200)"
          % (late_p99 * 1e3, lateness * 1e3), late_p99 < 0.020 and lateness < 0.200)
    # One-sample KS against U(0, 2 s) at alpha .01: the asymptotic critical value c/sqrt(n) with
    # c the 0.99 quantile of the Kolmogorov distribution, 1.62762 (Marsaglia, Tsang & Wang,
    # J. Stat. Softw. 8(18), 2003), computed here by scipy.stats.kstwobign.
    from scipy.stats import kstwobign
    c = float(kstwobign.ppf(0.99))
    check("scipy's Kolmogorov 0.99 quantile %.6f is the published 1.62762" % c,
          abs(c - 1.62762) <= 5e-6)
    crit = c / math.sqrt(len(waited))
    for name, xs in (("drawn delays", [x / 1e9 for x in delay]), ("actual waits", waited)):
        xs = sorted(xs)
        n = len(xs)
        D = max(max((i + 1) / n - min(x / 2, 1), min(x / 2, 1) - i / n) for i, x in enumerate(xs))
        check("full jitter %s ~ U(0, 2 s): KS D = %.4f < %.4f (alpha .01)" % (name, D, crit), D < crit)
    check("the reconnects spread over the window: the last drawn at %.2f s of 2 s, sent by %.2f s"
          % (max(delay) / 1e9, max(waited)), 1.5 < max(delay) / 1e9 <= 2.0 and max(waited) < 2.2)
else:
    # All at once: 200 ends, connects and requests through one loop take 20-40 ms of CPU here,
    # so a slowed machine stretches the last ones; 90 % within 100 ms and all within 500 ms
    # still tell "at once" from the policies that spread them over seconds.
    w = sorted(waited)
    check("immediate: 90 %% of %d streams back within 100 ms of their drop, all within 500 ms "
          "(p90 %.1f ms, max %.1f ms)" % (len(w), w[int(0.9 * len(w))] * 1e3, w[-1] * 1e3),
          w[int(0.9 * len(w))] < 0.1 and w[-1] < 0.5)
sys.exit(0 if ok else 1)
PY
}

for policy in full-jitter immediate; do
    serve_start --drop-watches-at 2s || exit 1
    plan "$T/$policy.yaml" "$policy"
    run_plan "$T/$policy" "$T/$policy.yaml"
    dropped=$(serve_stats 's["faults"]["dropped_streams"]')
    opened=$(serve_stats 's["streams"]["opened"]')
    serve_stop
    expect_rc "$policy: the run exits 0 (got $RUN_RC)" "$T/$policy" 0
    expect "$policy: the target dropped $N streams (got $dropped) and saw 2 x $N opens (got $opened)" \
        test "$dropped" = "$N" -a "$opened" = $((2 * N))
    ks_check "$T/$policy" "$([ $policy = immediate ] && echo immediate || echo jitter)" || FAILED=1
done
# A target that refuses every watch (503) and one watcher reconnecting every 50 ms for 2 s: about
# 40 reconnects, far more than the 4 per watcher the log once had room for (a heap overflow
# that killed the run and lost its results). Every reconnect is kept, none dropped.
serve_start --fail-rate 1 || exit 1
cat >"$T/refused.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 2, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1",
           reconnect: {policy: fixed, base: 50ms}}
phases:
  - {name: w, duration: 2s, watches: {follow: 1}}
brakes:
  - {error-rate: 100%}
YAML
run_plan "$T/refused" "$T/refused.yaml"
serve_stop
expect "every watch refused: the run ends cleanly and fails: no stream ever opened (exit $RUN_RC, 1)" \
    test "$RUN_RC" = 1
rcheck "its verdict names the watch class's error rate over its stream attempts (100 %)" \
    "d['sections']['run']['verdict'] == 'fail' and
     any(r.startswith('follow in w: error rate <= 1% (default): observed 100') for r in d['sections']['run']['reasons'])" \
    "$T/refused"
rcheck "its reconnect log keeps all of them: 30..41 (2 s / 50 ms), none dropped" \
    "30 <= len(d['sections']['watches']['w']['reconnect_log']['ended_ns']) <= 41 and
     d['sections']['watches']['w']['reconnect_log']['dropped'] == 0 and
     not d['sections']['watches']['w']['reconnect_log']['truncated']" "$T/refused"
[ "$FAILED" = 0 ] && echo "PASS: watch reconnect" || echo "FAIL: watch reconnect"
exit "$FAILED"
