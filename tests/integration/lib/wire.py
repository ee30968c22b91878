"""Gaps between requests as the wire saw them: a tcpdump capture on loopback, read back by
tcpdump itself with nanosecond stamps, checked against the exponential law of a Poisson process.

Usage: wire.py CAPTURE.pcap RATE_PER_S [SKIP_S] [GAPS] [FILTER]
FILTER, a pcap-filter(7) expression applied as tcpdump reads the file (e.g. "src port 40001"),
picks one sender's packets from a capture of two.
Prints one JSON object: requests, gaps used, the share of gaps under 100 us and the law's
1 - exp(-rate * 100 us), the KS statistic and p-value of the shifted gaps, and gap quantiles.

Sources:
- Gaps between the arrivals of a Poisson process of rate lambda are independent and
  exponential with mean 1/lambda, so P(gap < t) = 1 - exp(-lambda t) (the textbook definition
  of the Poisson process, e.g. Ross, Introduction to Probability Models, ch. 5).
- Memorylessness of the exponential law: P(X > s + t | X > s) = P(X > t), so the gaps of
  100 us or more, less 100 us, are again Exp(lambda) (same reference). A sender that needs some
  microseconds per request moves the shortest gaps but leaves this tail alone.
- The KS test, its statistic and p-value: scipy.stats.kstest against scipy.stats.expon with
  scale 1/lambda (scipy's own implementation of the one-sample Kolmogorov-Smirnov test).
"""
import json
import math
import subprocess
import sys

from scipy import stats

SHIFT_NS = 100_000


def request_stamps(pcap, flt=None):
    """Nanosecond stamps of the captured packets, from tcpdump's own reading of the file. A
    segment sent again (the same source and sequence range: a TCP retransmission, e.g. a tail
    loss probe after the VM paused the peer before it could acknowledge; RFC 9293 section 3.8.1,
    RFC 8985 section 7) is one request: only its first sending counts."""
    out = subprocess.run(
        ["tcpdump", "-r", pcap, "-n", "-tt", "--time-stamp-precision=nano", "-S"] +
        ([flt] if flt else []),
        check=True, capture_output=True, text=True).stdout
    stamps, seen = [], set()
    for line in out.splitlines():
        fields = line.split()
        sec = fields[0] if fields else ""
        whole, _, frac = sec.partition(".")
        if not (whole.isdigit() and len(frac) == 9 and frac.isdigit()):
            continue
        # "... IP 127.0.0.1.PORT > 127.0.0.1.PORT: Flags [P.], seq A:B, ..."
        key = (fields[2] if len(fields) > 2 else "",
               fields[fields.index("seq") + 1] if "seq" in fields else line)
        if key in seen:
            continue
        seen.add(key)
        stamps.append(int(whole) * 1_000_000_000 + int(frac))
    stamps.sort()
    return stamps


def gaps_of(stamps, skip_s=0.5, n_gaps=10_000):
    """The first n_gaps gaps (ns) after skip_s: the first requests open connections (handshakes
    delay them)."""
    t0 = stamps[0] + int(skip_s * 1e9) if stamps else 0
    s = [t for t in stamps if t >= t0]
    return [b - a for a, b in zip(s, s[1:])][:n_gaps]


def figures(stamps, rate, skip_s=0.5, n_gaps=10_000):
    gaps = gaps_of(stamps, skip_s, n_gaps)
    law = 1 - math.exp(-rate * SHIFT_NS / 1e9)
    share = sum(g < SHIFT_NS for g in gaps) / len(gaps) if gaps else float("nan")
    tail = [(g - SHIFT_NS) / 1e9 for g in gaps if g >= SHIFT_NS]
    ks = stats.kstest(tail, stats.expon(scale=1 / rate).cdf) if tail else None
    q = sorted(gaps)
    quant = {p: q[min(len(q) - 1, int(p / 100 * len(q)))] / 1e3 for p in (1, 10, 50, 90, 99)} \
        if q else {}
    return {
        "requests": len(stamps),
        "gaps": len(gaps),
        "rate_per_s": rate,
        "share_under_100us": share,
        "law_under_100us": law,
        "share_points_off": abs(share - law) * 100,
        "tail_gaps": len(tail),
        "ks_statistic": ks.statistic if ks else None,
        "ks_pvalue": ks.pvalue if ks else None,
        "gap_us_quantiles": quant,
    }


def main():
    pcap, rate = sys.argv[1], float(sys.argv[2])
    skip = float(sys.argv[3]) if len(sys.argv) > 3 else 0.5
    n = int(sys.argv[4]) if len(sys.argv) > 4 else 10_000
    flt = sys.argv[5] if len(sys.argv) > 5 else None
    print(json.dumps(figures(request_stamps(pcap, flt), rate, skip, n)))


if __name__ == "__main__":
    main()
