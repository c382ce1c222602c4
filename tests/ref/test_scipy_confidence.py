# SPDX-License-Identifier: GPL-3.0-or-later
"""The rank with confidence (Vovk 2012; Angelopoulos & Bates 2021) against
scipy (Debian's python3-scipy): given n calibration scores, the coverage of
the k-th smallest is Beta(k, n+1-k); etacal's k must be the smallest with
P(Bin(n, tau) >= k) <= 1 - conf (scipy.stats.binom.sf), that is with
scipy.stats.beta.cdf(tau, k, n+1-k) <= 1 - conf, and its reported lower
coverage the (1-conf)-quantile of that law (scipy.stats.beta.ppf)."""
from refutil import need, run, refcalc

need("numpy", "python3-numpy")
need("scipy.stats", "python3-scipy")
from scipy.stats import beta, binom  # noqa: E402

pairs = [(n, t) for n in (29, 30, 59, 100, 257, 1000, 4321, 20000) for t in (0.5, 0.8, 0.9, 0.95, 0.975)]
checked = 0
for conf in (0.8, 0.9, 0.95, 0.99):
    out = run([refcalc(), "rankconf", repr(conf)], "".join(f"{n} {t}\n" for n, t in pairs)).split("\n")
    for (n, t), line in zip(pairs, out):
        k, mean, low = line.split()
        k = int(k)
        d = 1 - conf
        # the smallest qualifying k from scipy, never below the average-case rank
        qual = [j for j in range(1, n + 1) if binom.sf(j - 1, n, t) <= d]
        if not qual:
            assert k == n + 1, (n, t, conf, k)
            continue
        kmin = max(qual[0], -(-(n + 1) * round(t * 1000) // 1000))
        assert k == kmin, (n, t, conf, k, kmin)
        assert beta.cdf(t, k, n + 1 - k) <= d + 1e-12
        assert abs(float(low) - beta.ppf(d, k, n + 1 - k)) <= 1e-9, (n, t, conf, low)
        assert abs(float(mean) - k / (n + 1)) <= 1e-15
        checked += 1
print(f"{checked} ranks with confidence and coverage bounds agree with scipy's binomial and beta laws")
