#!/usr/bin/python3
"""System calls around aligned fleet ticks, from an `strace -f -tt` log (tools/bench/storm.sh
with STORM_STRACE=1; issue 12). Not a test.

  tickcalls.py LOG            one line per tick from the second on: calls from the wake-up to
                              the tick's first write, of them poll, poll calls per request
                              written in the tick, connect calls in the whole log
  tickcalls.py --table NAME FILE   a markdown row over the lines of FILE

A tick starts with the first request written (a `sendto` of a PUT) after at least 0.5 s
without one; its wake-up is the last epoll_wait before that write (the loop's return from the
timer that released the tick). strace's own cost stretches the times, so only counts are used.
"""
import re
import statistics
import sys

CALL = re.compile(r"^\d+\s+(\d+):(\d+):(\d+\.\d+)\s+([a-z_0-9]+)\(")


def parse(path):
    calls = []
    for line in open(path, errors="replace"):
        m = CALL.match(line)
        if m:
            t = int(m.group(1)) * 3600 + int(m.group(2)) * 60 + float(m.group(3))
            calls.append((t, m.group(4), "sendto(" in line and '"PUT ' in line))
    return calls


def ticks(calls):
    starts, last = [], None
    for i, (t, _, put) in enumerate(calls):
        if put:
            if last is None or t - last > 0.5:
                starts.append(i)
            last = t
    connects = sum(1 for c in calls if c[1] == "connect")
    rows = []
    for n, s in enumerate(starts[1:], 1):
        wake = s
        while wake > 0 and calls[wake][1] not in ("epoll_wait", "epoll_pwait"):
            wake -= 1
        before = calls[wake + 1:s]
        end = starts[n + 1] if n + 1 < len(starts) else len(calls)
        tick = calls[wake + 1:end]
        writes = sum(1 for c in tick if c[2])
        polls = sum(1 for c in tick if c[1] == "poll")
        rows.append((len(before), sum(1 for c in before if c[1] == "poll"),
                     polls / writes if writes else 0.0, connects))
    return rows


def table(name, path):
    rows = [list(map(float, l.split())) for l in open(path) if l.strip()]
    if not rows:
        print("| %s | 0 ticks |" % name)
        return
    calls = sorted(r[0] for r in rows)
    print("| %s | %d | %d (%d..%d) | %d | %.2f | %d |" % (
        name, len(rows), statistics.median(calls), calls[0], calls[-1],
        statistics.median(r[1] for r in rows), statistics.median(r[2] for r in rows),
        statistics.median(r[3] for r in rows)))


if __name__ == "__main__":
    if len(sys.argv) == 4 and sys.argv[1] == "--table":
        table(sys.argv[2], sys.argv[3])
    elif len(sys.argv) == 2:
        for r in ticks(parse(sys.argv[1])):
            print("%d %d %.3f %d" % r)
    else:
        sys.exit(__doc__)
