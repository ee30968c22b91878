#!/usr/bin/env bash
# report.html from a real run of the embedded target (a known uniform 1-20 ms delay and 10 %
# injected 503s): its structure parsed with python3's html.parser (sections, SVG plots with
# axes and units, the right number of series), its tables against results.json, no scripts or
# network references, `squall report` regenerating the same bytes, and a headless Chromium
# screenshot checked to be non-blank and to show the palette's first colours.
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

# The structure, parsed. Plot order (html_plots.c): rate, errors, p50/p99 over time, then the
# response-time spectrum. Series: one per class in series.csv (read, write, list, and the
# teardown of the objects write created) for rate and errors, two per class (p99, p50) for latency, one per class with histograms for the spectrum
# (read, write, list and the whole-list sample list/all-pages).
/usr/bin/python3 - "$T/run" <<'PY' || FAILED=1
import html.parser, json, sys
d = sys.argv[1]
res = json.load(open(d + "/results.json"))
page = open(d + "/report.html").read()

class P(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.svgs, self.stack, self.tables, self.text = [], [], [], [], []
        self.cell = None
    def handle_starttag(self, tag, a):
        a = dict(a)
        if "id" in a:
            self.ids.append(a["id"])
        cls = a.get("class", "")
        if tag == "svg":
            self.svgs.append({"series": [], "axes": [], "labels": []})
        elif self.svgs and tag == "g" and cls == "series":
            self.svgs[-1]["series"].append(a.get("data-label"))
        elif self.svgs and tag == "g" and cls.startswith("axis"):
            self.svgs[-1]["axes"].append(cls)
        if tag == "text" and "axis-label" in cls:
            self.cell = "axis-label"
        if tag == "table":
            self.tables.append([])
        if tag == "tr" and self.tables:
            self.tables[-1].append([])
        if tag in ("td", "th"):
            self.cell = ""
        self.stack.append(tag)
    def handle_data(self, data):
        if self.cell is not None:
            self.cell += data
    def handle_endtag(self, tag):
        if tag == "text" and self.cell and self.cell.startswith("axis-label"):
            self.svgs[-1]["labels"].append(self.cell[len("axis-label"):])
            self.cell = None
        if tag in ("td", "th") and self.cell is not None and self.tables:
            self.tables[-1][-1].append(self.cell.strip())
            self.cell = None

p = P()
p.feed(page)
bad = 0
def check(desc, cond, detail=""):
    global bad
    print(("ok: " if cond else "FAIL: ") + desc + ("" if cond else "  [" + str(detail) + "]"))
    bad |= not cond

for s in ("objectives", "generator", "tables", "over-time", "spectrum"):
    check("section #%s is present" % s, s in p.ids, p.ids)
check("no <script>, no external reference (self-contained)",
      "<script" not in page and "src=" not in page and "href=" not in page
      and page.count("http://") == page.count("http://www.w3.org/2000/svg") + page.count(res["meta"]["target"]))
check("four plots: rate, errors, latency over time, spectrum", len(p.svgs) == 4, len(p.svgs))
if len(p.svgs) == 4:
    # The teardown deletes what write's PUTs created (answered 201): its class has a rate,
    # errors and latency over time like the others.
    want = [["read", "write", "list", "teardown"], ["read", "write", "list", "teardown"],
            ["read p99", "read p50", "write p99", "write p50", "list p99", "list p50",
             "teardown p99", "teardown p50"],
            ["read", "write", "list", "list/all-pages"]]
    for i, w in enumerate(want):
        check("plot %d has series %s" % (i + 1, w), sorted(p.svgs[i]["series"]) == sorted(w),
              p.svgs[i]["series"])
        check("plot %d has an x and a y axis" % (i + 1),
              sorted(p.svgs[i]["axes"]) == ["axis x", "axis y"], p.svgs[i]["axes"])
        labels = p.svgs[i]["labels"]
        check("plot %d's axis labels carry units: %s" % (i + 1, labels),
              len(labels) == 2 and all("(" in l and ")" in l for l in labels), labels)
    check("the spectrum's y axis is a log scale of ms", "ms, log scale" in p.svgs[3]["labels"][0])
    check("the time axis is in seconds", p.svgs[0]["labels"][1] == "time since the run started (s)")
check("phase boundaries are marked (warm, steady) on the plots over time",
      page.count('<g class="mark">') == 6)

# Tables against results.json: each phase x class row's requests and errors.
rows = {}
for t in p.tables:
    if t and t[0][:3] == ["class", "requests", "per s"]:
        for r in t[1:]:
            rows.setdefault(r[0], []).append(r)
cells = res["cells"]
for phase in ("warm", "steady"):
    for cls in sorted({c["class"] for c in cells if c["phase"] == phase}):
        n = sum(c["count"] for c in cells if c["phase"] == phase and c["class"] == cls
                and c["outcome"] != "cancelled")
        e = sum(c["count"] for c in cells if c["phase"] == phase and c["class"] == cls
                and c["outcome"] not in ("2xx", "3xx", "cancelled"))
        got = [r for r in rows.get(cls, []) if int(r[1]) == n and int(r[3]) == e]
        check("table row %s/%s: %d requests, %d errors as in results.json" % (phase, cls, n, e),
              len(got) >= 1, rows.get(cls))
five = [r for rs in rows.values() for r in rs if "5xx:" in r[4]]
check("errors by kind name the injected 503s (5xx: N)", len(five) >= 3, rows)
verdicts = [r for t in p.tables if t and t[0][0] == "verdict" for r in t[1:]]
check("objective table: one row per check in results.json",
      len(verdicts) == len(res["sections"]["objectives"]["checks"]), len(verdicts))
check("objective table shows FAIL for error-rate checks",
      any(v[0].endswith("FAIL") and v[3].startswith("error rate") for v in verdicts))
sys.exit(bad)
PY

# A run with watches, stamped writes and an aligned fleet gets the propagation, watch-open and
# storm-tick sections; the run above, which has none of them, has none of those sections.
serve_start || exit 1
cat >"$T/watch.yaml" <<YAML
target: {url: "$SERVE_URL", connections: 16, timeout: 5s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  write: {kind: write, method: PUT, path: "/v1/sites/north/gateways/gw-{{seq}}", body: '{"n":{{seq}},"stamp":{{now_ns}}}'}
  follow: {kind: watch, path: "/v1/sites/north/gateways?watch=1"}
  renew: {kind: write, method: PUT, path: "/v1/leases/agent-{{agent}}", body: '{"holder":"agent-{{agent}}"}'}
phases:
  - {name: steady, rate: 50/s, duration: 3s, mix: {write: 1}, watches: {follow: 3}}
  - {name: rush, duration: 3s, fleet: {agents: 20, every: 1s, timing: aligned, send: renew}}
YAML
run_plan "$T/watch" "$T/watch.yaml"
expect_rc "the watch and fleet run completes (exit $RUN_RC)" "$T/watch" 0
serve_stop
/usr/bin/python3 - "$T/watch/report.html" "$T/run/report.html" "$T/watch/results.json" <<'PY' || FAILED=1
import html.parser, json, sys
class P(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.sect, self.series = [], None, {}
    def handle_starttag(self, tag, a):
        a = dict(a)
        if tag == "section":
            self.sect = a.get("id")
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "svg":
            self.series.setdefault(self.sect, []).append([])
        if tag == "g" and a.get("class") == "series":
            self.series[self.sect][-1].append(a.get("data-label"))
w, plain = P(), P()
w.feed(open(sys.argv[1]).read())
plain.feed(open(sys.argv[2]).read())
bad = 0
def check(desc, cond, detail=""):
    global bad
    print(("ok: " if cond else "FAIL: ") + desc + ("" if cond else "  [%s]" % (detail,)))
    bad |= not cond
# This run has watches (open times), stamped writes (propagation) and an aligned fleet (storm
# ticks), so results.json must hold all three and the page must show each section; the plain
# run above has none of them, and its page must leave every one out.
res = json.load(open(sys.argv[3]))
metrics = {m for c in res["cells"] for m in c.get("hist", {})}
has = {"propagation": "propagation" in metrics, "watch-open": "open" in metrics,
       "storms": bool(res["sections"].get("storms"))}
print("results.json has: %s" % ", ".join(k for k, v in has.items() if v))
for s, present in has.items():
    check("results.json of the watch/fleet run records %s" % s, present, has)
    check("the watch/fleet report has section #%s" % s, s in w.ids, w.ids)
    check("the plain report has no section #%s" % s, s not in plain.ids, plain.ids)
check("propagation spectrum: one series, the watch class", w.series.get("propagation") == [["follow"]],
      w.series.get("propagation"))
st = w.series.get("storms", [])
check("storm ticks: one plot for the fleet's action, with 4 series (spread, burst, p99, p50)",
      len(st) == 1 and len(st[0]) == 4, st)
sys.exit(bad)
PY

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

# Headless Chromium screenshot (Debian's chromium): non-blank, i.e. many distinct colours, and
# the palette's first three colours (Okabe-Ito blue #0072B2, vermillion #D55E00, bluish green
# #009E73: the markers are filled with them exactly) present. The PNG is decoded here with zlib
# (PNG spec, W3C REC-png 2003: IHDR, IDAT, filters 0-4), so no imaging package is needed.
if ! command -v chromium >/dev/null; then
    echo "FAIL: chromium is not installed (tools/setup installs it)"
    FAILED=1
else
    PROFILE=$(mktemp -d)
    timeout 90 chromium --headless --no-sandbox --disable-gpu --disable-dev-shm-usage \
        --disable-background-networking --disable-component-update --disable-sync \
        --no-first-run --user-data-dir="$PROFILE" --screenshot="$T/shot.png" \
        --window-size=1280,4000 "file://$T/run/report.html" >"$T/chromium.log" 2>&1
    rm -rf "$PROFILE"
    expect "chromium wrote a screenshot" test -s "$T/shot.png"
    /usr/bin/python3 - "$T/shot.png" <<'PY' || FAILED=1
import struct, sys, zlib
data = open(sys.argv[1], "rb").read()
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
prev, colours, counts = bytearray(stride), {}, {}
want = {(0x00, 0x72, 0xB2): "blue", (0xD5, 0x5E, 0x00): "vermillion", (0x00, 0x9E, 0x73): "green"}
for y in range(h):
    f, line = raw[y * (stride + 1)], bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
    for i in range(stride):
        a = line[i - bpp] if i >= bpp else 0
        b, c = prev[i], prev[i - bpp] if i >= bpp else 0
        if f == 1: line[i] = (line[i] + a) & 255
        elif f == 2: line[i] = (line[i] + b) & 255
        elif f == 3: line[i] = (line[i] + (a + b) // 2) & 255
        elif f == 4:
            pa, pb, pc = abs(b - c), abs(a - c), abs(a + b - 2 * c)
            line[i] = (line[i] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255
    for x in range(0, stride, bpp):
        px = tuple(line[x:x + 3])
        colours[px] = colours.get(px, 0) + 1
    prev = line
bad = 0
white = colours.get((255, 255, 255), 0) / (w * h)
print(("ok" if len(colours) >= 50 else "FAIL") + ": screenshot %dx%d has %d distinct colours "
      "(non-blank needs >= 50); %.0f %% white" % (w, h, len(colours), 100 * white))
bad |= len(colours) < 50 or white > 0.98
for rgb, name in want.items():
    n = colours.get(rgb, 0)
    print(("ok" if n >= 20 else "FAIL") + ": %s #%02X%02X%02X drawn in %d pixels (>= 20)"
          % ((name,) + rgb + (n,)))
    bad |= n < 20
sys.exit(bad)
PY
fi

[ "$FAILED" = 0 ] && echo "report: all checks passed"
exit "$FAILED"
