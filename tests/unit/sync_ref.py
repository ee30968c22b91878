#!/usr/bin/python3
"""Reference values for tests/unit/test_sync.c, written from the formulas with numpy, not from
the C code. Input: one case a line on stdin; output as described per case. Instants are integer
nanoseconds, reduced with Python's exact integers (no floating point before the phase).

  gauge BASE P T1 T2 ...
      One window's gauge of the instants: phases th = 2 pi ((t - BASE) mod P) / P; R-bar =
      |mean(exp(i th))| (Mardia & Jupp, "Directional Statistics", 2000, the mean resultant
      length); Z = n R-bar^2; p by Zar's approximation exactly as printed (Zar, "Biostatistical
      Analysis", ch. 27: p = exp(sqrt(1 + 4n + 4(n^2 - Rn^2)) - (1 + 2n)), Rn = n R-bar; from
      memory, checked against pingouin's documented example in the C test); peak-to-mean = the
      largest count of np.bincount of the tenths ((t - BASE) mod P) * 10 // P over n / 10.
      Prints "n rbar z p ptm".
  vonmises SEED N KAPPA P
      N phases drawn by numpy's von Mises generator (mean 1.0 rad, concentration KAPPA, seed
      SEED), turned into instants round(th / 2 pi * P) shifted by a random whole number of
      periods (-5 .. 5). Prints the instants on one line, then the gauge of them as "gauge"
      does, then the expected R-bar of that concentration, A(kappa) = I1(kappa) / I0(kappa)
      (Mardia & Jupp, the von Mises mean resultant length), from scipy.special.
  windows BASE P T1 T2 ...
      The instants split into windows floor((t - BASE) / P) (Python's floor division), in
      order; one line per window that has instants: "index n rbar z p ptm".
"""
import sys

import numpy as np
from scipy import special


def gauge(base, period, ts):
    n = len(ts)
    if n == 0:
        return "0 0 0 1 0"
    off = np.array([(t - base) % period for t in ts], dtype=np.float64)
    th = 2 * np.pi * (off / period)
    rbar = float(np.abs(np.exp(1j * th).sum())) / n
    rn = n * rbar
    p = 1.0 if n < 2 else float(np.exp(np.sqrt(1 + 4 * n + 4 * (n * n - rn * rn)) - (1 + 2 * n)))
    p = min(max(p, 0.0), 1.0)
    tenth = np.array([(t - base) % period * 10 // period for t in ts], dtype=np.int64)
    ptm = float(np.bincount(tenth, minlength=10).max()) / (n / 10)
    return "%d %r %r %r %r" % (n, rbar, n * rbar * rbar, p, ptm)


for line in sys.stdin:
    w = line.split()
    if not w:
        continue
    if w[0] == "gauge":
        base, period = int(w[1]), int(w[2])
        print(gauge(base, period, [int(v) for v in w[3:]]))
    elif w[0] == "vonmises":
        seed, n, kappa, period = int(w[1]), int(w[2]), float(w[3]), int(w[4])
        rng = np.random.default_rng(seed)
        th = np.mod(rng.vonmises(1.0, kappa, n), 2 * np.pi)
        shift = rng.integers(-5, 6, n)
        ts = [int(round(a / (2 * np.pi) * period)) + int(k) * period for a, k in zip(th, shift)]
        print(" ".join(str(t) for t in ts))
        print(gauge(0, period, ts))
        print(repr(float(special.i1(kappa) / special.i0(kappa))))
    elif w[0] == "windows":
        base, period = int(w[1]), int(w[2])
        ts = [int(v) for v in w[3:]]
        for k in sorted({(t - base) // period for t in ts}):
            print(k, gauge(base, period, [t for t in ts if (t - base) // period == k]))
    else:
        sys.exit("unknown case " + w[0])
