# SPDX-License-Identifier: GPL-3.0-or-later
"""Type-1 sample quantile (Hyndman & Fan 1996, the inverse of the empirical
CDF) and the conformal bound, against numpy's quantile(method="inverted_cdf")
from Debian's python3-numpy, and the exact rank against Python's fractions.

Levels are multiples of 1/1024, exact in binary, so numpy's floating-point
index computation is exact too; the decimal float traps (where a plain
double ceil is one too high) are checked against fractions instead."""
import math
from fractions import Fraction

from refutil import need, run, refcalc

np = need("numpy", "python3-numpy")

rng = np.random.default_rng(20261201)
cases = 0
for trial in range(60):
    n = int(rng.integers(1, 400))
    # ties on purpose in half the trials (durations rounded to the second)
    x = rng.lognormal(6.5, 0.4, size=n)
    if trial % 2:
        x = np.round(x)
    ps = [int(rng.integers(0, 1025)) / 1024 for _ in range(8)]
    stdin = "\n".join(repr(float(v)) for v in x) + "\n"
    got = [float(v) for v in run([refcalc(), "type1"] + [repr(p) for p in ps], stdin).split()]
    for p, g in zip(ps, got):
        want = float(np.quantile(x, p, method="inverted_cdf"))
        assert g == want, f"type1 n={n} p={p}: etacal {g}, numpy {want}"
        cases += 1
    # conformal bound = type 1 at tau over the scores plus one at +inf
    for tau in (0.5, 0.75, 0.875, 0.9375):
        g = float(run([refcalc(), "conformal", repr(tau)], stdin))
        want = float(np.quantile(np.append(x, np.inf), tau, method="inverted_cdf"))
        assert g == want, f"conformal n={n} tau={tau}: etacal {g}, numpy {want}"
        cases += 1

# exact rank rule vs fractions: decimal taus, including the traps of
# worked with exact fractions (n=9 tau=.3 -> 3; n=24 tau=.56 -> 14; n=19 tau=.05 -> 1)
traps = 0
for n in list(range(1, 120)) + [999, 1000, 12345]:
    for tau_s in ("0.05", "0.1", "0.3", "0.5", "0.56", "0.8", "0.9", "0.95", "0.975", "0.99"):
        want = math.ceil((n + 1) * Fraction(tau_s))
        got = int(run([refcalc(), "rank", str(n), tau_s]))
        assert got == want, f"rank n={n} tau={tau_s}: etacal {got}, exact {want}"
        traps += math.ceil((n + 1) * float(tau_s)) != want
        cases += 1
assert traps > 0, "the sweep should include cases where a plain double ceil is wrong"
print(f"{cases} values agree with numpy inverted_cdf / exact fractions ({traps} float traps)")
