# SPDX-License-Identifier: GPL-3.0-or-later
"""Pinball loss of etacal check against scikit-learn's mean_pinball_loss
(Debian's python3-sklearn), and coverage, slack, lateness and interval
score against numpy on the same fixed, seeded data set, per segment."""
import csv
import os
import tempfile

from refutil import need, run, etacal

np = need("numpy", "python3-numpy")
need("sklearn", "python3-sklearn")
from sklearn.metrics import mean_pinball_loss  # noqa: E402

rng = np.random.default_rng(1998)
n = 5000
zone = rng.choice(["north", "south"], n)
actual = np.round(rng.gamma(4.0, 400.0, n), 1)
scale = np.where(zone == "north", 1.0, 1.2)
q = {t: np.round(scale * np.quantile(actual, t) * rng.uniform(0.9, 1.1, n), 1) for t in (0.1, 0.5, 0.9)}
lo, hi = q[0.1], q[0.9]

tmp = tempfile.mkdtemp()
path = os.path.join(tmp, "data.csv")
with open(path, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["zone", "actual", "q10", "q50", "q90"])
    for i in range(n):
        w.writerow([zone[i], repr(float(actual[i])), repr(float(q[0.1][i])), repr(float(q[0.5][i])),
                    repr(float(q[0.9][i]))])

def rows(args):
    out = run([etacal(), "check", path, "--actual", "actual", "--by", "zone", "--format", "csv"] + args)
    return list(csv.DictReader(out.splitlines()))

checked = 0
got = rows(["--quantile", "q10=0.1", "--quantile", "q50=0.5", "--quantile", "q90=0.9"])
for r in got:
    m = np.ones(n, bool) if r["zone"] == "*" else zone == r["zone"]
    tau = float(r["nominal"])
    qq = q[tau][m]
    want = mean_pinball_loss(actual[m], qq, alpha=tau)
    assert abs(float(r["pinball"]) - want) <= 1e-9 * max(1, want), (r, want)
    assert int(r["hits"]) == int(np.sum(actual[m] <= qq))
    checked += 1

# a promise at a known level: pinball, slack of on-time rows, lateness of late rows
for r in rows(["--upper", "q90=0.9"]):
    m = np.ones(n, bool) if r["zone"] == "*" else zone == r["zone"]
    y, u = actual[m], hi[m]
    assert abs(float(r["pinball"]) - mean_pinball_loss(y, u, alpha=0.9)) <= 1e-9 * 100
    on = y <= u
    assert abs(float(r["mean_slack_s"]) - np.mean(u[on] - y[on])) <= 1e-6
    assert abs(float(r["mean_lateness_s"]) - np.mean(y[~on] - u[~on])) <= 1e-6
    assert int(r["late"]) == int(np.sum(~on))
    checked += 1

# the interval [q10, q90] at nominal 0.8: the interval score of Gneiting &
# Raftery (2007) as (2/alpha) (pinball at alpha/2 of l + pinball at 1-alpha/2 of u)
for r in rows(["--upper", "q90=0.9", "--lower", "q10=0.1"]):
    if r["measure"] != "interval":
        continue
    m = np.ones(n, bool) if r["zone"] == "*" else zone == r["zone"]
    y, l, u = actual[m], lo[m], hi[m]
    a = 0.2
    want = 2 / a * (mean_pinball_loss(y, l, alpha=a / 2) + mean_pinball_loss(y, u, alpha=1 - a / 2))
    assert abs(float(r["interval_score"]) - want) <= 1e-9 * want, (r["interval_score"], want)
    assert abs(float(r["mean_width_s"]) - np.mean(u - l)) <= 1e-6
    assert int(r["hits"]) == int(np.sum((l <= y) & (y <= u)))
    checked += 1
# unequal tails: [q10, q90] declared as lower level 0.1, upper level 0.95
# (nominal 0.85): the score (u - l) + (l - y)+/a + (y - u)+/(1 - b)
# (Gneiting & Raftery 2007, sec. 6.2, with unequal tails) is pinball(l, a)/a + pinball(u, b)/(1 - b), each
# mean pinball loss from scikit-learn
for r in rows(["--upper", "q90=0.95", "--lower", "q10=0.1"]):
    if r["measure"] != "interval":
        continue
    m = np.ones(n, bool) if r["zone"] == "*" else zone == r["zone"]
    y, l, u = actual[m], lo[m], hi[m]
    a, b = 0.1, 0.95
    want = mean_pinball_loss(y, l, alpha=a) / a + mean_pinball_loss(y, u, alpha=b) / (1 - b)
    assert abs(float(r["interval_score"]) - want) <= 1e-9 * want, (r["interval_score"], want)
    checked += 1
print(f"{checked} segment measures agree with scikit-learn's mean_pinball_loss and numpy")
