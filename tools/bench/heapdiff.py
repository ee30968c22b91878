#!/usr/bin/env python3
"""Live heap by allocation site at two instants of a heaptrack recording, and what grew between.

heaptrack_print reports peaks and leaks but not what grew from one instant to another (its
massif export gave snapshots without trees here), and a soak needs just that. This reads
heaptrack's own data file (decompressed: `zstd -dc FILE.zst > FILE`), replays its allocation
and free events up to each instant, and prints the sites whose live bytes changed most.

Usage: tools/bench/heapdiff.py FILE T1_S T2_S [DEPTH]
  (DEPTH: frames of squall's own code that name a site; default 5)
Record with: SOAK_WRAP="heaptrack -o /tmp/soak-ht" tools/bench/soak.sh build 180 1000 500 10
"""
import collections
import sys


def main():
    path, t1, t2 = sys.argv[1], float(sys.argv[2]) * 1000, float(sys.argv[3]) * 1000
    depth = int(sys.argv[4]) if len(sys.argv) > 4 else 5
    strings, allocs, traces, ips = [None], [], [(0, 0)], [None]
    live, snaps = collections.Counter(), {}
    with open(path) as f:
        for line in f:
            c = line[0]
            if c == '+':
                live[int(line[2:], 16)] += 1
            elif c == '-':
                live[int(line[2:], 16)] -= 1
            elif c == 'c':  # elapsed ms
                t = int(line[2:], 16)
                for at in (t1, t2):
                    if at not in snaps and t >= at:
                        snaps[at] = live.copy()
            elif c == 'a':  # allocation info: size, trace
                p = line.split()
                allocs.append((int(p[1], 16), int(p[2], 16)))
            elif c == 't':  # trace: instruction pointer, parent trace
                p = line.split()
                traces.append((int(p[1], 16), int(p[2], 16)))
            elif c == 'i':  # instruction pointer: address, module [function file line ...]
                ips.append(line.split()[2:])
            elif c == 's':
                strings.append(line[2:].rstrip('\n').split(' ', 1)[-1])
    if len(snaps) < 2:
        sys.exit('heapdiff: the recording ends before both instants')

    def site(trace):
        out = []
        while trace and len(out) < depth:
            ip, trace = traces[trace]
            p = ips[ip]
            if len(p) >= 2 and int(p[1], 16):
                fn = strings[int(p[1], 16)]
                if fn.startswith(('malloc', 'calloc', 'realloc', '__GI___strdup', 'strdup')):
                    continue
                if len(p) >= 4:
                    out.append(f"{fn}@{strings[int(p[2], 16)].split('/')[-1]}:{int(p[3], 16)}")
                else:  # a library without debug information: its exported symbol and file
                    out.append(f"{fn}@{strings[int(p[0], 16)].split('/')[-1]}")
        return ' <- '.join(out) or '(no symbols)'

    def by_site(snap):
        d = collections.Counter()
        for a, n in snap.items():
            if n > 0:
                d[site(allocs[a][1])] += allocs[a][0] * n
        return d

    a, b = by_site(snaps[t1]), by_site(snaps[t2])
    print(f"live heap: {sum(a.values())} B at {t1 / 1000:g} s, {sum(b.values())} B at "
          f"{t2 / 1000:g} s")
    print("change_B  at_T1_B  at_T2_B  site")
    for k in sorted(set(a) | set(b), key=lambda k: -abs(b[k] - a[k]))[:15]:
        print(f"{b[k] - a[k]:+d} {a[k]} {b[k]} {k}")


if __name__ == '__main__':
    main()
