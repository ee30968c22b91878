#!/usr/bin/python3
"""Checks for tests/integration/fleet_after.sh: the synchronisation of a fleet's sends, computed
from the target's own NDJSON access log (`squall serve --access-log-format ndjson`: time received
as unix seconds, duration, path, status), outside squall's own measurement, against the numpy
agent model (tests/integration/lib/sync_sim.py, written from the model's description).

R-bar of a window: the mean resultant length |mean(exp(i*theta))| of the arrival instants in one
window [w*P, (w+1)*P) of run time, theta = 2*pi*(t mod P)/P (Mardia & Jupp, "Directional
Statistics", 2000; the Rayleigh statistic; from memory). Run time t = 0 is results.json's
meta.start (ms).

A check that depends on squall sending on time (R-bar after the fault against the model) is not
evidence when squall itself says it fell behind (results.json's generator-bound seconds) in the
span it compares: it then prints "INCONCLUSIVE: ..." instead of failing, and the script exits 3
unless another check failed (exit 1). Exit 0 when every check held.

Usage: fleet_after_check.py stall|errors RESULTS_DIR ACCESS_LOG"""
import datetime
import json
import math
import os
import sys

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import sync_sim  # noqa: E402

P = 2.0
AGENTS = 1000
SEEDS = range(1, 11)
# Tolerance of a measured R-bar against the model's, per window: 3 standard deviations of one
# run's R-bar (the model's spread over its ten seeds: one squall run is one such draw; about
# 0.005-0.015 after a stall, up to 0.04 for full-jitter retries, whose windows hold fewer and
# more random sends) plus 0.03 for what the model leaves out: the target answers the agents it
# held all at once, but on a loaded 2-core machine those answers and the next sends spread over
# up to ~0.2 s, 10 % of the period, which lowers R-bar by a factor of at least
# sin(pi/10)/(pi/10) = 0.984 (at most 0.016), and the mean of ten seeds has its own error
# (sd / sqrt(10)).
SPREAD_SDS, SLACK = 3.0, 0.03
bad = inconclusive = 0
behind = []  # squall's generator-bound seconds of the run being checked


def check(desc, ok, span=None):
    """span (lo, hi) in run seconds: the check reads arrivals there, so it needs squall to have
    kept its schedule there (see the module's head)."""
    global bad, inconclusive
    late = [x for x in behind if span and span[0] <= x < span[1]]
    if not ok and late:
        print(f"INCONCLUSIVE: {desc} (squall fell behind its schedule in seconds {late})")
        inconclusive += 1
        return
    print(("ok: " if ok else "FAIL: ") + desc)
    bad += not ok


def note_behind(d):
    """Reads squall's generator-bound seconds into `behind`."""
    g = d["sections"]["generator"]["generator_bound"]
    behind[:] = g["list"]
    print(f"squall's generator-bound seconds: {g['list']} ({g['last_reason']})")


def fmt(xs):
    return " ".join("%.3f" % x for x in xs)


def load(out, log):
    d = json.load(open(os.path.join(out, "results.json")))
    if d["meta"]["duration_ns"] < 21.5e9:
        sys.exit(f"FAIL: {out}: the run lasted {d['meta']['duration_ns'] / 1e9:.1f} s, not its "
                 f"planned 22 s ({d['sections']['run'].get('reasons')})")
    t0 = datetime.datetime.fromisoformat(d["meta"]["start"].replace("Z", "+00:00")).timestamp()
    rows = [json.loads(line) for line in open(log)]
    return d, t0, rows


def rbar_windows(rows, t0, prefix, n_win):
    """R-bar and count per window of the arrivals whose path starts with prefix."""
    t = np.array([r["time"] - t0 for r in rows if r["path"].startswith(prefix)])
    out = []
    for w in range(n_win):
        x = t[(t >= w * P) & (t < (w + 1) * P)]
        out.append((float(np.abs(np.exp(2j * np.pi * x / P).mean())) if len(x) else 0.0, len(x)))
    return out


def measured(rows, t0, prefix, label, n_win, before):
    """R-bar per window of one action's arrivals, printed, and checked spread before the fault."""
    m = rbar_windows(rows, t0, prefix, n_win)
    r = [x for x, _ in m]
    print(f"  {label}: R-bar {fmt(r)}; sends {[n for _, n in m]}")
    check(f"{label}: R-bar before the fault < 0.1 ({fmt(r[w] for w in before)})",
          all(r[w] < 0.1 for w in before), (0, len(before) * P))
    return r


def predict(argv, n_win):
    """The model's mean R-bar per window over SEEDS and the tolerance of each (n_win of them:
    the run must have lasted its planned 22 s)."""
    runs = np.array([[w["r_bar"] for w in sync_sim.run(argv + ["--seed", str(s)])["windows"]]
                     for s in SEEDS])[:, :n_win]
    return runs.mean(axis=0), SLACK + SPREAD_SDS * runs.std(axis=0, ddof=1)


def stall(out, log):
    d, t0, rows = load(out, log)
    dur = d["meta"]["duration_ns"] / 1e9
    held = [r for r in rows if r["duration"] > 1.0]
    if len(held) < 100:
        check(f"the stall held requests at the target ({len(held)} answered after > 1 s)", False)
        return
    b = float(np.median([r["time"] + r["duration"] for r in held])) - t0
    a = b - 3.0
    print(f"stall in run time: [{a:.3f}, {b:.3f}) s (its end from the {len(held)} held answers)")
    n_win = 11
    w1 = math.ceil(b / P)  # the first whole period after the stall
    before = range(0, int(a // P))
    note_behind(d)
    after = (math.floor(a), (w1 + 4) * P)  # the fault and the windows compared after it
    # 1. After-answer with +-10 % jitter: the decay the model predicts, window by window.
    r = measured(rows, t0, "/v1/jittered/", "after-answer, +-10 %", n_win, before)
    want, tol = predict(["--agents", str(AGENTS), "--period", str(P), "--jitter", "0.1",
                         "--stall", f"{a}:{b}", "--duration", str(dur)], n_win)
    print(f"  model (mean of seeds 1-10): R-bar {fmt(want)}")
    print(f"  tolerance (0.03 + 3 sd):    {fmt(tol)}")
    check(f"after-answer, +-10 %: R-bar in the period after the stall > 0.8 ({r[w1]:.3f})",
          r[w1] > 0.8, after)
    ws = range(w1, min(w1 + 4, n_win))
    check(f"after-answer, +-10 %: windows {w1}-{ws[-1]} decay as the model predicts (measured "
          f"{fmt(r[w] for w in ws)}, model {fmt(want[w] for w in ws)}, within "
          f"{fmt(tol[w] for w in ws)})",
          all(abs(r[w] - want[w]) < tol[w] for w in ws) and r[ws[-1]] < r[w1], after)
    # 2. The fixed schedule: only the sends held during the stall bunched.
    r = measured(rows, t0, "/v1/fixed/", "fixed schedule", n_win, before)
    check(f"fixed schedule: R-bar back below 0.1 in the first whole period after the stall "
          f"(window {w1}: {r[w1]:.3f})", r[w1] < 0.1, after)
    # Squall's own account: the stall shows in response time (counted from the intended instant)
    # and the agents waiting for answers do not make squall "behind its schedule".
    cells = [c for c in d["cells"] if c["class"] == "jittered" and c["outcome"] == "2xx"]
    worst = max(c["summary"]["response"]["max"] for c in cells) / 1e9
    check(f"after-answer: the stall shows in squall's response time (max {worst:.2f} s >= 2 s)",
          worst >= 2.0)
    g = d["sections"]["generator"]
    lag, gen = g["schedule_lag_p99_ms"], g["generator_bound"]["seconds"]
    check(f"agents waiting for their answers are not squall behind its schedule: schedule lag "
          f"p99 {lag:.1f} ms < 1 s (generator-bound seconds: {gen}; counted from the agents' grid, "
          f"the stall's wait of up to 3 s, one send in 11 of each after-answer agent, would make "
          f"about 1 request in 30 over 1 s late: p99 over 1 s)", lag < 1000, (0, dur))
    acts = d["sections"]["fleets"]["renewals"]["actions"]
    check("results.json records each fleet action's next and retry ("
          + ", ".join(f"{x['class']}: {x['next']}" for x in acts) + ")",
          [x["next"] for x in acts] == ["after-answer", "fixed"]
          and acts[0]["retry"]["policy"] == "full-jitter" and "retry" not in acts[1])


def errors(out, log):
    d, t0, rows = load(out, log)
    dur = d["meta"]["duration_ns"] / 1e9
    errs = [r["time"] - t0 for r in rows if r["status"] == 503]
    if len(errs) < 100:
        check(f"the error window answered 503s ({len(errs)})", False)
        return
    a, b = min(errs), max(errs) + 1e-3
    print(f"error window in run time: [{a:.3f}, {b:.3f}) s ({len(errs)} answers 503)")
    n_win = 11
    w1 = math.ceil(b / P)
    ws = range(w1, min(w1 + 3, n_win))
    note_behind(d)
    after = (math.floor(a), (w1 + 3) * P)
    base = ["--agents", str(AGENTS), "--period", str(P), "--jitter", "0.1", "--errors",
            f"{a}:{b}", "--duration", str(dur)]
    res = {}
    for name, prefix, model in (
            ("fixed retries every 0.5 s", "/v1/fixedretry/",
             ["--backoff", "fixed", "--backoff-base", "0.5"]),
            ("full-jitter retries from 0.2 s to 7 s", "/v1/fulljitter/",
             ["--backoff", "full-jitter", "--backoff-base", "0.2", "--backoff-cap", "7"])):
        r = measured(rows, t0, prefix, name, n_win, range(0, int(a // P)))
        want, tol = predict(base + model, n_win)
        print(f"  model (mean of seeds 1-10): R-bar {fmt(want)}")
        print(f"  tolerance (0.03 + 3 sd):    {fmt(tol)}")
        check(f"{name}: windows {w1}-{ws[-1]} after the error window as the model predicts "
              f"(measured {fmt(r[w] for w in ws)}, model {fmt(want[w] for w in ws)}, within "
              f"{fmt(tol[w] for w in ws)})", all(abs(r[w] - want[w]) < tol[w] for w in ws),
              after)
        res[name] = r
    fx, fj = res["fixed retries every 0.5 s"], res["full-jitter retries from 0.2 s to 7 s"]
    check(f"full-jitter retries leave a lower R-bar than fixed ones in window {w1} "
          f"({fj[w1]:.3f} < {fx[w1]:.3f} - 0.3)", fj[w1] < fx[w1] - 0.3, after)
    acts = d["sections"]["fleets"]["renewals"]["actions"]
    fails = {c: sum(x["count"] for x in d["cells"] if x["class"] == c and x["outcome"] != "2xx"
                    and x["phase"] == "renewals") for c in ("fixedretry", "fulljitter")}
    # Without retries an agent fails at most once per period of the 8 s window: about 4,000 each;
    # fixed retries every 0.5 s make about four times as many.
    check(f"results.json records both actions' retry policies ({[x['retry'] for x in acts]}); "
          f"squall's cells count the failures retried: fixed {fails['fixedretry']} > 10,000, "
          f"full jitter {fails['fulljitter']} > 4,000",
          [x["retry"]["policy"] for x in acts] == ["fixed", "full-jitter"]
          and fails["fixedretry"] > 10000 and fails["fulljitter"] > 4000)

if __name__ == "__main__":
    {"stall": stall, "errors": errors}[sys.argv[1]](sys.argv[2], sys.argv[3])
    sys.exit(1 if bad else 3 if inconclusive else 0)
