#!/usr/bin/python3
"""Exact sample statistics for tests/unit/test_hist.c, computed with numpy (Debian python3-numpy).

Reads one integer sample per line from argv[1]; prints "p VALUE" for each percentile in argv[2:]
using the HDR rank definition (the smallest sample whose 1-based rank >= round(p/100 * n), at
least 1, computed from numpy's sorted array), then "mean", "std" (population) and "rms" lines.
"""
import sys

import numpy as np

x = np.sort(np.loadtxt(sys.argv[1], dtype=np.int64, ndmin=1))
n = x.size
for arg in sys.argv[2:]:
    p = float(arg)
    rank = max(1, int(p / 100.0 * n + 0.5))  # same double arithmetic as hist_value_at
    print(arg, int(x[rank - 1]))
f = x.astype(np.float64)
print("mean", repr(float(f.mean())))
print("std", repr(float(f.std())))
print("rms", repr(float(np.sqrt((f * f).mean()))))
