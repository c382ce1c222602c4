#!/usr/bin/env bash
# SPDX-License-Identifier: GPL-3.0-or-later
# bench/qr_run.sh: quantile regression fit times (file reading excluded) of
# etacal against R's quantreg (rq.fit with methods "fn" and "pfn", and the
# user-level rq() formula call with "pfn") and statsmodels' QuantReg on the
# same seeded data, in one run; prints a markdown table with the ratios and
# the objectives.  etacal's time is the best of 3 fits, each checked to give
# the same coefficients bit for bit, with the default threads (one per CPU)
# and with one thread (the two must agree bit for bit too).  Run from the
# repo root after `make`:
#   bash bench/qr_run.sh          (needs r-cran-quantreg, python3-statsmodels
#                                   for the reference columns; skips them if missing)
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/.."
B=build/bench
mkdir -p "$B"
[[ -f build/libetacal.a ]] || make >/dev/null
cc -std=c11 -O2 -D_POSIX_C_SOURCE=200809L -Iinclude bench/qr_bench.c build/libetacal.a -o "$B/qr_bench" \
    -lcsv $(pkg-config --libs gsl) -lm
have_r=0
Rscript -e 'suppressMessages(library(quantreg))' >/dev/null 2>&1 && have_r=1
have_sm=0
/usr/bin/python3 -c 'import statsmodels.api' >/dev/null 2>&1 && have_sm=1
[[ $have_r = 1 ]] || echo "SKIP R quantreg: r-cran-quantreg not installed" >&2
[[ $have_sm = 1 ]] || echo "SKIP statsmodels: python3-statsmodels not installed" >&2

# R's times are the best of 3 calls, as etacal's are the best of 3 fits
rfit() { # rfit CSV METHOD TAU -> "seconds objective"
    Rscript -e "suppressMessages(library(quantreg)); d <- read.csv('$1'); X <- cbind(1, as.matrix(d[, -1]));
      t <- Inf; for (r in 1:3) t <- min(t, system.time(f <- rq.fit(X, d\$y, tau = $3, method = '$2'))[['elapsed']]);
      u <- d\$y - X %*% coef(f); cat(t, sprintf('%.17g', sum(pmax($3 * u, ($3 - 1) * u))), '\n')"
}
rformula() { # rformula CSV METHOD TAU -> seconds of the user-level rq(y ~ ., ...) call
    Rscript -e "suppressMessages(library(quantreg)); d <- read.csv('$1');
      t <- Inf; for (r in 1:3) t <- min(t, system.time(f <- rq(y ~ ., tau = $3, data = d, method = '$2'))[['elapsed']]);
      cat(t, '\n')"
}
smfit() { # smfit CSV TAU -> "seconds objective"
    /usr/bin/python3 - "$1" "$2" <<'PY'
import sys, time
import numpy as np
import statsmodels.api as sm
d = np.loadtxt(sys.argv[1], delimiter=",", skiprows=1)
y, X = d[:, 0], np.column_stack([np.ones(len(d)), d[:, 1:]])
t = float(sys.argv[2])
t0 = time.perf_counter()
f = sm.QuantReg(y, X).fit(q=t, max_iter=5000)
dt = time.perf_counter() - t0
u = y - X @ f.params
print(dt, repr(float(np.sum(np.maximum(t * u, (t - 1) * u)))))
PY
}

tau=0.9
echo "## quantile regression fit, tau $tau, $(date -u +%Y-%m-%dT%H:%M:%SZ)"
echo
echo "| n | p | etacal s | etacal 1 thread s | same bits | rq.fit fn s | rq.fit pfn s | rq(pfn) s | statsmodels s | fastest rq.fit / etacal | rq(pfn) / etacal | etacal objective | R objective (best) | statsmodels objective |"
echo "| ---: | ---: | ---: | ---: | :---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |"
for case in "100000 3" "1000000 3" "1000000 10" "10000000 3" "10000000 10"; do
    read -r n p <<<"$case"
    csv="$B/qr-$n-$p.csv"
    want_ref=1
    [[ $n -gt 1000000 ]] && want_ref=0
    if [[ $want_ref = 1 && ! -f $csv ]]; then
        read -r _ _ _ et eo _ ck _ < <("$B/qr_bench" "$n" "$p" "$tau" --reps 3 --csv "$csv")
    else
        read -r _ _ _ et eo _ ck _ < <("$B/qr_bench" "$n" "$p" "$tau" --reps 3)
    fi
    read -r _ _ _ et1 _ _ ck1 _ < <("$B/qr_bench" "$n" "$p" "$tau" --reps 3 --threads 1)
    same=no
    [[ $ck = "$ck1" ]] && same=yes
    fn=- pfn=- smt=- ro=- so=- ratio=- rq=- ratio2=-
    if [[ $want_ref = 1 && $have_r = 1 ]]; then
        read -r pfn pfo < <(rfit "$csv" pfn "$tau")
        ro=$pfo
        best=$pfn
        if [[ $p -le 3 ]]; then
            read -r fn fno < <(rfit "$csv" fn "$tau")
            best=$(awk -v a="$fn" -v b="$pfn" 'BEGIN { print (a < b) ? a : b }')
            ro=$(awk -v a="$fno" -v b="$pfo" 'BEGIN { printf "%.17g", (a < b) ? a : b }')
        fi
        ratio=$(awk -v a="$best" -v b="$et" 'BEGIN { printf "%.1f", a / b }')
        rq=$(rformula "$csv" pfn "$tau")
        ratio2=$(awk -v a="$rq" -v b="$et" 'BEGIN { printf "%.1f", a / b }')
    fi
    if [[ $want_ref = 1 && $have_sm = 1 ]]; then
        read -r smt so < <(smfit "$csv" "$tau")
        smt=$(printf '%.2f' "$smt")
    fi
    echo "| $n | $p | $et | $et1 | $same | $fn | $pfn | $rq | $smt | $ratio | $ratio2 | $eo | $ro | $so |"
done
