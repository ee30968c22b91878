#!/usr/bin/python3
"""Checks of the agent-model simulation (tests/integration/lib/sync_sim.py) that the integration
tests of issue 20 will compare squall with: what the model must show before the stall, right
after it and as it decays, with the fixed schedule, and with the two retry policies. Prints each
check and its figures; exits 1 if any failed. Fixed seeds.

The decay is also checked against a closed form: after the stall releases every agent at once,
agent phases after k periods are the sum of k independent U(-j, j)*2*pi shifts, whose mean
resultant length is (sin(a)/a)^k with a = 2*pi*j, the characteristic function of the uniform
distribution at 1 raised to the k-th power (Mardia & Jupp, "Directional Statistics", 2000: the
mean resultant length of a wrapped distribution is |its characteristic function at 1|; the
uniform's is sin(a)/a: common knowledge)."""
import json
import math
import os
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "integration",
                                "lib"))
import sync_sim  # noqa: E402

bad = 0


def check(desc, ok):
    global bad
    print(("ok: " if ok else "FAIL: ") + desc)
    bad += not ok


def rbar(res):
    return [w["r_bar"] for w in res["windows"]]


def fmt(xs):
    return " ".join("%.3f" % x for x in xs)


STALL = ["--agents", "1000", "--period", "2", "--stall", "10:13", "--duration", "40"]
BEFORE = range(0, 5)  # windows [0, 10): before the stall
FIRST_AFTER = 7       # [14, 16): the first whole period after the stall ends at 13

for seed in ("1", "2", "3"):
    r = rbar(sync_sim.run(STALL + ["--jitter", "0.1", "--seed", seed]))
    check(f"after-answer, ±10 % jitter, seed {seed}: R-bar before the stall < 0.1 "
          f"({fmt(r[i] for i in BEFORE)})", all(r[i] < 0.1 for i in BEFORE))
    check(f"after-answer, seed {seed}: R-bar in the period after the stall > 0.8 "
          f"({r[FIRST_AFTER]:.3f})", r[FIRST_AFTER] > 0.8)
    a = 2 * math.pi * 0.1
    want = [(math.sin(a) / a) ** k for k in range(1, 5)]
    got = r[FIRST_AFTER:FIRST_AFTER + 4]
    check(f"after-answer, seed {seed}: decay over 4 periods ({fmt(got)}) within 0.06 of "
          f"(sin a / a)^k ({fmt(want)})", all(abs(g - w) < 0.06 for g, w in zip(got, want)))
    check(f"after-answer, seed {seed}: still decaying 12 periods on ({r[FIRST_AFTER + 12]:.3f} "
          f"< {r[FIRST_AFTER + 2]:.3f})", r[FIRST_AFTER + 12] < r[FIRST_AFTER + 2] - 0.2)

    f = rbar(sync_sim.run(STALL + ["--next", "fixed", "--seed", seed]))
    check(f"fixed schedule, seed {seed}: R-bar before the stall < 0.1 ({fmt(f[i] for i in BEFORE)})",
          all(f[i] < 0.1 for i in BEFORE))
    check(f"fixed schedule, seed {seed}: the window the stall ends in shows the held sends "
          f"({f[6]:.3f} > 0.3)", f[6] > 0.3)
    check(f"fixed schedule, seed {seed}: R-bar in the first whole period after the stall < 0.1 "
          f"({f[FIRST_AFTER]:.3f})", f[FIRST_AFTER] < 0.1)

# Without jitter the released agents stay at one instant for ever.
r = rbar(sync_sim.run(STALL))
check(f"after-answer without jitter: R-bar 1 in every window after the stall "
      f"({min(r[FIRST_AFTER:]):.12f})", min(r[FIRST_AFTER:]) > 1 - 1e-9)

# Retries: one agent against a long error window shows each policy's waits (service time 0, so
# the gaps between its sends are the waits; cap 7 s, base 0.2 s).
def gaps(policy):
    m = sync_sim.model(["--agents", "1", "--errors", "0:1000", "--duration", "300", "--backoff",
                        policy, "--service", "0"])
    sends = sync_sim.simulate(m)
    return [b - a for a, b in zip(sends, sends[1:])][:40]


def expo(n):
    return min(7.0, 0.2 * 2 ** n)


g = gaps("exponential")
check(f"exponential waits {fmt(g[:9])}: 0.2 doubling, capped at 7",
      [round(x, 9) for x in g[:9]] == [0.2, 0.4, 0.8, 1.6, 3.2, 6.4, 7.0, 7.0, 7.0])
g = gaps("fixed")
check(f"fixed waits all 0.2 ({len(g)} gaps)", all(abs(x - 0.2) < 1e-9 for x in g))
g = gaps("full-jitter")
check("full-jitter waits in [0, expo(n)], not all at the top",
      all(0 <= x <= expo(n) + 1e-9 for n, x in enumerate(g))
      and sum(x < 0.9 * expo(n) for n, x in enumerate(g)) >= 10)
g = gaps("equal-jitter")
check("equal-jitter waits in [expo(n)/2, expo(n)], not all at one end",
      all(expo(n) / 2 - 1e-9 <= x <= expo(n) + 1e-9 for n, x in enumerate(g))
      and len({round(x / expo(n), 3) for n, x in enumerate(g)}) > 10)
g = gaps("decorrelated")
check("decorrelated waits in [0.2, min(7, 3 * previous)]",
      all(0.2 - 1e-9 <= x <= min(7.0, 3 * p) + 1e-9 for p, x in zip([0.2] + g, g)))
m = sync_sim.model(["--agents", "1", "--errors", "0:1", "--duration", "2", "--backoff",
                    "immediate", "--service", "0.01"])
g = [round(b - a, 9) for a, b in zip(sync_sim.simulate(m), sync_sim.simulate(m)[1:])]
check(f"immediate retries every service time through a 1 s error window ({len(g)} gaps)",
      g[:99] == [0.01] * 99)

# A stall released into a 100 % error window: exponential retries without jitter keep the fleet
# at one instant, full jitter spreads it.
ERR = STALL + ["--jitter", "0.1", "--errors", "13:25"]
fx = rbar(sync_sim.run(ERR + ["--backoff", "exponential"]))
fj = rbar(sync_sim.run(ERR + ["--backoff", "full-jitter"]))
check(f"stall then errors: exponential retries R-bar > 0.9 in windows 7-9 ({fmt(fx[7:10])}), "
      f"full jitter < 0.3 ({fmt(fj[7:10])})",
      min(fx[7:10]) > 0.9 and max(fj[7:10]) < 0.3)
# A 100 % error window [10, 25) alone. In the first whole period after it ([26, 28)), fixed
# retries (every 0.2 s) have gathered the fleet into the 0.2 s after the recovery; full jitter
# has not. While it lasts, exponential retries without jitter bunch more than full jitter.
OWN = ["--agents", "1000", "--period", "2", "--jitter", "0.1", "--errors", "10:25",
       "--duration", "40"]
fx = rbar(sync_sim.run(OWN + ["--backoff", "fixed"]))
fj = rbar(sync_sim.run(OWN + ["--backoff", "full-jitter"]))
check(f"after an error window: fixed retries R-bar {fx[13]:.3f} > 0.8, full jitter "
      f"{fj[13]:.3f} < 0.3", fx[13] > 0.8 and fj[13] < 0.3)
fe = rbar(sync_sim.run(OWN + ["--backoff", "exponential"]))
mx, mj = sum(fe[5:13]) / 8, sum(fj[5:13]) / 8
check(f"during an error window: mean R-bar over windows 5-12, exponential {mx:.3f} > full "
      f"jitter {mj:.3f}", mx > mj + 0.1)

# The command line prints the same windows as JSON.
cli = subprocess.run(["/usr/bin/python3", sync_sim.__file__, "--jitter", "0.1", "--stall", "10:13",
                      "--duration", "20", "--seed", "1"], capture_output=True, text=True, check=True)
out = json.loads(cli.stdout)
lib = sync_sim.run(["--jitter", "0.1", "--stall", "10:13", "--duration", "20", "--seed", "1"])
check(f"the command line prints {len(out['windows'])} windows as JSON, as the library computes",
      len(out["windows"]) == 10 and out["windows"] == json.loads(json.dumps(lib["windows"]))
      and out["model"]["stall"] == [[10.0, 13.0]])

print(f"{bad} failed")
sys.exit(1 if bad else 0)
