#!/usr/bin/env bash
# SPDX-License-Identifier: GPL-3.0-or-later
#
# bench/run.sh - etacal benchmark: times `etacal fit` and `etacal apply`
# against reference runs on the same machine in the same run (cat, the
# libcsv-alone tokenizer and a pandas implementation) and prints the ratios
# that docs/benchmarks.md sets goals for.
#
# Usage (from the repo root):  bash bench/run.sh [ROWS]      (default 10000000)
#
# Environment:
#   ETACAL=PATH   etacal binary to time (default build/etacal; built with
#                 `make` when it is missing)
#   REPS=N        timed runs per command, the median is reported (default 3)
#   CC=...        C compiler for the helper tools (default cc)
#
# Everything it writes goes to build/bench/ (not committed); the table is
# also saved as build/bench/results.md.
#
# Copyright (C) 2026 The etacal authors.  This program is free software: you
# can redistribute it and/or modify it under the terms of the GNU General
# Public License as published by the Free Software Foundation, either version
# 3 of the License, or (at your option) any later version.  It is distributed
# WITHOUT ANY WARRANTY; see the GNU General Public License for more details.

# The WALL_* and RSS_* variables are set by measure() with printf -v.
# shellcheck disable=SC2154

set -euo pipefail

cd "$(dirname "${BASH_SOURCE[0]}")/.."

die() { echo "bench/run.sh: $*" >&2; exit 1; }

ROWS=${1:-10000000}
if ! [[ $ROWS =~ ^[0-9]+$ ]] || ((ROWS < 100)); then
    echo "usage: bash bench/run.sh [ROWS]   (ROWS >= 100)" >&2
    exit 2
fi
SMALL=$((ROWS / 10))
REPS=${REPS:-3}
[[ $REPS =~ ^[1-9][0-9]*$ ]] || die "REPS must be a positive integer"
CC=${CC:-cc}
CFLAGS=(-std=c11 -O2 -g -Wall -Wextra -Wpedantic -Wshadow
    -Wstrict-prototypes -Wmissing-prototypes -Werror)
ETACAL=${ETACAL:-build/etacal}
PY=/usr/bin/python3
B=build/bench
BUDGET_BYTES_PER_ROW=40   # goal for etacal fit: RSS <= 40 B/row + fixed
BUDGET_FIXED_MB=8         # ... + this many MiB
mkdir -p "$B"

[[ -x /usr/bin/time ]] || die "/usr/bin/time not found (Debian package: time)"

# ---------------------------------------------------------------- tools
build_tool() { # build_tool OUT SRC LIBS...
    local out=$1 src=$2
    shift 2
    if [[ ! -x $out || $src -nt $out ]]; then
        echo "building $out" >&2
        "$CC" "${CFLAGS[@]}" "$src" -o "$out" "$@"
    fi
}
build_tool "$B/citygen" examples/citygen.c -lm
[[ -f /usr/include/csv.h ]] || die "csv.h not found (Debian package: libcsv-dev)"
build_tool "$B/tokenize" bench/tokenize.c -lcsv

if [[ ! -x $ETACAL ]]; then
    if [[ $ETACAL == build/etacal ]]; then
        echo "build/etacal missing: running make" >&2
        make || die "make failed"
    fi
    [[ -x $ETACAL ]] || die "$ETACAL not found or not executable"
fi

HAVE_PANDAS=0
if [[ -x $PY ]] && "$PY" -c 'import pandas, numpy' 2>/dev/null; then
    HAVE_PANDAS=1
fi

# ---------------------------------------------------------------- data
gen() { # gen ROWS -> prints file name
    local n=$1 f="$B/bench-$1.csv"
    if [[ ! -s $f || $B/citygen -nt $f ]]; then
        echo "generating $f ($n rows)" >&2
        rm -f "$f"
        "$B/citygen" --bench --rows "$n" --cal "$f.tmp"
        mv "$f.tmp" "$f"
    fi
    echo "$f"
}
FILE=$(gen "$ROWS")
SFILE=$(gen "$SMALL")
BYTES=$(wc -c < "$FILE")
SBYTES=$(wc -c < "$SFILE")

# Warm the page cache so every command reads from memory.
cat "$FILE" "$SFILE" > /dev/null

# ---------------------------------------------------------------- timing
# measure NAME STDOUT CMD...: run CMD REPS times with stdout to STDOUT;
# sets WALL_<NAME> (median seconds) and RSS_<NAME> (median peak RSS, KiB).
measure() {
    local name=$1 out=$2
    shift 2
    local walls=() rsss=() i t0 t1
    echo "timing $name ($REPS runs): $*" >&2
    for ((i = 0; i < REPS; i++)); do
        t0=$(date +%s%N)
        if ! /usr/bin/time -f '%e %M' -o "$B/$name.time" "$@" \
            > "$out" 2> "$B/$name.stderr"; then
            cat "$B/$name.stderr" >&2
            die "$name failed: $*"
        fi
        t1=$(date +%s%N)
        walls+=("$(((t1 - t0) / 1000))")
        rsss+=("$(awk 'END { print $2 }' "$B/$name.time")")
    done
    printf -v "WALL_$name" '%s' "$(printf '%s\n' "${walls[@]}" |
        sort -n | awk '{ v[NR] = $1 } END { printf "%.3f", v[int((NR + 1) / 2)] / 1e6 }')"
    printf -v "RSS_$name" '%s' "$(printf '%s\n' "${rsss[@]}" |
        sort -n | awk '{ v[NR] = $1 } END { print v[int((NR + 1) / 2)] }')"
}

QUOTES="$B/quotes.csv"
APPLY_OUT="$B/apply-out.csv"

measure cat /dev/null cat "$FILE"
measure tokenize "$B/tokenize.out" "$B/tokenize" "$FILE"
measure fit "$B/fit.out" "$ETACAL" fit "$FILE" --actual actual_s \
    --pred pred_s --by zone,band -o "$QUOTES"
[[ -s $QUOTES ]] || die "etacal fit wrote no $QUOTES"
if ((HAVE_PANDAS)); then
    measure pandas /dev/null "$PY" bench/pandas_fit.py "$FILE" \
        -o "$B/pandas-quotes.csv"
else
    echo "SKIP pandas: python3-pandas not installed" >&2
fi
measure apply_small /dev/null "$ETACAL" apply "$QUOTES" "$SFILE" \
    --pred pred_s -o "$APPLY_OUT"
measure apply "$B/apply.out" "$ETACAL" apply "$QUOTES" "$FILE" \
    --pred pred_s -o "$APPLY_OUT"
rm -f "$APPLY_OUT"

# ---------------------------------------------------------------- report
# row LABEL NAME ROWS BYTES: one line of the timing table.
row() {
    local label=$1 name=$2 n=$3 bytes=$4 per_row=${5:-}
    local wall_var="WALL_$name" rss_var="RSS_$name"
    awk -v l="$label" -v n="$n" -v b="$bytes" -v w="${!wall_var}" \
        -v r="${!rss_var}" -v pr="$per_row" 'BEGIN {
        mbs = w > 0 ? sprintf("%.0f", b / 1e6 / w) : "n/a"
        rb = r * 1024
        printf "| %s | %d | %.1f | %.3f | %s | %.1f | %s |\n", l, n, b / 1e6,
            w, mbs, rb / 1e6, pr ? sprintf("%.1f", rb / n) : "" }'
}

# ratio LABEL VALUE GOAL-OP GOAL: one line of the ratio table.
MET=0
TOTAL=0
ratio() {
    local label=$1 value=$2 op=$3 goal=$4 ok
    TOTAL=$((TOTAL + 1))
    ok=$(awk -v v="$value" -v g="$goal" -v op="$op" 'BEGIN {
        if (op == ">=") met = v >= g
        else if (op == "<=") met = v <= g
        else met = v < g
        print (met ? "yes" : "no") }')
    [[ $ok == yes ]] && MET=$((MET + 1))
    printf '| %s | %.2f | %s %s | %s |\n' "$label" "$value" "$op" "$goal" "$ok"
}
div() { awk -v a="$1" -v b="$2" 'BEGIN { printf "%.6f", (b > 0 ? a / b : 0) }'; }

fit_rss_bytes=$((RSS_fit * 1024))
budget_bytes=$((BUDGET_BYTES_PER_ROW * ROWS + BUDGET_FIXED_MB * 1048576))
cpu=$(awk -F': ' '/^model name/ { print $2; exit }' /proc/cpuinfo 2>/dev/null || true)

{
    echo "## etacal benchmark, $(date -u +%Y-%m-%dT%H:%M:%SZ)"
    echo
    echo "- machine: ${cpu:-unknown CPU}, $(nproc) CPUs, $(uname -sr)"
    echo "- input: \`citygen --bench\`, $ROWS rows ($(awk -v b="$BYTES" 'BEGIN { printf "%.1f", b / 1e6 }') MB)" \
        "and $SMALL rows ($(awk -v b="$SBYTES" 'BEGIN { printf "%.1f", b / 1e6 }') MB), page cache warm"
    echo "- each command run $REPS times; median wall time and median peak RSS" \
        "(\`/usr/bin/time\` %M); MB = 10^6 bytes"
    echo
    echo "| command | rows | input MB | wall s | MB/s | peak RSS MB | RSS bytes/row |"
    echo "| --- | ---: | ---: | ---: | ---: | ---: | ---: |"
    row 'cat FILE > /dev/null' cat "$ROWS" "$BYTES"
    row 'tokenize (libcsv alone)' tokenize "$ROWS" "$BYTES"
    row 'etacal fit --by zone,band' fit "$ROWS" "$BYTES" 1
    if ((HAVE_PANDAS)); then
        row 'pandas_fit.py' pandas "$ROWS" "$BYTES" 1
    else
        echo "| pandas_fit.py | SKIP pandas: python3-pandas not installed | | | | | |"
    fi
    row 'etacal apply' apply_small "$SMALL" "$SBYTES"
    row 'etacal apply' apply "$ROWS" "$BYTES"
    echo
    echo "| ratio | value | goal | met |"
    echo "| --- | ---: | --- | --- |"
    if ((HAVE_PANDAS)); then
        ratio 'pandas / etacal fit (wall time)' "$(div "$WALL_pandas" "$WALL_fit")" '>=' 4
    else
        echo "| pandas / etacal fit (wall time) | SKIP | >= 4 | |"
    fi
    ratio 'etacal fit / tokenize (wall time)' "$(div "$WALL_fit" "$WALL_tokenize")" '<=' 1.5
    ratio "etacal fit RSS / ($BUDGET_BYTES_PER_ROW B/row + $BUDGET_FIXED_MB MiB)" \
        "$(div "$fit_rss_bytes" "$budget_bytes")" '<=' 1
    if ((HAVE_PANDAS)); then
        ratio 'etacal fit RSS / pandas RSS' "$(div "$RSS_fit" "$RSS_pandas")" '<' 0.25
    else
        echo "| etacal fit RSS / pandas RSS | SKIP | < 0.25 | |"
    fi
    ratio "etacal apply RSS, $ROWS / $SMALL rows (flat)" \
        "$(div "$RSS_apply" "$RSS_apply_small")" '<=' 1.1
    echo
    echo "Goals met: $MET of $TOTAL."
} | tee "$B/results.md"

echo "table saved to $B/results.md" >&2
