#!/usr/bin/python3
"""An independent simulation of issue 20's agent model, written from the issue's description
(not from squall's C code), to predict the synchronisation gauge a run should show.

The model
- N agents with period P. Agent i sends first at i*P/N ("spread").
- `--next after-answer`: after a successful answer at time u the agent's next send is at
  u + P*(1 + U(-j, j)), j the jitter fraction, U uniform and independent per send. After an
  error or a timeout at time u it retries at u + d, with n = failures in a row before this one
  (0 at the first failure) and expo(n) = min(cap, base * 2^n), by the policies of "Exponential
  Backoff And Jitter" (Brooker, AWS Architecture Blog, 2015), as squall's README lists them for
  watch reconnects: immediate d = 0; fixed d = base; exponential d = expo(n); full-jitter
  d = U(0, expo(n)); equal-jitter d = expo(n)/2 + U(0, expo(n)/2); decorrelated
  d = min(cap, U(base, 3 * previous d)), previous starting at base. A success resets n (and
  decorrelated's previous d).
- `--next fixed`: the agent's intended instants are i*P/N + m*P (each moved by U(-j, j)*P when
  j > 0, not accumulating). With `--in-flight one` (default) an agent has at most one request
  outstanding: grid instants that pass while it waits are missed, and if any was missed it sends
  once at the moment its answer arrives (overdue), then returns to the grid. With
  `--in-flight any` it sends at every grid instant whatever happened. Errors do not move a
  fixed schedule (retries belong to after-answer agents).
- The server answers every request after the service time s. During a stall [a, b) it answers
  nothing: every request that arrives in it is held and answered at b + s, all at once. A request
  the server processes (arrival, or b for a held one) inside an error window [a, b) is answered
  with an error. With `--timeout T` > 0 an agent that has no answer T after sending sees a timeout
  (a failure) at send + T; the server's late answer is ignored.
- The gauge: send instants are cut into windows [w*P, (w+1)*P) from t = 0. Per window,
  R-bar = |mean(exp(i*theta))| with theta = 2*pi*(t mod P)/P (Mardia & Jupp, "Directional
  Statistics", 2000: the mean resultant length), Z = n R-bar^2, Zar's p = exp(sqrt(1 + 4n +
  4(n^2 - (n R-bar)^2)) - (1 + 2n)) (Zar, "Biostatistical Analysis", ch. 27; from memory), and
  the peak-to-mean ratio of sends per tenth of the period. Only windows that end by the
  duration are reported.

Usage: sync_sim.py [--agents N] [--period S] [--jitter J] [--next after-answer|fixed]
         [--in-flight one|any] [--service S] [--stall A:B]... [--errors A:B]... [--timeout S]
         [--backoff POLICY] [--backoff-base S] [--backoff-cap S] [--duration S]
         [--seed N]
Prints one JSON object: {"model": {...}, "sends": n, "windows": [{"index", "start_s", "n",
"r_bar", "z", "p", "peak_to_mean"}, ...]}. Times in seconds."""
import argparse
import json
import math
import sys

import numpy as np


MAX_SENDS = 1000000  # per agent: every loop here ends


def interval(text):
    a, b = (float(v) for v in text.split(":"))
    if not b > a:
        raise argparse.ArgumentTypeError("want A:B with B > A, got " + text)
    return (a, b)


def outcome(m, t):
    """(ok, when the agent learns it) for a request sent at t."""
    proc = t
    moved = True
    while moved:  # a held request is processed at the end of its stall (stalls may chain)
        moved = False
        for a, b in m.stall:
            if a <= proc < b:
                proc, moved = b, True
    answer = proc + m.service
    if m.timeout > 0 and answer - t > m.timeout:
        return False, t + m.timeout
    return not any(a <= proc < b for a, b in m.errors), answer


def backoff(m, rng, n, prev):
    """The wait before a retry after n earlier failures in a row; prev = the previous wait."""
    expo = min(m.backoff_cap, m.backoff_base * 2.0 ** min(n, 60))
    return {
        "immediate": lambda: 0.0,
        "fixed": lambda: m.backoff_base,
        "exponential": lambda: expo,
        "full-jitter": lambda: rng.uniform(0, expo),
        "equal-jitter": lambda: expo / 2 + rng.uniform(0, expo / 2),
        "decorrelated": lambda: min(m.backoff_cap, rng.uniform(m.backoff_base, 3 * prev)),
    }[m.backoff]()


def after_answer(m, rng, first):
    sends, t, n, prev = [], first, 0, m.backoff_base
    while t < m.duration:
        if len(sends) == MAX_SENDS:
            sys.exit(f"sync_sim.py: an agent sent {MAX_SENDS} times (immediate retries without "
                     "a service time?)")
        sends.append(t)
        ok, u = outcome(m, t)
        if ok:
            t, n, prev = u + m.period * (1 + rng.uniform(-m.jitter, m.jitter)), 0, m.backoff_base
        else:
            prev = backoff(m, rng, n, prev)
            t, n = u + prev, n + 1
    return sends


def fixed(m, rng, first):
    def grid(i):
        return first + i * m.period + (rng.uniform(-m.jitter, m.jitter) * m.period if m.jitter else 0)

    sends, t, i = [], grid(0), 1
    nxt = grid(i)  # the next grid instant not yet used or dropped
    while t < m.duration and len(sends) < MAX_SENDS:
        sends.append(t)
        _, u = outcome(m, t)
        if m.in_flight == "any" or nxt >= u:
            t, i = nxt, i + 1
            nxt = grid(i)
            continue
        t = u  # one overdue send when the answer arrives; the missed instants are dropped
        while nxt <= u:
            i += 1
            nxt = grid(i)
    return sends


def simulate(m):
    """Every send instant of every agent (seconds, unsorted)."""
    rng = np.random.default_rng(m.seed)
    run = after_answer if m.next == "after-answer" else fixed
    out = []
    for i in range(m.agents):
        out.extend(run(m, rng, i * m.period / m.agents))
    return np.array(out)


def windows(sends, period, duration):
    """The gauge of every whole window of one period, as dicts."""
    rows = []
    w = np.floor(sends / period).astype(np.int64)
    for k in range(int(math.floor(duration / period))):
        t = sends[w == k]
        n = len(t)
        if n == 0:
            rows.append({"index": k, "start_s": k * period, "n": 0, "r_bar": 0.0, "z": 0.0,
                         "p": 1.0, "peak_to_mean": 0.0})
            continue
        off = t - k * period
        rbar = float(np.abs(np.exp(2j * np.pi * off / period).mean()))
        rn = n * rbar
        p = 1.0 if n < 2 else math.exp(math.sqrt(1 + 4 * n + 4 * (n * n - rn * rn)) - (1 + 2 * n))
        tenth = np.minimum((off / period * 10).astype(np.int64), 9)
        ptm = float(np.bincount(tenth, minlength=10).max()) / (n / 10)
        rows.append({"index": k, "start_s": k * period, "n": n, "r_bar": rbar, "z": n * rbar ** 2,
                     "p": min(max(p, 0.0), 1.0), "peak_to_mean": ptm})
    return rows


def parser():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--agents", type=int, default=1000)
    ap.add_argument("--period", type=float, default=2.0)
    ap.add_argument("--jitter", type=float, default=0.0, help="fraction of the period, < 0.5")
    ap.add_argument("--next", choices=["after-answer", "fixed"], default="after-answer")
    ap.add_argument("--in-flight", choices=["one", "any"], default="one")
    ap.add_argument("--service", type=float, default=0.005)
    ap.add_argument("--stall", type=interval, action="append", default=[])
    ap.add_argument("--errors", type=interval, action="append", default=[])
    ap.add_argument("--timeout", type=float, default=0.0)
    ap.add_argument("--backoff", default="full-jitter",
                    choices=["immediate", "fixed", "exponential", "full-jitter", "equal-jitter",
                             "decorrelated"])
    ap.add_argument("--backoff-base", type=float, default=0.2)
    ap.add_argument("--backoff-cap", type=float, default=7.0)
    ap.add_argument("--duration", type=float, default=40.0)
    ap.add_argument("--seed", type=int, default=1)
    return ap


def model(argv):
    m = parser().parse_args(argv)
    if not (m.agents >= 1 and m.period > 0 and 0 <= m.jitter < 0.5 and m.service >= 0
            and m.duration > 0 and m.backoff_base > 0 and m.backoff_cap >= m.backoff_base):
        sys.exit("sync_sim.py: want agents >= 1, period > 0, 0 <= jitter < 0.5, service >= 0, "
                 "duration > 0, 0 < backoff-base <= backoff-cap")
    return m


def run(argv):
    m = model(argv)
    sends = simulate(m)
    return {"model": vars(m), "sends": int(len(sends)),
            "windows": windows(sends, m.period, m.duration)}


if __name__ == "__main__":
    json.dump(run(sys.argv[1:]), sys.stdout, indent=1)
    sys.stdout.write("\n")
