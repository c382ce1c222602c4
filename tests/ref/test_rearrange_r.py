# SPDX-License-Identifier: GPL-3.0-or-later
"""etacal's monotone rearrangement against R's quantreg::rearrange (Debian's
r-cran-quantreg), which implements the rearrangement of Chernozhukov,
Fernandez-Val & Galichon (2010) for step functions: the values of the
pieces sorted, each keeping its width.

etacal takes the curve through the quantiles at the requested levels as
piecewise linear and rearranges it exactly over the levels' range.  The
oracle gets the same curve (R's approxfun) as a step function on a fine
grid of N equal cells, the value of each cell at its midpoint; that step
function is within eps = L T / (2N) of the curve (L the steepest slope, T
the range of the levels), and rearrangement does not increase the sup
distance between two functions (Chernozhukov, Fernandez-Val & Galichon
2009, Biometrika, Prop. 1), so R's rearranged step function read off at the
levels is within eps of the exact answer.  Checked: (1) refcalc's
etacal_rearrange on seeded random crossing curves at unequally spaced
levels; (2) `etacal qr --predict` on the Engel data at five unequally spaced
levels, at incomes where the fitted lines cross, against R's rq fits with
the same rearrangement (output rounded to the millisecond, coefficients
agreeing to the solvers' tolerance)."""
import csv
import os
import shutil
import subprocess
import tempfile

from refutil import SKIP, need, run, etacal, refcalc

np = need("numpy", "python3-numpy")
if not shutil.which("Rscript") or subprocess.run(
        ["Rscript", "-e", "suppressMessages(library(quantreg)); stopifnot(exists('rearrange'))"],
        capture_output=True).returncode != 0:
    print("SKIP: oracle R quantreg::rearrange not installed (Debian package r-cran-quantreg)")
    raise SystemExit(SKIP)

N = 20000  # cells of the oracle's step function
tmp = tempfile.mkdtemp()

R_REARRANGE = f"""
suppressMessages(library(quantreg))
N <- {N}
rearr <- function(t, q) {{
  m <- length(t); T <- t[m] - t[1]
  Q <- approxfun(t, q)
  v <- Q(t[1] + (seq_len(N) - 0.5) * T / N)
  f <- stepfun(t[1] + seq_len(N - 1) * T / N, v, right = FALSE)
  g <- rearrange(f, t[1], t[m])
  g(t)
}}
"""


def eps(t, q):
    """The oracle's error bound for the curve through (t, q)."""
    slope = max(abs(q[i + 1] - q[i]) / (t[i + 1] - t[i]) for i in range(len(t) - 1))
    return slope * (t[-1] - t[0]) / (2 * N)


def r_rearrange(curves):
    path = os.path.join(tmp, "curves.txt")
    with open(path, "w") as f:
        for t, q in curves:
            f.write(" ".join(repr(float(a)) for a in list(t) + list(q)) + "\n")
    script = R_REARRANGE + f"""
for (line in readLines("{path}")) {{
  v <- as.numeric(strsplit(line, " ")[[1]]); m <- length(v) / 2
  cat(sprintf("%.17g", rearr(v[1:m], v[(m + 1):(2 * m)])), "\\n")
}}
"""
    out = subprocess.run(["Rscript", "-e", script], capture_output=True, text=True, check=True).stdout
    return [[float(a) for a in line.split()] for line in out.splitlines()]


# (1) the library call on random crossing curves at unequal levels
rng = np.random.default_rng(2385)
curves = []
for c in range(150):
    m = int(rng.integers(3, 13))
    t = np.sort(rng.choice(np.arange(1, 1000), size=m, replace=False)) / 1000.0  # distinct, unequal
    if c % 3 == 0:  # an increasing curve with a few crossings
        q = np.cumsum(rng.exponential(50, m)) + rng.normal(0, 60, m)
    elif c % 3 == 1:  # wild
        q = rng.normal(1500, 400, m)
    else:  # ties and a flat piece
        q = rng.integers(0, 4, m).astype(float) * 100.0
    curves.append((t, q))
ours_out = run([refcalc(), "rearrange"],
               "".join(f"{len(t)} " + " ".join(repr(float(a)) for a in list(t) + list(q)) + "\n"
                       for t, q in curves))
ours = [[float(a) for a in line.split()] for line in ours_out.splitlines()]
theirs = r_rearrange(curves)
assert len(ours) == len(theirs) == len(curves)
differs_from_sort = 0
worst = 0.0
for (t, q), a, b in zip(curves, ours, theirs):
    tol = eps(t, q) + 1e-9 * max(1.0, float(np.max(np.abs(q))))
    for i in range(len(t)):
        assert abs(a[i] - b[i]) <= tol, (list(t), list(q), a, b, tol)
        worst = max(worst, abs(a[i] - b[i]) / tol)
    assert all(a[i] <= a[i + 1] for i in range(len(a) - 1)), a
    if max(abs(x - y) for x, y in zip(a, sorted(q))) > 10 * tol:
        differs_from_sort += 1
# the check can tell the rearrangement from a plain sort of the values
assert differs_from_sort >= 50, differs_from_sort
print(f"rearrange: {len(curves)} random curves (3-12 unequal levels) agree with quantreg::rearrange "
      f"on a {N}-cell grid, worst {worst:.2f} of the grid bound; {differs_from_sort} differ from a sort")

# (2) etacal qr --predict on the Engel data.  The fits cross at low incomes,
# below the data's range; --predict clamps a covariate into the range of the
# fitted data first (so incomes below 377.06 are predicted as at 377.06),
# then rearranges.  R does the same here: clamp, rq's lines, rearrange.
here = os.path.dirname(os.path.abspath(__file__))
engel = os.path.join(here, "engel.csv")
taus = [0.05, 0.1, 0.25, 0.5, 0.9]
incomes = [20.5, 60, 100, 150.25, 190, 250, 400, 1000, 3000]
new = os.path.join(tmp, "new.csv")
with open(new, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["income"])
    for x in incomes:
        w.writerow([repr(x)])
outp = os.path.join(tmp, "pred.csv")
run([etacal(), "qr", engel, "--y", "foodexp", "--x", "income", "--tau", ",".join(map(str, taus)),
     "--predict", new, "-o", outp])
with open(outp, newline="") as f:
    rows = list(csv.DictReader(f))
cols = ["q_5", "q_10", "q_25", "q_50", "q_90"]
script = R_REARRANGE + f"""
d <- read.csv("{engel}")
taus <- c({",".join(map(str, taus))})
b <- coef(rq(foodexp ~ income, tau = taus, data = d, method = "fn"))
for (x in c({",".join(map(repr, incomes))})) {{
  x <- min(max(x, min(d$income)), max(d$income))
  q <- as.numeric(b[1, ] + b[2, ] * x)
  cat(sprintf("%.17g", c(q, rearr(taus, q))), "\\n")
}}
"""
out = subprocess.run(["Rscript", "-e", script], capture_output=True, text=True, check=True).stdout
crossing = 0
for r, line in zip(rows, out.splitlines()):
    v = [float(a) for a in line.split()]
    raw, want = v[:5], v[5:]
    got = [float(r[c]) for c in cols]
    crossing += any(raw[i] > raw[i + 1] for i in range(4))
    # grid bound, half a millisecond of rounding, and the fits' agreement
    tol = eps(taus, raw) + 0.0005 + 1e-7 * max(abs(a) for a in raw)
    for i in range(5):
        assert abs(got[i] - want[i]) <= tol, (r["income"], got, want, tol)
assert len(rows) == len(incomes)
# incomes below the range are clamped: the same quantiles as at its lower end
low = [r for r in rows if float(r["income"]) < 377.06]
assert len(low) == 6 and all([r[c] for c in cols] == [low[0][c] for c in cols] for r in low), low
print(f"qr --predict: Engel at levels {taus}, {len(incomes)} incomes ({len(low)} below the data's range, "
      f"clamped; {crossing} with crossing fits inside it) agree with rq + quantreg::rearrange")
