# SPDX-License-Identifier: GPL-3.0-or-later
"""etacal fit end to end against numpy (Debian's python3-numpy): per cell
and globally, the buffer must be the k-th smallest score with
k = ceil((n+1) tau) (Lei et al. 2018), computed by numpy as the
inverted_cdf quantile at tau of the scores with +inf appended, for every
level of --by zone,band ((zone, band), (zone, *), (*, *)), and small
segments must have no row of their own exactly as the rule says.  The
cells are the pooled thin cells (Mondrian conformal, Vovk et al. 2005,
ch. 4): a (zone, *) row is calibrated on the rows of its bands without a
row of their own, the global row on the rows left over below it, or on all
rows when those give no finite bound; the cells are built here from the
rule, independently of etacal."""
import csv
import math
import os
import tempfile
from fractions import Fraction

from refutil import need, run, etacal

np = need("numpy", "python3-numpy")

rng = np.random.default_rng(7)
n = 20000
zones = np.array(["north", "south", "east", "west", "river"])
bands = np.array(["lunch", "dinner", "late"])
zi = rng.integers(0, len(zones), n)
bi = rng.integers(0, len(bands), n)
# a thin segment: most 'late' rows of 'river' are dropped
keep = ~((zi == 4) & (bi == 2) & (rng.random(n) < 0.97))
zi, bi = zi[keep], bi[keep]
m = len(zi)
pred = np.round(rng.uniform(600, 2400, m), 1)
actual = np.round(pred * rng.lognormal(0.05 * zi, 0.2 + 0.05 * bi), 1)

tmp = tempfile.mkdtemp()
cal = os.path.join(tmp, "cal.csv")
with open(cal, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["zone", "band", "pred_s", "actual_s"])
    for i in range(m):
        w.writerow([zones[zi[i]], bands[bi[i]], repr(float(pred[i])), repr(float(actual[i]))])

targets = ["0.8", "0.9", "0.95"]
for method in ("add", "ratio"):
    out = run([etacal(), "fit", cal, "--actual", "actual_s", "--pred", "pred_s", "--by", "zone,band",
               "--target", ",".join(targets), "--method", method, "--min-rows", "150", "-q"])
    rows = list(csv.DictReader(out.splitlines()))
    table = {(r["zone"], r["band"], r["target"]): r for r in rows}
    checked = 0
    for t in targets:
        def k_of(ns):
            return math.ceil((ns + 1) * Fraction(t))

        def ok(ns, lo):
            return ns >= lo and ns > 0 and k_of(ns) <= ns
        cells = []  # (zone, band, mask of the cell's rows, qualifies, cell)
        left = np.zeros(m, bool)  # rows left over for the global cell
        for a, z in enumerate(zones):
            pool = np.zeros(m, bool)
            for b, bd in enumerate(bands):
                mask = (zi == a) & (bi == b)
                q = ok(int(mask.sum()), 150)
                cells.append((z, bd, mask, q, "own"))
                if not q:
                    pool |= mask
            q = ok(int(pool.sum()), 150)
            cells.append((z, "*", pool, q, "rest"))
            if not q:
                left |= pool
        rest = ok(int(left.sum()), 1)
        cells.append(("*", "*", left if rest else np.ones(m, bool), True, "rest" if rest else "all"))
        for z, bd, mask, q, cell in cells:
            row = table.get((z, bd, t))
            if not q:
                assert row is None, f"{method} {z}/{bd} t={t} n={int(mask.sum())} should have no row"
                continue
            assert row is not None, f"{method} {z}/{bd} t={t} missing"
            s = actual[mask] - pred[mask] if method == "add" else actual[mask] / pred[mask]
            ns = len(s)
            k = k_of(ns)
            want = float(np.quantile(np.append(s, np.inf), float(t), method="inverted_cdf"))
            assert want == np.sort(s)[k - 1]
            col = "offset_s" if method == "add" else "slope"
            got = float(row[col])
            scale = 1e3 if method == "add" else 1e6
            # etacal rounds the published bound up to 1 ms (1e-6 for a factor)
            assert want <= got + 1e-9 and got - want < 1 / scale + 1e-9, \
                f"{method} {z}/{bd} t={t}: etacal {got}, numpy {want}"
            assert int(row["n"]) == ns and int(row["k"]) == k, f"{method} {z}/{bd} t={t}: n, k"
            assert row["cell"] == cell, f"{method} {z}/{bd} t={t}: cell {row['cell']}, want {cell}"
            checked += 1
    assert len(rows) == checked, f"{method}: {len(rows)} rows, {checked} expected"
    assert checked >= 40
    print(f"method {method}: {checked} (cell, target) bounds agree with numpy")
