#!/usr/bin/python3
"""Reference values for tests/unit/test_compare.c, from scipy (Debian python3-scipy 1.10).
Input: lines on stdin, one case per line; output one line each.

  mw X1 X2 ... | Y1 Y2 ...   scipy.stats.mannwhitneyu(x, y, alternative="two-sided",
                             method="auto", use_continuity=True). Prints "U P EXACT" where
                             EXACT is 1 when scipy 1.10's "auto" picks the exact distribution:
                             a side of at most 8 values and no tie (scipy's _mwu_choose_method,
                             restated here).
  fisher A B C D             scipy.stats.fisher_exact([[A, B], [C, D]]).pvalue.
  quantile Q DB DN X1 ... | Y1 ...
                             the quantile test written from its description (Mood's median
                             test at percentile Q, Conover's "Practical Nonparametric
                             Statistics" section 4.3), not from the C code: pool x and y, T =
                             the pooled value of nearest rank max(1, int(Q/100 N + 0.5)); each
                             sample's values above T and at or below it, divided by DB (x) or
                             DN (y) and rounded half up; Fisher's exact test of that table.
                             Prints "T AX BX AY BY P".
"""
import math
import sys

from scipy import stats


def split(words):
    i = words.index("|")
    return [float(w) for w in words[:i]], [float(w) for w in words[i + 1:]]


def mw(words):
    x, y = split(words)
    r = stats.mannwhitneyu(x, y, alternative="two-sided", method="auto", use_continuity=True)
    both = x + y
    exact = (len(x) <= 8 or len(y) <= 8) and len(set(both)) == len(both)
    return "%r %r %d" % (float(r.statistic), float(r.pvalue), int(exact))


def half_up(v):
    return int(math.floor(v + 0.5))


def quantile(words):
    q, db, dn = float(words[0]), float(words[1]), float(words[2])
    x, y = split(words[3:])
    pooled = sorted(x + y)
    rank = max(1, int(q / 100.0 * len(pooled) + 0.5))
    t = pooled[rank - 1]
    ax = sum(v > t for v in x)
    ay = sum(v > t for v in y)
    table = [[half_up(ax / db), half_up((len(x) - ax) / db)],
             [half_up(ay / dn), half_up((len(y) - ay) / dn)]]
    p = stats.fisher_exact(table).pvalue
    return "%d %d %d %d %d %r" % (t, table[0][0], table[0][1], table[1][0], table[1][1], float(p))


for line in sys.stdin:
    w = line.split()
    if not w:
        continue
    if w[0] == "mw":
        print(mw(w[1:]))
    elif w[0] == "fisher":
        print(repr(float(stats.fisher_exact([[int(w[1]), int(w[2])],
                                              [int(w[3]), int(w[4])]]).pvalue)))
    elif w[0] == "quantile":
        print(quantile(w[1:]))
    else:
        sys.exit("unknown case: " + w[0])
