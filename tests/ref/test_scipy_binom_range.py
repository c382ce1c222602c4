# SPDX-License-Identifier: GPL-3.0-or-later
"""The central binomial range behind the bands of the report's calibration
chart (etacal_binom_range) against scipy.stats.binom.ppf (Debian's
python3-scipy), whose definition it follows: the smallest k with
P(X <= k) >= q, at q = a/2 and 1 - a/2.  A sweep of rates and counts up to
ten million rows, at three confidence levels."""
from refutil import need, run, refcalc

need("numpy", "python3-numpy")
need("scipy.stats", "python3-scipy")
from scipy.stats import binom  # noqa: E402

cases = []
for n in (1, 2, 3, 7, 10, 31, 100, 263, 1000, 12000, 99991, 1000000, 10000000):
    for p in (0.0, 0.013, 0.05, 0.1, 0.25, 0.5, 0.617, 0.8, 0.9, 0.95, 0.99, 0.999, 1.0):
        cases.append((p, n))
stdin = "".join(f"{p!r} {n}\n" for p, n in cases)
checked = 0
near = 0
for conf in (0.9, 0.95, 0.99):
    a = 1 - conf
    got = [tuple(map(int, line.split())) for line in run([refcalc(), "range", repr(conf)], stdin).splitlines()]
    assert len(got) == len(cases)
    for (p, n), (lo, hi) in zip(cases, got):
        if p in (0.0, 1.0):
            # degenerate laws, from the definition (scipy's ppf returns 0 at
            # q < 1 for p = 1, although P(X <= k) = 0 for every k < n)
            assert (lo, hi) == ((0, 0) if p == 0 else (n, n)), f"range p={p} n={n}: {lo} {hi}"
            checked += 2
            continue
        for q, k in ((a / 2, lo), (1 - a / 2, hi)):
            want = int(binom.ppf(q, n, p))
            if k != want:
                # only where the distribution function sits on q to rounding
                # (scipy and GSL compute it differently)
                c = binom.cdf(min(k, want), n, p)
                assert abs(c - q) <= 1e-9 * max(q, 1e-300) + 1e-12 and abs(k - want) == 1, \
                    f"range p={p} n={n} q={q}: etacal {k}, scipy binom.ppf {want}"
                near += 1
            checked += 1
print(f"{checked} binomial range ends agree with scipy.stats.binom.ppf "
      f"({len(cases)} (p, n) pairs, 3 levels; {near} ties at rounding)")
