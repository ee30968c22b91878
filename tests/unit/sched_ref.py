#!/usr/bin/python3
"""Reference values for tests/unit/test_sched.c, from scipy (Debian python3-scipy).

  ks FILE LAMBDA      one-sample Kolmogorov-Smirnov of the gaps in FILE (one per line, seconds)
                      against Exp(LAMBDA) with scipy.stats.kstest; prints "D P".
  ramp FILE R0 R1 T   FILE holds even-schedule start times in ns, k = 0, 1, ...; for each k finds
                      the root of the ramp's integral L(t) = R0 t + (R1 - R0) t^2 / (2 T) = k with
                      scipy.optimize.brentq (bracketing, independent of the closed form) and prints
                      "N MAXDIFF_NS": how many roots below T and the largest |t_k - root| in ns.
  splitmix SEED K...  the K-th output (1-based) of a splitmix64 generator seeded with SEED, one
                      decimal per line, from the published constants (below).
"""
import sys

import numpy as np
from scipy import optimize, stats


def ks(path, lam):
    x = np.loadtxt(path, ndmin=1)
    res = stats.kstest(x, "expon", args=(0.0, 1.0 / lam))
    print(repr(float(res.statistic)), repr(float(res.pvalue)))


# splitmix64 (Steele, Lea & Flood, "Fast Splittable Pseudorandom Number Generators", OOPSLA 2014;
# the same constants as Java's SplittableRandom and Vigna's reference splitmix64.c): the state
# advances by GOLDEN_GAMMA, and each output is mix64 of the state, mix64 being David Stafford's
# "Mix13" variant of MurmurHash3's finaliser.
MASK = (1 << 64) - 1
GOLDEN_GAMMA = 0x9E3779B97F4A7C15


def mix64(z):
    z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
    z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
    return z ^ (z >> 31)


def splitmix(seed, ks):
    # A published check sequence, quoted from memory (Rosetta Code, "Pseudo-random
    # numbers/Splitmix64"): seeded with 1234567 the first outputs are these.
    first = [mix64((1234567 + k * GOLDEN_GAMMA) & MASK) for k in range(1, 4)]
    assert first == [6457827717110365317, 3203168211198807973, 9817491932198370423], first
    for k in ks:
        print(mix64((seed + k * GOLDEN_GAMMA) & MASK))


def ramp(path, r0, r1, T):
    t = np.loadtxt(path, dtype=np.int64, ndmin=1)

    def lam(s, k):
        return r0 * s + (r1 - r0) * s * s / (2 * T) - k

    total = lam(T, 0)
    n = int(np.ceil(total))
    worst = 0.0
    for k in range(min(n, t.size)):
        root = 0.0 if k == 0 else optimize.brentq(lam, 0.0, T, args=(k,), xtol=1e-13, rtol=1e-15)
        worst = max(worst, abs(t[k] - root * 1e9))
    print(n, repr(worst))


if __name__ == "__main__":
    if sys.argv[1] == "ks":
        ks(sys.argv[2], float(sys.argv[3]))
    elif sys.argv[1] == "ramp":
        ramp(sys.argv[2], float(sys.argv[3]), float(sys.argv[4]), float(sys.argv[5]))
    elif sys.argv[1] == "splitmix":
        splitmix(int(sys.argv[2]), [int(k) for k in sys.argv[3:]])
    else:
        sys.exit("usage: sched_ref.py ks FILE LAMBDA | ramp FILE R0 R1 T | splitmix SEED K...")
