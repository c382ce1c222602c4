# SPDX-License-Identifier: GPL-3.0-or-later
"""Wilson and Clopper-Pearson intervals against scipy (Debian's
python3-scipy): Clopper-Pearson against scipy.stats.beta.ppf (the beta
quantiles of its definition), and both against
scipy.stats.binomtest(x, n).proportion_ci(method="wilson" / "exact"), on a
sweep of (hits, n) and three confidence levels."""
import warnings

from refutil import need, run, refcalc

# scipy warns of a division by zero inside binomtest at x = 0; harmless
warnings.simplefilter("ignore", RuntimeWarning)

need("numpy", "python3-numpy")
scipy_stats = need("scipy.stats", "python3-scipy")
from scipy.stats import beta, binomtest  # noqa: E402

pairs = []
for n in list(range(1, 41)) + [57, 100, 263, 999, 5000, 123457]:
    for x in sorted({0, 1, 2, n // 3, n // 2, n - 1, n} | set(range(0, n + 1, max(1, n // 7)))):
        if 0 <= x <= n:
            pairs.append((x, n))
stdin = "".join(f"{x} {n}\n" for x, n in pairs)
checked = 0
for conf in (0.9, 0.95, 0.99):
    a = 1 - conf
    for method in ("wilson", "exact"):
        got = [tuple(map(float, line.split())) for line in run([refcalc(), method, repr(conf)], stdin).splitlines()]
        assert len(got) == len(pairs)
        for (x, n), (lo, hi) in zip(pairs, got):
            ci = binomtest(x, n).proportion_ci(confidence_level=conf, method=method)
            assert abs(lo - ci.low) <= 1e-9 and abs(hi - ci.high) <= 1e-9, \
                f"{method} {x}/{n} at {conf}: etacal [{lo}, {hi}], scipy [{ci.low}, {ci.high}]"
            if method == "exact":
                wlo = 0.0 if x == 0 else beta.ppf(a / 2, x, n - x + 1)
                whi = 1.0 if x == n else beta.ppf(1 - a / 2, x + 1, n - x)
                assert abs(lo - wlo) <= 1e-9 and abs(hi - whi) <= 1e-9, \
                    f"exact {x}/{n}: etacal [{lo}, {hi}], beta.ppf [{wlo}, {whi}]"
            checked += 1
print(f"{checked} intervals agree with scipy to 1e-9 ({len(pairs)} (hits, n) pairs, 3 levels, 2 methods)")
