#!/usr/bin/python3
# The plans `squall profile` derived from logs of the known plan of profile_nginx.sh and
# profile_serve.sh, against that plan: usage profile_check.py DIR SENT NAME... (DIR/NAME.yaml;
# a NAME of "ndjson" is a log with durations, so its watches are counted). python3-yaml reads
# the plans as any YAML reader would.
import re, sys, yaml
T, sent, names = sys.argv[1], int(sys.argv[2]), sys.argv[3:]
bad = 0
def check(desc, ok):
    global bad
    print(("ok: " if ok else "FAIL: ") + desc)
    bad += not ok
def seconds(d):
    m = re.fullmatch(r"(\d+)(h|m|s|ms)", d)
    return int(m[1]) * {"h": 3600, "m": 60, "s": 1, "ms": 1e-3}[m[2]]
def per_s(r):
    m = re.fullmatch(r"([0-9.]+)/(s|m|h)", r)
    return float(m[1]) / {"s": 1, "m": 60, "h": 3600}[m[2]]
for name in names:
    p = yaml.safe_load(open(f"{T}/{name}.yaml"))
    reqs = p["requests"]
    by = {}
    for c, r in reqs.items():
        key = (r["kind"], r.get("method", "GET"))
        by[key] = (c, r)
    check(f"{name}: four classes, one get, list, PUT write and watch ({sorted(reqs)})",
          len(reqs) == 4 and set(by) == {("get", "GET"), ("list", "GET"), ("write", "PUT"),
                                         ("watch", "GET")})
    if len(by) != 4 or ("get", "GET") not in by:
        continue
    get, lst, put, watch = (by[k] for k in (("get", "GET"), ("list", "GET"), ("write", "PUT"),
                                            ("watch", "GET")))
    check(f"{name}: the read's path shape is /v1/sites/{{{{site}}}}/gateways/gw-{{{{pick:0..99}}}}",
          get[1]["path"] == "/v1/sites/{{site}}/gateways/gw-{{pick:0..99}}")
    check(f"{name}: the list's path and page size 500",
          lst[1]["path"] == "/v1/sites/{{site}}/gateways" and lst[1].get("page") == 500)
    check(f"{name}: the renewals keep PUT and name the agent ({put[1]['path']})",
          put[1]["path"] == "/v1/leases/gw-{{agent}}")
    check(f"{name}: the watch keeps its marker ({watch[1]['path']})",
          watch[1]["path"] == "/v1/sites/{{site}}/gateways?watch=1")
    check(f"{name}: the sites are a word list ({p.get('vars')})",
          set(p.get("vars", {}).get("site", [])) == {"north", "south", "harbor", "ridge"})
    ph = p["phases"][0]
    dur = seconds(ph["duration"])
    rate = per_s(ph["rate"]) if "rate" in ph else \
        sum(per_s(s["rate"]) * seconds(s["for"]) for s in ph["steps"]) / dur
    check(f"{name}: phase of {dur} s for the 60 s run (within 5 %)", abs(dur - 60) <= 3)
    check(f"{name}: open-loop rate {rate:.2f}/s within 5 % of the planned 50.2/s",
          abs(rate - 50.2) <= 0.05 * 50.2)
    check(f"{name}: rate x duration = {rate * dur:.0f} within 2 % of the {sent} squall sent",
          abs(rate * dur - sent) <= 0.02 * sent)
    check(f"{name}: arrivals poisson ({ph.get('arrivals')})", ph.get("arrivals") == "poisson")
    mix = ph["mix"]
    total = sum(mix.values())
    check(f"{name}: mix {mix} within 2 points of 99.6 / 0.4",
          abs(100 * mix.get(get[0], 0) / total - 100 * 250 / 251) <= 2 and
          abs(100 * mix.get(lst[0], 0) / total - 100 / 251) <= 2 and len(mix) == 2)
    fl = ph.get("fleet", {})
    check(f"{name}: fleet of 300 agents every 10s, aligned, sending the renewals ({fl})",
          fl.get("agents") == 300 and fl.get("every") == "10s" and
          fl.get("timing") == "aligned" and fl.get("send") == put[0])
    w = ph.get("watches", {})
    if name == "ndjson":
        check(f"{name}: 20 watches of the watch class ({w})", w == {watch[0]: 20})
    else:
        check(f"{name}: the watch class is held open ({w}; a 1 s format has no durations)",
              list(w) == [watch[0]] and w[watch[0]] >= 1)
sys.exit(1 if bad else 0)
