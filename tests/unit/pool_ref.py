#!/usr/bin/python3
"""Reference values for tests/unit/test_pool.c, from scipy (Debian python3-scipy).

  zipf N S COUNTS_FILE   COUNTS_FILE holds N counts, rank 1 first (from pool_zipf_rank).
                         Prints "CHI2 CRIT": the chi-square statistic of the counts against
                         scipy.stats.zipfian(S, N).pmf (the Zipf law k^-S / H(N, S) on 1..N), and
                         scipy.stats.chi2.ppf(0.99, N - 1), the critical value at alpha = .01.
"""
import sys

import numpy as np
from scipy import stats


def zipf(n, s, path):
    counts = np.loadtxt(path, dtype=np.int64, ndmin=1)
    assert len(counts) == n
    expected = stats.zipfian(s, n).pmf(np.arange(1, n + 1)) * counts.sum()
    assert expected.min() >= 5, "every bin needs an expected count of 5 or more"
    chi2 = float(((counts - expected) ** 2 / expected).sum())
    print(repr(chi2), repr(float(stats.chi2.ppf(0.99, n - 1))))


if __name__ == "__main__":
    if sys.argv[1] == "zipf":
        zipf(int(sys.argv[2]), float(sys.argv[3]), sys.argv[4])
    else:
        sys.exit("usage: pool_ref.py zipf N S COUNTS_FILE")
