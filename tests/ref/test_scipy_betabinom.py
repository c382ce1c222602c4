# SPDX-License-Identifier: GPL-3.0-or-later
"""The gate's laws and multiple-test procedure against reference libraries:
etacal_betabinom_cdf against scipy.stats.betabinom.cdf and etacal_binom_cdf
against scipy.stats.binom.cdf (Debian's python3-scipy), on laws of a
split-conformal bound of rank k among n (a = k, b = n + 1 - k; Vovk 2012)
and m fresh orders, over the whole range of h including far tails; and
etacal_holm against statsmodels.stats.multitest.multipletests(method="holm")
(Debian's python3-statsmodels)."""
import math
import random

from refutil import need, run, refcalc

need("numpy", "python3-numpy")
need("scipy.stats", "python3-scipy")
from scipy.stats import betabinom, binom  # noqa: E402


def close(got, want, what):
    # relative 1e-9 where the reference is above 1e-250, else both tiny
    if want > 1e-250:
        assert abs(got - want) <= 1e-9 * want, f"{what}: etacal {got!r}, scipy {want!r}"
    else:
        assert got <= 1e-240, f"{what}: etacal {got!r}, scipy {want!r}"


cases = []
for n, tau in ((19, 0.95), (40, 0.5), (100, 0.9), (500, 0.9), (999, 0.99), (5000, 0.8), (20000, 0.95)):
    k = math.ceil((n + 1) * tau)
    for m in (1, 7, 40, 500, 3000, 20000):
        hs = sorted({0, 1, m // 10, m // 2, int(m * tau) - 3, int(m * tau), int(m * tau) + 2, m - 1, m})
        for h in hs:
            if 0 <= h <= m:
                cases.append((h, m, float(k), float(n + 1 - k)))
# non-integer parameters and a = 1 or b = 1 (the edges of log-concavity)
cases += [(3, 10, 1.0, 1.0), (0, 10, 1.0, 5.5), (9, 10, 5.5, 1.0), (250, 600, 2.385, 7.125)]
stdin = "".join(f"{h} {m} {a!r} {b!r}\n" for h, m, a, b in cases)
got = [float(x) for x in run([refcalc(), "betabinom"], stdin).split()]
assert len(got) == len(cases)
for (h, m, a, b), g in zip(cases, got):
    close(g, float(betabinom.cdf(h, m, a, b)), f"betabinom cdf({h}; {m}, {a}, {b})")
nbb = len(cases)

cases = []
for m in (1, 5, 40, 500, 20000, 300000):
    for p in (0.05, 0.5, 0.9, 0.95, 0.999):
        mu = m * p
        for h in sorted({0, 1, int(mu) - int(4 * math.sqrt(mu * (1 - p)) + 1), int(mu), m - 1, m}):
            if 0 <= h <= m:
                cases.append((h, m, p))
stdin = "".join(f"{h} {m} {p!r}\n" for h, m, p in cases)
got = [float(x) for x in run([refcalc(), "binomcdf"], stdin).split()]
assert len(got) == len(cases)
for (h, m, p), g in zip(cases, got):
    close(g, float(binom.cdf(h, m, p)), f"binom cdf({h}; {m}, {p})")
nb = len(cases)

need("statsmodels.stats.multitest", "python3-statsmodels")
from statsmodels.stats.multitest import multipletests  # noqa: E402

rng = random.Random(1979)
families = [[0.01, 0.04, 0.03, 0.005], [0.5], [0.2, 0.2, 0.2], [1e-9, 0.9, 0.02, 0.0124, 0.0125, 0.04]]
for _ in range(40):
    g = rng.randint(1, 60)
    families.append([rng.random() ** rng.choice((1, 3, 8)) for _ in range(g)])
stdin = "".join(" ".join(repr(p) for p in fam) + "\n" for fam in families)
out = run([refcalc(), "holm"], stdin).splitlines()
for fam, line in zip(families, out):
    got = [float(x) for x in line.split()]
    want = multipletests(fam, alpha=0.05, method="holm")[1]
    for g, w in zip(got, want):
        assert abs(g - w) <= 1e-12, f"holm {fam}: etacal {got}, statsmodels {list(want)}"
print(f"{nbb} Beta-binomial and {nb} binomial tails agree with scipy (1e-9 relative), "
      f"{len(families)} Holm families with statsmodels (1e-12)")
