#!/usr/bin/python3
"""Reference values for tests/unit/test_profile_stats.c, from numpy and scipy (Debian
python3-numpy, python3-scipy). Input: lines on stdin, one case per line; output one line each.

  rayleigh A1 A2 ...   angles in radians. Prints "RBAR MEAN Z P": the mean resultant length and
                       mean direction from scipy.stats.directional_stats, Z = n RBAR^2, and the
                       p-value of Zar's approximation, exp(sqrt(1 + 4n + 4(n^2 - R^2)) - (1 + 2n))
                       with R = n RBAR (Zar, "Biostatistical Analysis", the Rayleigh test),
                       written here from the book's formula, not from the C code.
  dispersion C1 C2 ... counts. Prints "D X2 DF PLOW": numpy's unbiased variance over the mean,
                       (k - 1) D, k - 1, and scipy.stats.chi2.cdf(X2, k - 1) (Cox & Lewis 1966).
  chi2 X DF            prints scipy.stats.chi2.cdf(X, DF).
"""
import sys

import numpy as np
from scipy import stats


def rayleigh(a):
    a = np.asarray(a, dtype=float)
    n = len(a)
    d = stats.directional_stats(np.column_stack([np.cos(a), np.sin(a)]))
    rbar = float(d.mean_resultant_length)
    mean = float(np.arctan2(d.mean_direction[1], d.mean_direction[0])) % (2 * np.pi)
    r = n * rbar
    p = float(np.exp(np.sqrt(1 + 4 * n + 4 * (n * n - r * r)) - (1 + 2 * n)))
    return [rbar, mean, n * rbar * rbar, min(1.0, max(0.0, p))]


def dispersion(c):
    c = np.asarray(c, dtype=float)
    d = float(np.var(c, ddof=1) / np.mean(c))
    k = len(c)
    return [d, (k - 1) * d, k - 1, float(stats.chi2.cdf((k - 1) * d, k - 1))]


for line in sys.stdin:
    w = line.split()
    if not w:
        continue
    v = [float(x) for x in w[1:]]
    if w[0] == "rayleigh":
        out = rayleigh(v)
    elif w[0] == "dispersion":
        out = dispersion(v)
    elif w[0] == "chi2":
        out = [float(stats.chi2.cdf(v[0], v[1]))]
    else:
        sys.exit("unknown case " + w[0])
    print(" ".join(repr(x) for x in out))
