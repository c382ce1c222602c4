# SPDX-License-Identifier: GPL-3.0-or-later
"""The rolling-origin backtest replayed in numpy (Debian's python3-numpy):
for each period starting at S, the calibration rows are those placed in
[S - window, S) and delivered by S (placed + actual <= S: no look-ahead);
the promise is the prediction plus the split-conformal bound, the
ceil((n+1) level)-th smallest score, i.e. numpy's quantile(method=
"inverted_cdf") of the scores with +inf appended (Lei et al. 2018); +inf
is the unbounded promise (every order on time), a level <= 0 no promise
(every order late); with --adapt the level moves by gamma (target - rate)
after each period with orders (Gibbs & Candes 2021, eq. 2, per period).

The stream: 20 orders a day at random times, and every order placed in the
five hours before a midnight (a period start) takes five hours, so each
start has orders still on the road; days 15-17 are a disruption (3, 6 and
12 hours late) that takes the adaptive level past n/(n+1)."""
import datetime
import math
import os
import tempfile

from refutil import need, run, etacal

np = need("numpy", "python3-numpy")

rng = np.random.default_rng(11063)
day = 86400.0
t0 = 1772323200.0  # 2026-03-01T00:00:00Z
days = 40
t = [t0]
for d in range(days):
    t.extend(t0 + d * day + np.sort(rng.uniform(1, day, 19)))
t = np.array(t)
pred = np.round(rng.uniform(1200, 2400, t.size))
y = np.maximum(60.0, np.round(pred + rng.normal(0, 400, t.size)))
slow = (t % day) >= day - 5 * 3600
y[slow] = 5 * 3600.0
dd = ((t - t0) // day).astype(int)
for k, extra in ((15, 3), (16, 6), (17, 12)):
    y[dd == k] += extra * 3600.0

fd, path = tempfile.mkstemp(suffix=".csv")
with os.fdopen(fd, "w") as f:
    f.write("t,pred,actual\n")
    for a, b, c in zip(t, pred, y):
        f.write(f"{a:.0f},{b:.0f},{c:.0f}\n")


def epoch(s):
    return datetime.datetime.strptime(s, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=datetime.timezone.utc).timestamp()


def replay(window_d, target, gamma):
    out = run([etacal(), "backtest", path, "--actual", "actual", "--pred", "pred", "--time", "t",
               "--window", f"{window_d}d", "--every", "1d", "--target", repr(target), "--format", "csv"]
              + (["--adapt", repr(gamma)] if gamma else []))
    lines = out.strip().split("\n")
    assert lines[0].endswith(",mean_buffer_s,level,promise"), lines[0]
    level = target
    lookahead = 0
    kinds = {}
    for ln in lines[1:]:
        f = ln.split(",")
        s, e = epoch(f[0]), epoch(f[1])
        placed = (t >= s - window_d * day) & (t < s)
        cal = placed & (t + y <= s)
        lookahead += int(placed.sum() - cal.sum())
        assert int(f[2]) == int(cal.sum()), f"{f[0]}: calib {f[2]}, numpy {int(cal.sum())}"
        ev = (t >= s) & (t < e)
        n = int(ev.sum())
        assert int(f[3]) == n
        assert abs(float(f[9]) - level) <= 1e-9, f"{f[0]}: level {f[9]}, numpy {level}"
        if n == 0:
            continue
        if level <= 0:
            kind, hits = "none", 0
        else:
            q = math.inf
            if level < 1:
                sc = np.append(y[cal] - pred[cal], np.inf)
                q = float(np.quantile(sc, level, method="inverted_cdf"))
            if math.isinf(q):
                kind, hits = "unbounded", n
            else:
                kind = "finite"
                hits = int((y[ev] <= pred[ev] + q).sum())
                assert abs(float(f[8]) - q) <= 1e-9 * abs(q), f"{f[0]}: buffer {f[8]}, numpy {q}"
        assert f[10] == kind, f"{f[0]}: promise {f[10]}, numpy {kind}"
        assert int(f[4]) == hits, f"{f[0]}: hits {f[4]}, numpy {hits}"
        if kind != "finite":
            assert f[8] == "", f"{f[0]}: buffer {f[8]} for promise {kind}"
        kinds[kind] = kinds.get(kind, 0) + 1
        if gamma:
            level += gamma * (target - hits / n)
    assert lookahead > 0, "the stream should have orders on the road at the starts"
    return len(lines) - 1, lookahead, kinds


try:
    a = replay(7, 0.875, 0)
    b = replay(7, 0.875, 0.0625)
    c = replay(2, 0.75, 0.5)
finally:
    os.unlink(path)
assert b[2].get("unbounded", 0) >= 1, b
print(f"periods agree with numpy: plain {a[0]} ({a[1]} orders on the road at the starts kept out), "
      f"adaptive {b[0]} {b[2]}, adaptive window 2d {c[0]} {c[2]}")
