#!/usr/bin/env bash
# report.html from real runs of the embedded target: a plain run (a known uniform 1-20 ms delay
# and 10 % injected 503s, no watches, no fleet); a run with watches, an aligned fleet storm, a
# reconnect storm (POST /admin/drop-watches) and generator-bound seconds, as two shards whose
# merge is rendered too. Each page's structure is parsed with python3's html.parser
# (report_check.py: sections, the verdict banner, SVG plots with their series, threshold levels,
# shaded seconds, drop marks, heat-map cells against series.csv, status codes against
# results.json), no scripts or network references, `squall report` regenerating the same bytes,
# and a headless Chromium screenshot of each page checked to be non-blank.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/report"
rm -rf "$T"
mkdir -p "$T"

serve_start --delay uniform:1ms..20ms --fail-rate 0.1 || exit 1
curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
cat >"$T/plan.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
  write: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"n":{{seq}}}'}
  list: {kind: list, path: /v1/sites/north/gateways, page: 50}
phases:
  - {name: warm, rate: 50/s, duration: 2s, mix: {read: 1, write: 1}}
  - {name: steady, rate: 150/s, duration: 4s, mix: {read: 5, write: 2, list: 1}}
objectives:
  - {class: read, p99: 1s}
  - {class: "*", error-rate: 1%}
YAML
run_plan "$T/run" "$T/plan.yaml"
expect "the run ends with exit 1 (10 % errors break error-rate <= 1 %; got $RUN_RC)" \
    test "$RUN_RC" = 1
expect "squall run wrote report.html" test -s "$T/run/report.html"
serve_stop

# The page against results.json and series.csv (report_check.py: sections, the verdict banner,
# the header, the tables, plots over time, heat maps, slower-than-x per phase, exact status
# codes).
/usr/bin/python3 "$SRCDIR/tests/integration/report_check.py" plain "$T/run" || FAILED=1

# Watches, an aligned fleet storm over too few connections (generator-bound seconds, accepted by
# the plan), and a reconnect storm (the target drops every watch at 2 s into the second phase),
# as two shards run at once against one target, then merged.
serve_start || exit 1
cat >"$T/storm.yaml" <<YAML
seed: 11
target: {url: "$SERVE_URL", http: "1.1", connections: 2, timeout: 5s}
accept: [generator-bound]
requests:
  renew: {kind: write, method: PUT, path: "/v1/sites/north/leases/gw-{{agent}}", body: '{"holder":"gw-{{agent}}","stamp":{{now_ns}}}'}
  follow:
    kind: watch
    path: "/v1/sites/north/leases?watch=1"
    stamp-key: stamp
    reconnect: {policy: full-jitter, base: 100ms, cap: 1s}
phases:
  - name: spread
    duration: 3s
    fleet: {agents: 60, every: 1s, timing: spread, send: renew}
    watches: {follow: 3}
  - name: reconnect-storm
    duration: 4s
    fleet: {agents: 300, every: 1s, timing: aligned, send: renew}
    watches: {follow: 3, open: at-once}
    actions:
      - {name: drop-watches, at: 2s, http: {method: POST, url: /admin/drop-watches}}
objectives:
  - {class: renew, p99: 2s}
  - {class: follow, metric: propagation, p99: 2s}
YAML
timeout 120 "$SQUALL" run "$T/storm.yaml" -o "$T/storm-1" --shard 1/2 --quiet >"$T/storm-1.out" 2>&1 &
S1=$!
timeout 120 "$SQUALL" run "$T/storm.yaml" -o "$T/storm-2" --shard 2/2 --quiet >"$T/storm-2.out" 2>&1
RC2=$?
wait "$S1"
RC1=$?
serve_stop
expect "both storm shards pass with their generator-bound seconds accepted (exit $RC1, $RC2)" \
    test "$RC1" = 0 -a "$RC2" = 0
"$SQUALL" merge "$T/storm-1" "$T/storm-2" -o "$T/storm-m" >"$T/storm-m.out" 2>&1
expect "squall merge writes the merged report" test -s "$T/storm-m/report.html"
/usr/bin/python3 - "$T/storm-1" <<'PY'
import json, sys
g = json.load(open(sys.argv[1] + "/results.json"))["sections"]["generator"]["generator_bound"]
print("generator-bound seconds of shard 1 (this shared machine; 300 renewals over 2 connections):",
      g["list"])
PY
/usr/bin/python3 "$SRCDIR/tests/integration/report_check.py" storm "$T/storm-1" || FAILED=1
/usr/bin/python3 "$SRCDIR/tests/integration/report_check.py" merged "$T/storm-m" || FAILED=1

# `squall report` regenerates the same page from results.json and series.csv.
cp "$T/run/report.html" "$T/first.html"
rm "$T/run/report.html"
"$SQUALL" report "$T/run" >"$T/report.stdout" 2>&1
RC=$?
expect "squall report exits 0 (got $RC) and writes report.html" test "$RC" = 0 -a -s "$T/run/report.html"
expect "and writes the same bytes squall run wrote" cmp -s "$T/first.html" "$T/run/report.html"
"$SQUALL" report "$T/nonexistent" >/dev/null 2>&1
RC=$?
expect "squall report on a missing directory exits 6 (got $RC)" test "$RC" = 6
"$SQUALL" report >/dev/null 2>&1
RC=$?
expect "squall report with no directory exits 2 (got $RC)" test "$RC" = 2

# Headless Chromium screenshots (Debian's chromium) of the three pages: each non-blank (many
# distinct colours, not all white), with the palette's first colours (Okabe-Ito blue #0072B2,
# vermillion #D55E00: the markers are filled with them exactly) and the heat map's darkest shade
# (#08306B, the busiest cell) drawn; the storm page also the drop marks' vermillion lines. The
# PNG is decoded with zlib (PNG spec, W3C REC-png 2003: IHDR, IDAT, filters 0-4), so no imaging
# package is needed; plot frames (their grey edges one plot height apart) are located and each
# must hold coloured ink. Kept under 30 s: three whole pages laid out 1200 CSS px wide, shot at
# device scale 0.5 (a quarter of the pixels to decode in pure Python).
if ! command -v chromium >/dev/null; then
    echo "FAIL: chromium is not installed (tools/setup installs it)"
    FAILED=1
else
    for page in run storm-1 storm-m; do
        PROFILE=$(mktemp -d)
        timeout 90 chromium --headless --no-sandbox --disable-gpu --disable-dev-shm-usage \
            --disable-background-networking --disable-component-update --disable-sync \
            --no-first-run --user-data-dir="$PROFILE" --screenshot="$T/shot-$page.png" \
            --force-device-scale-factor=0.5 --window-size=1200,13000 "file://$T/$page/report.html" >"$T/chromium-$page.log" 2>&1
        rm -rf "$PROFILE"
        expect "chromium wrote a screenshot of $page" test -s "$T/shot-$page.png"
    done
    /usr/bin/python3 - "$T" <<'PY' || FAILED=1
import collections, struct, sys, zlib
def pixels(path):
    data = open(path, "rb").read()
    assert data[:8] == b"\x89PNG\r\n\x1a\n", "not a PNG"
    pos, idat = 8, b""
    while pos < len(data):
        n, kind = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + n]
        if kind == b"IHDR":
            w, h, depth, ctype, _, _, interlace = struct.unpack(">IIBBBBB", body)
        elif kind == b"IDAT":
            idat += body
        pos += 12 + n
    assert depth == 8 and ctype in (2, 6) and interlace == 0, (depth, ctype, interlace)
    bpp = 4 if ctype == 6 else 3
    raw, stride = zlib.decompress(idat), w * bpp
    prev, colours, frame, hue = bytearray(stride), {}, [], []
    for y in range(h):
        f, line = raw[y * (stride + 1)], bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
        if f == 2:
            line = bytearray((a + b) & 255 for a, b in zip(line, prev))
        elif f:
            for i in range(stride):
                a = line[i - bpp] if i >= bpp else 0
                b, c = prev[i], prev[i - bpp] if i >= bpp else 0
                if f == 1: line[i] = (line[i] + a) & 255
                elif f == 3: line[i] = (line[i] + (a + b) // 2) & 255
                elif f == 4:
                    pa, pb, pc = abs(b - c), abs(a - c), abs(a + b - 2 * c)
                    line[i] = (line[i] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255
        greys = coloured = 0
        if bytes(line).count(255) != stride:
            for px, n in collections.Counter(zip(line[0::bpp], line[1::bpp], line[2::bpp])).items():
                if px != (255, 255, 255):
                    colours[px] = colours.get(px, 0) + n
                if px[0] == px[1] == px[2] and 0x80 <= px[0] <= 0xD0:
                    greys += n
                elif max(px) - min(px) > 40:
                    coloured += n
        frame.append(greys > w // 2)  # a plot frame's top or bottom edge (#999 stroke)
        hue.append(coloured)
        prev = line
    # Plot regions: pairs of frame edges one plot height apart (the height most pairs share).
    edges = [y for y in range(h) if frame[y]]
    gaps = {}
    for a in edges:
        for b in edges:
            if 150 < b - a < 450:
                gaps[b - a] = gaps.get(b - a, 0) + 1
    height = max(gaps, key=gaps.get) if gaps else 0
    plots = [(a, a + height) for a in edges if height and any(abs(b - a - height) <= 1 for b in edges)]
    return w, h, colours, plots, hue
bad = 0
want = {(0x00, 0x72, 0xB2): "blue", (0xD5, 0x5E, 0x00): "vermillion",
        (0x08, 0x30, 0x6B): "the heat map's darkest shade"}
for page in ("run", "storm-1", "storm-m"):
    w, h, colours, plots, hue = pixels("%s/shot-%s.png" % (sys.argv[1], page))
    ink = sum(colours.values())
    empty = [(a, b) for a, b in plots if sum(hue[a + 2:b - 1]) < 50]
    print(("ok" if len(plots) >= 3 and not empty else "FAIL") + ": %s: %d plot frames located "
          "(>= 3 of the page's plots), each with coloured ink inside (lines, cells or shading); "
          "empty: %s" % (page, len(plots), empty))
    bad |= len(plots) < 3 or bool(empty)
    print(("ok" if len(colours) >= 50 else "FAIL") + ": %s: screenshot %dx%d has %d distinct "
          "colours (non-blank needs >= 50); %.0f %% of pixels not white"
          % (page, w, h, len(colours), 100 * ink / (w * h)))
    bad |= len(colours) < 50 or ink < 0.02 * w * h
    for rgb, name in want.items():
        n = colours.get(rgb, 0)
        print(("ok" if n >= 20 else "FAIL") + ": %s: %s #%02X%02X%02X drawn in %d pixels (>= 20)"
              % ((page, name) + rgb + (n,)))
        bad |= n < 20
sys.exit(bad)
PY
fi

[ "$FAILED" = 0 ] && echo "report: all checks passed"
exit "$FAILED"
