#!/usr/bin/python3
"""Reference values for tests/unit/test_trend.c, written from the papers with numpy, not from
the C code. Input: one case a line on stdin; output one line each.

  op MINLEN SIGMA BETA Y1 Y2 ...
      Optimal partitioning, the exact minimisation PELT is proven to reach (Killick, Fearnhead
      & Eckley, JASA 107(500), 2012, eq. (2) and Theorem 3.2; Jackson et al. 2005): over every
      segmentation of y into segments of at least MINLEN values, minimise
      sum over segments of C(segment) + BETA per change, with the normal mean-change cost
      C = sum (y - segment mean)^2 / SIGMA^2. Dynamic programming over the last change, O(n^2).
      Prints the starts of the segments after the first, then "|" and the minimum.
  pelt SIGMA BETA Y1 Y2 ...
      The paper's Algorithm 2 (PELT, K = 0) as printed, segments of any length. Same output.
  judge FLOOR ALPHA MINREL S1 S2 ... | Y1 Y2 ...
      The judgement of candidate changes (starts S of segments) as the README states it: each
      candidate is tested by scipy.stats.mannwhitneyu(after, before, two-sided, "auto",
      continuity) between the segments bounded by its remaining neighbours; it is significant
      when p < ALPHA and |mean after - mean before| > FLOOR and > MINREL |mean before|; while
      any is not, the one with the largest p (then the smallest size, then the earliest) is
      removed and the rest tested again. A removed one keeps the test that removed it.
      Prints "P SIG" per candidate in order (SIG 1 or 0).
  sigma FLOOR Y1 Y2 ...
      max(FLOOR, MAD(diff(y)) / (0.6745 sqrt 2)): numpy's median of absolute deviations of the
      first differences from their median, scaled to a normal sd (Hampel 1974) and divided by
      sqrt 2 (a difference of two independent values has twice the variance).
"""
import sys

import numpy as np
from scipy import stats


def seg_cost(y, a, b, sigma):
    s = y[a:b]
    return float(np.sum((s - s.mean()) ** 2)) / sigma ** 2


def walk(last, n):
    cps = []
    t = last[n]
    while t > 0:
        cps.append(t)
        t = last[t]
    return cps[::-1]


def op(minlen, sigma, beta, y):
    n = len(y)
    if n < 2 * minlen:
        return [], seg_cost(y, 0, n, sigma) if n else 0.0
    f = [np.inf] * (n + 1)
    last = [0] * (n + 1)
    f[0] = -beta
    for t in range(minlen, n + 1):
        cands = [0] + list(range(minlen, t - minlen + 1))
        vals = [f[tau] + seg_cost(y, tau, t, sigma) + beta for tau in cands]
        k = int(np.argmin(vals))
        f[t], last[t] = vals[k], cands[k]
    return walk(last, n), f[n]


def pelt(sigma, beta, y):
    n = len(y)
    f = [0.0] * (n + 1)
    f[0] = -beta
    last = [0] * (n + 1)
    r = [0]
    for ts in range(1, n + 1):
        vals = [f[tau] + seg_cost(y, tau, ts, sigma) + beta for tau in r]
        k = int(np.argmin(vals))
        f[ts], last[ts] = vals[k], r[k]
        r = [tau for tau in r if f[tau] + seg_cost(y, tau, ts, sigma) <= f[ts]] + [ts]
    return walk(last, n), f[n]


def sigma_est(floor, y):
    d = np.diff(np.asarray(y))
    if len(d) == 0:
        return floor
    mad = stats.median_abs_deviation(d, scale=1.0)
    return max(floor, mad / (0.6744897501960817 * np.sqrt(2.0)))


def judge(floor, alpha, minrel, starts, y):
    live = list(starts)
    result = {}
    while True:
        tests = []
        for j, b in enumerate(live):
            a = live[j - 1] if j else 0
            e = live[j + 1] if j + 1 < len(live) else len(y)
            before, after = y[a:b], y[b:e]
            p = float(stats.mannwhitneyu(after, before, alternative="two-sided", method="auto",
                                         use_continuity=True).pvalue)
            d = abs(after.mean() - before.mean())
            sig = p < alpha and d > floor and d > minrel * abs(before.mean())
            result[b] = (p, sig)
            tests.append((b, p, d, sig))
        weak = [t for t in tests if not t[3]]
        if not weak:
            break
        worst = max(weak, key=lambda t: (t[1], -t[2], -t[0]))
        live.remove(worst[0])
    return [result[b] for b in starts]


for line in sys.stdin:
    w = line.split()
    if not w:
        continue
    if w[0] == "op":
        cps, cost = op(int(w[1]), float(w[2]), float(w[3]), np.array([float(v) for v in w[4:]]))
        print(" ".join(str(c) for c in cps), "|", repr(float(cost)))
    elif w[0] == "pelt":
        cps, cost = pelt(float(w[1]), float(w[2]), np.array([float(v) for v in w[3:]]))
        print(" ".join(str(c) for c in cps), "|", repr(float(cost)))
    elif w[0] == "judge":
        bar = w.index("|")
        res = judge(float(w[1]), float(w[2]), float(w[3]), [int(v) for v in w[4:bar]],
                    np.array([float(v) for v in w[bar + 1:]]))
        print(" ".join("%r %d" % (p, sig) for p, sig in res))
    elif w[0] == "sigma":
        print(repr(float(sigma_est(float(w[1]), [float(v) for v in w[2:]]))))
    else:
        sys.exit("unknown case " + w[0])
