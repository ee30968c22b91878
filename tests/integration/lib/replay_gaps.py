"""A replay's achieved inter-arrival times against its recorded log's, as the wire saw them.

Usage: replay_gaps.py CAPTURE.pcap RECORDED.ndjson SPEED [FILTER]
       replay_gaps.py --at RECORDED.ndjson SPEED
The second form prints the reference sender's schedule (wire_ref --at): one line per request
the replay sends, "OFFSET_NS /small.json?r=N", the offset from the first divided by SPEED.
FILTER, a pcap-filter(7) expression applied as tcpdump reads the capture, picks one sender's
packets where two sent at once (the replay test's reference sender, wire_ref.c, by its ports).
Prints one JSON object: requests recorded (those the replay sends), captured, missing, and the
absolute error of each achieved gap against the recorded gap divided by the speed, in ms:
p50, p90, p99, max; and the first gap's on its own (first_gap_error_ms: the phase's first
request leaves at its instant, not late by the work of starting the phase).

Where the times come from:
- Achieved: the kernel's capture stamps of squall's request packets on loopback, taken by
  tcpdump (libpcap) with nanosecond precision (lib/capture.sh) and read back by tcpdump itself
  (-tt --time-stamp-precision=nano, -A for the request line). Each packet is matched to its
  log line by the unique query parameter r=N the recorded path carries through the rewrite.
- Wanted: the recorded log's own times (ms resolution), sorted, as the replay orders them.
The comparison: for each pair of requests consecutive in the recorded order, |(captured[i+1] -
captured[i]) - (recorded[i+1] - recorded[i]) / speed|, so a constant offset (the phase's start)
cancels and each gap is judged on its own. Quantiles are nearest-rank on the sorted errors.
"""
import json
import re
import subprocess
import sys

STAMP = re.compile(r"^(\d+)\.(\d{9}) IP ")
REQUEST = re.compile(r"(?:GET|HEAD|PUT) /\S*?[?&]r=(\d+)\S* HTTP/1\.1")


def captured(pcap, flt=None):
    """r id -> the first capture stamp (ns) of its request packet."""
    out = subprocess.run(
        ["tcpdump", "-r", pcap, "-n", "-tt", "--time-stamp-precision=nano", "-A"]
        + ([flt] if flt else []),
        check=True, capture_output=True, text=True, errors="replace").stdout
    stamps, now = {}, None
    for line in out.splitlines():
        m = STAMP.match(line)
        if m:
            now = int(m.group(1)) * 1_000_000_000 + int(m.group(2))
            continue
        m = REQUEST.search(line)
        if m and now is not None:
            stamps.setdefault(int(m.group(1)), now)
            now = None
    return stamps


def sent(recorded):
    """(time ns, r id) of the requests the replay sends (all but POSTs), in recorded order."""
    rows = []
    for line in open(recorded):
        try:
            r = json.loads(line)
        except ValueError:
            continue
        if r["verb"] != "POST":
            rows.append((r["ts"] * 1_000_000, int(re.search(r"[?&]r=(\d+)", r["uri"]).group(1))))
    return sorted(rows)


def figures(pcap, recorded, speed, flt=None):
    want, got = sent(recorded), captured(pcap, flt)
    pairs = [(t, got[i]) for t, i in want if i in got]
    err = [abs((b[1] - a[1]) - (b[0] - a[0]) / speed) / 1e6 for a, b in zip(pairs, pairs[1:])]
    first = err[0] if err and pairs[0][0] == want[0][0] else None
    err.sort()

    def q(p):
        return err[min(len(err) - 1, int(p * len(err)))] if err else None
    return {"recorded": len(want), "captured": len(got), "missing": len(want) - len(pairs),
            "gaps": len(err), "speed": speed, "error_ms_p50": q(0.50),
            "error_ms_p90": q(0.90), "error_ms_p99": q(0.99),
            "error_ms_max": err[-1] if err else None, "first_gap_error_ms": first}


def main():
    if sys.argv[1] == "--at":
        want, speed = sent(sys.argv[2]), float(sys.argv[3])
        for t, n in want:
            print(round((t - want[0][0]) / speed), f"/small.json?r={n}")
        return
    print(json.dumps(figures(sys.argv[1], sys.argv[2], float(sys.argv[3]),
                             sys.argv[4] if len(sys.argv) > 4 else None)))


if __name__ == "__main__":
    main()
