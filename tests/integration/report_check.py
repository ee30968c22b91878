#!/usr/bin/python3
"""Checks a report.html against its own results.json and series.csv (report.sh).

    report_check.py plain DIR    the plain run: no watches, no fleet, 503s injected
    report_check.py storm DIR    watches, a fleet storm, dropped watches, generator-bound seconds
    report_check.py merged DIR   the merge of two storm shards

The page is parsed with html.parser; every figure is read back from its SVG: the series'
labels, the axes' labels, the level lines (objectives' thresholds), the shaded bands
(generator-bound seconds), the marks (phase starts, actions, drops) and the heat map's cells,
whose counts (<title>) must add up to series.csv's completions of the class.
"""
import csv
import html.parser
import json
import re
import sys


class Page(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.section, self.figure = [], None, None
        self.svgs, self.tables, self.text = [], [], None
        self.banner, self.in_banner = "", 0
        self.cell, self.in_title = None, False
        self.visible = []  # every text node: what a reader sees

    def handle_starttag(self, tag, a):
        a = dict(a)
        cls = a.get("class", "")
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "section":
            self.section = a.get("id")
        if tag == "figure":
            self.figure = dict(a)
        if self.in_banner:
            self.in_banner += tag == "div"
        elif tag == "div" and a.get("id") == "verdict":
            self.in_banner = 1
            self.banner_class = cls
        if tag == "svg":
            self.svgs.append({"section": self.section, "figure": self.figure, "series": [],
                              "axes": [], "labels": [], "levels": 0, "bands": 0, "marks": [],
                              "drops": 0, "heat": [], "points": [], "notes": [],
                              "title": a.get("aria-label", "")})
        svg = self.svgs[-1] if self.svgs else None
        if svg is not None and tag == "g":
            if cls == "series":
                svg["series"].append(a.get("data-label"))
            elif cls.startswith("axis"):
                svg["axes"].append(cls)
            elif cls == "level":
                svg["levels"] += 1
            elif cls.startswith("mark"):
                svg["marks"].append(None)
                svg["drops"] += "drop" in cls
        if svg is not None and tag == "path" and svg["series"] and "d" in a and a.get("fill") == "none":
            svg["points"].append([tuple(map(float, p.split()))
                                  for p in re.split("[ML]", a["d"]) if p.strip()])
        if svg is not None and tag == "rect":
            svg["bands"] += cls == "band"  # the legend's key is "band key"
            self.in_rect = True
        if svg is not None and tag == "title" and getattr(self, "in_rect", False):
            self.in_title = True
        if tag == "text" and ("axis-label" in cls or "axis-note" in cls):
            self.text = ("label" if "axis-label" in cls else "note", "")
        if tag == "table":
            self.tables.append([])
        if tag == "tr" and self.tables:
            self.tables[-1].append([])
        if tag in ("td", "th"):
            self.cell = ""

    def handle_data(self, data):
        self.visible.append(data)
        if self.in_banner:
            self.banner += data
        if self.text is not None:
            self.text = (self.text[0], self.text[1] + data)
        if self.cell is not None:
            self.cell += data
        if self.in_title and self.svgs:
            self.svgs[-1]["heat"].append(float(data))
            self.in_title = False

    def handle_endtag(self, tag):
        if self.in_banner and tag == "div":
            self.in_banner -= 1
        if tag == "text" and self.text is not None:
            self.svgs[-1]["labels" if self.text[0] == "label" else "notes"].append(self.text[1])
            self.text = None
        if tag == "rect":
            self.in_rect = False
        if tag in ("td", "th") and self.cell is not None and self.tables:
            self.tables[-1][-1].append(self.cell.strip())
            self.cell = None
        if tag == "figure":
            self.figure = None


bad = 0


def check(desc, cond, detail=""):
    global bad
    print(("ok: " if cond else "FAIL: ") + desc + ("" if cond else "  [%s]" % (detail,)))
    bad |= not cond


mode, d = sys.argv[1], sys.argv[2]
res = json.load(open(d + "/results.json"))
page_text = open(d + "/report.html").read()
p = Page()
p.feed(page_text)
rows = list(csv.DictReader(open(d + "/series.csv")))
run = res["sections"].get("run", {})
gen = res["sections"]["generator"]
cells = res["cells"]

# ---- every page -----------------------------------------------------------------------------
check("no <script>, no external reference (self-contained)",
      "<script" not in page_text and "src=" not in page_text
      and all(h.startswith("actions/") for h in re.findall(r'href="([^"]*)"', page_text))
      and page_text.count("http://") == page_text.count("http://www.w3.org/2000/svg")
      + page_text.count(res["meta"]["target"]))
check("the old percentile spectrum is gone", "spectrum" not in p.ids and "percentile spectrum"
      not in page_text.lower(), [i for i in p.ids if "spect" in i])
for s in ("verdict", "objectives", "generator", "tables", "over-time", "heat", "tails"):
    check("section #%s is present" % s, s in p.ids, p.ids)
# 1. The banner is the run's verdict, the limits inside it.
want = {"pass": "PASS:", "fail": "FAIL:", "inconclusive": "INCONCLUSIVE:"}.get(run.get("verdict"), "NO VERDICT")
check("the banner starts with the run's verdict %s" % want, p.banner.strip().startswith(want),
      p.banner[:80])
gs = gen["generator_bound"]["seconds"]
check("generator-bound seconds (%d) are stated inside the banner, never below a clean PASS" % gs,
      ("GENERATOR-BOUND for %d s" % gs in p.banner) == (gs > 0)
      and (gs == 0 or "good" not in p.banner_class), (p.banner_class, p.banner[:200]))
check("no other banner on the page (one verdict)", page_text.count('class="banner') == 1)
# Header rows.
meta_rows = {r[0]: r[1] for t in p.tables for r in t if len(r) == 2}
for k in ("plan", "seed", "overrides", "command line", "squall", "target", "exit code"):
    check("header row %s" % k, k in meta_rows, sorted(meta_rows))
check("header exit code is results.json's (%s)" % run.get("exit_code"),
      meta_rows.get("exit code") == str(run.get("exit_code")))
check("header target has no user info", "@" not in meta_rows.get("target", "@"))
# Time plots: seconds since the start, the wall-clock start on the axis.
timed = [s for s in p.svgs if s["section"] in ("over-time", "heat", "watches", "storms")]
check("every plot over time is in seconds since the start with the wall-clock start noted",
      timed and all(s["labels"][1] == "time since the run started (s)"
                    and s["notes"] and re.match(r"0 s = \d{4}-\d\d-\d\d \d\d:\d\d:\d\d UTC", s["notes"][0])
                    for s in timed), [(s["labels"], s["notes"]) for s in timed])
check("no tick label in scientific notation", not re.search(r'class="tick"[^>]*>[-0-9.]+e[-+]?\d', page_text))
# Offered vs achieved.
off = [s for s in p.svgs if (s["figure"] or {}).get("class") == "offered"]
check("offered vs achieved: completed, started and planned starts on one plot",
      len(off) == 1 and off[0]["series"] == ["completed", "started", "planned starts"],
      [s["series"] for s in off])
# Queue wait and in flight over time: series.csv's run figures (the peaks, the longest wait).
inf = [s for s in p.svgs if (s["figure"] or {}).get("class") == "in-flight"]
qw = [s for s in p.svgs if (s["figure"] or {}).get("class") == "queue-wait"]
merged = mode == "merged"
peak_names = ["in flight, peak", "queued, peak"]
if merged:  # a merge adds the shards' peaks: labelled an upper bound on the plot
    peak_names = [n + " (upper bound)" for n in peak_names]
check("series.csv has the run's figures %s" % ("with _upper names" if merged else ""),
      rows and all(k in rows[0] for k in (
          "run_watch_open", "run_watch_dropped", "run_watch_reconnects", "run_watch_events",
          "run_queue_wait_max_ms",
          "run_watch_propagation_p99_upper_ms" if merged else "run_watch_propagation_p99_ms",
          "run_in_flight_peak_upper" if merged else "run_in_flight_peak",
          "run_queued_peak_upper" if merged else "run_queued_peak")), list(rows[0]) if rows else [])
check("queue wait and in flight over time: the peaks in flight and queued on one plot",
      len(inf) == 1 and inf[0]["series"] == peak_names, [s["series"] for s in inf])
check("and the longest queue wait on its own (ms)",
      len(qw) == 1 and qw[0]["series"] == ["longest queue wait"]
      and qw[0]["labels"][0] == "queue wait (ms)", [(s["series"], s["labels"]) for s in qw])
# One point per second: the figure of the second's first row (every row of a second repeats it).
per_second = {}
for r in rows:
    per_second.setdefault(int(r["second"]), r)
check("every row of a second carries the same run figures",
      all(all(r[k] == per_second[int(r["second"])][k] for k in r if k.startswith("run_"))
          for r in rows))
if inf:
    check("in-flight plot: one point per second of series.csv (%d)" % len(per_second),
          all(len(pts) == len(per_second) for pts in inf[0]["points"]),
          [len(pts) for pts in inf[0]["points"]])
# One number style, the terminal's: no thousands separators anywhere on the page.
visible = " ".join(p.visible)
check("no thousands separator in the page's text", not re.search(r"\d,\d{3}(?!\d)", visible),
      re.findall(r".{20}\d,\d{3}(?!\d).{10}", visible)[:3])
# Shaded generator-bound seconds on every plot over time.
check("each plot over time shades the %d generator-bound seconds" % gs,
      all(s["bands"] == len(gen["generator_bound"]["list"]) for s in p.svgs
          if s["section"] in ("over-time", "watches")),
      [s["bands"] for s in p.svgs if s["section"] in ("over-time", "watches")])
# Latency per class with the objectives' thresholds as levels.
lat = [s for s in p.svgs if (s["figure"] or {}).get("class") == "latency"]
answered = sorted({r["class"] for r in rows if int(r["completed"]) > 0})
check("one latency plot per class that completed requests %s" % answered,
      sorted(re.match(r"Response time of (\S+) ", s["title"]).group(1) for s in lat) == answered,
      [s["title"] for s in lat])
objs = {}
for c in res["sections"].get("objectives", {}).get("checks", []):
    m = re.match(r"p([\d.]+) of response <= ", c["text"])
    if m and c["scope"] == "run":
        objs[c["class"]] = objs.get(c["class"], 0) + 1
for s in lat:
    cls = re.match(r"Response time of (\S+) ", s["title"]).group(1)
    check("latency of %s: p99, p50 (p99.9) and %d threshold line(s)" % (cls, objs.get(cls, 0)),
          s["series"][:2] == ["p99", "p50"] and s["levels"] == objs.get(cls, 0)
          and "log scale" in s["labels"][0], (s["series"], s["levels"]))
# Heat maps: one per class of series-hist.csv, cells adding up to series.csv's completions.
hist_classes = sorted({r["class"] for r in csv.DictReader(open(d + "/series-hist.csv"))})
heat = [s for s in p.svgs if s["section"] == "heat"]
check("one heat map per class of series-hist.csv %s" % hist_classes,
      sorted(re.match(r"Response times of (\S+) ", s["title"]).group(1) for s in heat) == hist_classes,
      [s["title"] for s in heat])
for s in heat:
    cls = re.match(r"Response times of (\S+) ", s["title"]).group(1)
    want = sum(int(r["completed"]) for r in rows if r["class"] == cls)
    check("heat map of %s: its cells count %d requests, series.csv's completions (%d)"
          % (cls, sum(s["heat"]), want), abs(sum(s["heat"]) - want) < 0.5 and len(s["heat"]) > 0)
# Slower than x: per phase, never pooled; both axes logarithmic; the curve falls.
tails = [s for s in p.svgs if s["section"] == "tails"]
for ph in sorted({c["phase"] for c in cells}):
    want = sorted({c["class"] for c in cells if c["phase"] == ph and "response" in c.get("hist", {})
                   and c["outcome"] != "cancelled"})
    got = [s for s in tails if (s["figure"] or {}).get("data-phase") == ph]
    check("phase %s: one slower-than-x plot with its classes %s" % (ph, want),
          len(got) == 1 and sorted(got[0]["series"]) == want, [g["series"] for g in got])
check("slower-than-x axes are both logarithmic, in ms and %",
      tails and all(s["labels"] == ["slower than x (%, log scale)", "response time x (ms, log scale)"]
                    for s in tails), [s["labels"] for s in tails])
check("every slower-than-x curve only falls (SVG y grows down)",
      all(all(b[1] >= a[1] - 0.05 and b[0] >= a[0] - 0.05 for a, b in zip(pts, pts[1:]))
          for s in tails for pts in s["points"]))
# Exact status codes: the tables list them, and they add up to results.json's.
codes = {}
for c in cells:
    for k, n in c.get("status", {}).items():
        codes[(c["phase"], c["class"], k)] = codes.get((c["phase"], c["class"], k), 0) + n
check("results.json has exact status codes", len(codes) > 0)
listed = [r[-1] for t in p.tables if t and t[0][:3] == ["class", "requests", "per s"] for r in t[1:]]
check("the tables have a status codes column", listed and all(l for l in listed), listed)

# ---- per kind -----------------------------------------------------------------------------
if mode == "plain":
    five = sum(n for (ph, cl, k), n in codes.items() if k == "503")
    # Whole-list samples (list/all-pages) are no single answer and carry no status code.
    five_cells = sum(c["count"] for c in cells if c["outcome"] == "5xx"
                     and not c["class"].endswith("/all-pages"))
    check("status 503 counted exactly (%d) as the 5xx cells (%d): the target injects only 503"
          % (five, five_cells), five == five_cells and five > 0)
    check("2xx answers are 200 (GET) and 201/200 (PUT) only",
          {k for (_, _, k) in codes} <= {"200", "201", "204", "503"}, {k for (_, _, k) in codes})
    check("the tables list 503", any("503: " in l for l in listed), listed)
    # The tables against results.json: each phase x class row's requests, errors and codes.
    table_rows = {}
    for t in p.tables:
        if t and t[0][:3] == ["class", "requests", "per s"]:
            for r in t[1:]:
                table_rows.setdefault(r[0], []).append(r)
    for phase in ("warm", "steady"):
        for cls in sorted({c["class"] for c in cells if c["phase"] == phase}):
            mine = [c for c in cells if c["phase"] == phase and c["class"] == cls]
            n = sum(c["count"] for c in mine if c["outcome"] != "cancelled")
            e = sum(c["count"] for c in mine if c["outcome"] not in ("2xx", "3xx", "cancelled"))
            got = [r for r in table_rows.get(cls, []) if int(r[1]) == n and int(r[3]) == e]
            check("table row %s/%s: %d requests, %d errors as in results.json" % (phase, cls, n, e),
                  len(got) >= 1, table_rows.get(cls))
            cc = {}
            for c in mine:
                for k, v in c.get("status", {}).items():
                    cc[k] = cc.get(k, 0) + v
            # A whole-list sample (list/all-pages) is no single answer: it has no status code.
            text = ", ".join("%s: %d" % (k, v) for k, v in sorted(cc.items())) or "-"
            check("table row %s/%s lists the status codes %s" % (phase, cls, text),
                  any(r[-1] == text for r in table_rows.get(cls, [])), table_rows.get(cls))
    five = [r for rs in table_rows.values() for r in rs if "5xx:" in r[4]]
    check("errors by kind name the injected 503s (5xx: N)", len(five) >= 3, table_rows)
    verdicts = [r for t in p.tables if t and t[0][0] == "verdict" for r in t[1:]]
    check("objective table: one row per check in results.json",
          len(verdicts) == len(res["sections"]["objectives"]["checks"]), len(verdicts))
    check("objective table shows FAIL for error-rate checks",
          any(v[0].endswith("FAIL") and v[3].startswith("error rate") for v in verdicts))
    for s in ("watches", "storms", "propagation", "watch-open", "sync"):
        check("the plain report has no section #%s" % s, s not in p.ids, p.ids)
    check("no drop marks on a run without watches", all(s["drops"] == 0 for s in p.svgs))
else:
    for s in ("watches", "storms", "propagation", "watch-open", "sync"):
        check("section #%s is present" % s, s in p.ids, p.ids)
    check("this run had generator-bound seconds (%d) to show" % gs, gs >= 1)
    drops = sum(len(ph["reconnect_log"]["ended_ns"]) for ph in res["sections"]["watches"].values())
    check("results.json logs dropped streams (%d)" % drops, drops > 0)
    for s in p.svgs:
        if s["section"] in ("over-time", "heat", "watches"):
            check("drop moments marked on %r" % s["title"][:50], s["drops"] >= 1, s["drops"])
    # Storm ticks are drawn over their phase's span of the run's time axis: the drops (all in
    # the reconnect-storm phase, POST /admin/drop-watches 2 s into it) are marked on its plots,
    # and not on the spread phase's, whose span ends before them.
    for s in p.svgs:
        if s["section"] == "storms":
            inside = "in phase reconnect-storm" in s["title"]
            check("storm ticks %r: %s drop mark" % (s["title"][:60], "a" if inside else "no"),
                  (s["drops"] >= 1) == inside, s["drops"])
    w = {(s["figure"] or {}).get("id"): s for s in p.svgs if s["section"] == "watches"}
    check("watches over time: streams dropped, reconnects sent and streams open on one plot",
          "watch-drops" in w and w["watch-drops"]["series"]
          == ["streams dropped", "reconnects sent", "streams open (end of the second)"], w.keys())
    prop_name = "propagation p99 (upper bound)" if merged else "propagation p99"
    check("watch events per second and propagation p99 per second (%s) plots" % prop_name,
          w.get("watch-events", {}).get("series") == ["events received"]
          and w.get("watch-propagation", {}).get("series") == [prop_name]
          and "log scale" in w["watch-propagation"]["labels"][0], list(w))
    # The plotted figures against series.csv and results.json's reconnect log (the watch room's
    # own record of each stream that ended): drops, reconnects and events add up.
    srow = list(per_second.values())
    n_drop = sum(int(float(r["run_watch_dropped"])) for r in srow)
    n_recon = sum(int(float(r["run_watch_reconnects"])) for r in srow)
    n_events = sum(int(float(r["run_watch_events"])) for r in srow)
    log_drops = sum(len([v for v in ph["reconnect_log"]["ended_ns"] if v > 0])
                    for ph in res["sections"]["watches"].values())
    check("series.csv's dropped streams (%d) are the reconnect log's (%d), and more than 0"
          % (n_drop, log_drops), n_drop == log_drops and n_drop > 0)
    cap = re.search(r"Watch streams dropped \((\d+)\) and reconnects sent \((\d+)\)", page_text)
    check("the watch plot's caption counts series.csv's drops (%d) and reconnects (%d)"
          % (n_drop, n_recon), cap and cap.groups() == (str(n_drop), str(n_recon)),
          cap and cap.groups())
    cap = re.search(r"Watch events received in each second \((\d+) in all\)", page_text)
    check("the events plot's caption counts series.csv's events (%d)" % n_events,
          cap and int(cap.group(1)) == n_events and n_events > 0, cap and cap.group(1))
    # The drop marks are series.csv's drops: on the offered-load plot (the whole run), each
    # second with drops marked once with its count, at that second's start.
    chunk = page_text[page_text.index('<figure class="offered"'):]
    chunk = chunk[:chunk.index("</figure>")]
    marked = {round(float(x) , 1): int(n) for x, n in re.findall(
        r'class="mark drop"><line x1="([\d.]+)"[^>]*/><text[^>]*>(\d+) dropped</text>', chunk)}
    want = sorted(int(float(r["run_watch_dropped"])) for r in srow if float(r["run_watch_dropped"]) > 0)
    check("drop marks: one per second with drops, labelled with series.csv's counts %s" % want,
          sorted(marked.values()) == want, marked)
    if merged:
        check("merged: the in-flight caption says the peaks are the shards' added, an upper bound",
              "merged: the shards' peaks added, an upper bound" in page_text)
        check("merged: the propagation caption says each second is the largest shard's p99",
              "each second shows the largest shard's p99, an upper bound" in page_text)
    opens = [float(r["run_watch_open"]) for r in srow]
    check("streams were open (%s) and their line has a point per second" % max(opens),
          max(opens) > 0 and len(w["watch-drops"]["points"][2]) == len(per_second),
          len(w["watch-drops"]["points"][2]))
    big = [c for t in p.tables for r in t for c in r if re.fullmatch(r"\d{4,}", c)]
    check("figures of 1000 and more are written without separators (%s)" % big[:3], big, big)
    st = [s for s in p.svgs if s["section"] == "storms"]
    n_actions = sum(len(ph.get("actions", [])) for ph in res["sections"]["storms"].values())
    check("storm ticks: two plots per fleet action (spread and burst; tick p50/p99)",
          len(st) == 2 * n_actions and all(
              s["series"] in (["dispatch spread (first to last write)", "burst (first write to last answer)"],
                              ["tick's response p99", "tick's response p50"]) for s in st),
          [s["series"] for s in st])
    sy = [s for s in p.svgs if s["section"] == "sync"]
    n_sync = sum(len(ph.get("actions", [])) for ph in res["sections"]["sync"].values())
    # Marks: the two phase starts and the drop-watches action at least (html_phase_marks).
    check("synchronisation: one R-bar plot per fleet action (%d), the 'all at one instant' line "
          "at 1, phases and the drop-watches action marked" % n_sync,
          len(sy) == n_sync == 2 and all(
              s["series"][0] == "R\u0304 of a whole window" and s["levels"] >= 1
              and len(s["marks"]) >= 3 for s in sy),
          [(s["series"], s["levels"], len(s["marks"])) for s in sy])
    prop = [s for s in p.svgs if s["section"] == "propagation"]
    check("propagation: slower-than-x per phase with watches, the objective marked",
          prop and all(s["series"] == ["follow"] for s in prop) and any(s["levels"] for s in prop),
          [(s["series"], s["levels"]) for s in prop])
    if mode == "merged":
        check("the merged page says so in its header", "merged from 2 inputs" in page_text)
sys.exit(bad)
