#!/usr/bin/python3
# SPDX-License-Identifier: GPL-3.0-or-later
"""pandas_fit.py - pandas reference for the `etacal fit` benchmark.

Reads the 4-column bench file (zone,band,pred_s,actual_s) written by
`citygen --bench`, with zone and band as categorical columns, and computes
the split-conformal buffer at target 0.9 for every (zone, band) group and
for all rows together:

    s = actual - pred                  (conformity scores)
    k = ceil((n + 1) * 0.9)            as ((n + 1) * 9 + 9) // 10
    buffer = k-th smallest score       (np.partition); inf if k > n

Writes a small CSV (zone,band,n,k,buffer; the global row has zone and band
"*") and prints the read / compute / write timings to stderr.  This is the
idiomatic-dataframe reference that bench/run.sh times against etacal.

Usage: /usr/bin/python3 bench/pandas_fit.py FILE -o OUT.csv

Copyright (C) 2026 The etacal authors.  This program is free software: you
can redistribute it and/or modify it under the terms of the GNU General
Public License as published by the Free Software Foundation, either version
3 of the License, or (at your option) any later version.  It is distributed
WITHOUT ANY WARRANTY; see the GNU General Public License for more details.
"""

import argparse
import math
import os
import sys
import time

import numpy as np
import pandas as pd

PROG = "etacal-pandas-fit"


def conformal_buffer(scores):
    """Return (n, k, buffer) of split-conformal at target 0.9."""
    n = int(scores.shape[0])
    k = ((n + 1) * 9 + 9) // 10
    if k > n or n == 0:
        return n, k, math.inf
    return n, k, float(np.partition(scores, k - 1)[k - 1])


def main():
    ap = argparse.ArgumentParser(
        prog="pandas_fit.py",
        description="pandas reference for etacal fit: per (zone, band) "
        "split-conformal buffers at target 0.9.")
    ap.add_argument("file", help="bench CSV: zone,band,pred_s,actual_s")
    ap.add_argument("-o", "--output", required=True, help="output CSV")
    args = ap.parse_args()

    t0 = time.perf_counter()
    df = pd.read_csv(
        args.file,
        dtype={"zone": "category", "band": "category",
               "pred_s": "float64", "actual_s": "float64"})
    t1 = time.perf_counter()

    scores = df["actual_s"].to_numpy() - df["pred_s"].to_numpy()
    df["score"] = scores
    rows = []
    for (zone, band), grp in df.groupby(["zone", "band"], observed=True,
                                        sort=True)["score"]:
        n, k, buf = conformal_buffer(grp.to_numpy().copy())
        rows.append((str(zone), str(band), n, k, buf))
    n, k, buf = conformal_buffer(scores.copy())
    rows.append(("*", "*", n, k, buf))
    t2 = time.perf_counter()

    tmp = args.output + ".tmp"
    try:
        with open(tmp, "w", encoding="ascii", newline="\n") as f:
            f.write("zone,band,n,k,buffer_s\n")
            for z, b, n, k, buf in rows:
                f.write("%s,%s,%d,%d,%s\n" % (
                    z, b, n, k, "inf" if math.isinf(buf) else "%.1f" % buf))
        os.replace(tmp, args.output)
    except OSError as e:
        try:
            os.remove(tmp)
        except OSError:
            pass
        print("%s: cannot write %s: %s" % (PROG, args.output, e),
              file=sys.stderr)
        return 1
    t3 = time.perf_counter()

    print("%s: rows %d groups %d read %.3f s compute %.3f s write %.3f s"
          % (PROG, len(df), len(rows) - 1, t1 - t0, t2 - t1, t3 - t2),
          file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
