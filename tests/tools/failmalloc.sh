#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# failmalloc.sh BUILD: out-of-memory is reported, never a crash.  Runs a few
# commands on small inputs under tests/tools/failmalloc.c (LD_PRELOAD) with
# the Nth allocation failing, for every N from 1 to the number of
# allocations the command makes (a deterministic sample of about MAX_RUNS
# when there are more).  Each run must either succeed with exactly the
# output of a run without failure, or exit 1 with "out of memory" (or the
# ENOMEM text of strerror) on stderr, nothing on stdout and no output file
# or temporary file left.  Anything else, a signal above all, fails.
set -u
build=$1
max_runs=${MAX_RUNS:-400}
case $build in /*) ;; *) build=$(pwd)/$build ;; esac
bin=$build/etacal
hook=$build/failmalloc.so
top=$(pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

# inputs, made once without the hook
"$build/citygen" --seed 5 --rows 400 --fresh-rows 60 --cal "$work/cal.csv" --fresh "$work/fresh.csv" 2>/dev/null || exit 1
cp "$top/tests/data/apply_basic/quotes.csv" "$work/quotes.csv"
cp "$top/tests/data/apply_basic/orders.csv" "$work/orders.csv"
cp "$top/tests/ref/engel.csv" "$work/engel.csv"
"$bin" fit "$work/cal.csv" --actual actual_s --pred pred_s --by zone --min-rows 20 -q -o "$work/q.csv" || exit 1
"$bin" apply "$work/q.csv" "$work/fresh.csv" --pred pred_s -q -o "$work/promised.csv" || exit 1

pass=0
fail=0
# run NAME OUTFILE COMMAND...: OUTFILE is the command's -o file ("-" if none)
run() {
    name=$1 out=$2
    shift 2
    cd "$work" || exit 1
    rm -f "$out" ref.out ref.file
    ETACAL_FAIL_REPORT=1 LD_PRELOAD="$hook" "$@" >ref.out 2>ref.err
    rc=$?
    if [ $rc != 0 ]; then
        echo "FAIL failmalloc/$name: exit $rc without a failing allocation: $(cat ref.err)"
        fail=$((fail + 1))
        cd "$top"; return
    fi
    [ "$out" = - ] || mv "$out" ref.file
    total=$(sed -n 's/^failmalloc: \([0-9]*\) allocations$/\1/p' ref.err)
    step=$(( (total + max_runs - 1) / max_runs ))
    [ "$step" -ge 1 ] || step=1
    bad=0 ran=0 oom=0
    n=1
    while [ $n -le "$total" ]; do
        rm -f "$out"
        ETACAL_FAIL_AT=$n LD_PRELOAD="$hook" "$@" >got.out 2>got.err
        rc=$?
        ran=$((ran + 1))
        why=""
        if [ $rc = 0 ]; then
            cmp -s got.out ref.out || why="exit 0 but stdout differs"
            if [ "$out" != - ] && ! cmp -s "$out" ref.file; then why="exit 0 but $out differs"; fi
        elif [ $rc = 1 ] && grep -q "out of memory\|Cannot allocate memory" got.err; then
            oom=$((oom + 1))
            [ -s got.out ] && why="out of memory, but something on stdout"
            [ "$out" != - ] && [ -e "$out" ] && why="out of memory, but $out exists"
            for t in "$out".tmp.*; do [ -e "$t" ] && why="out of memory, but $t left behind"; done
        else
            why="exit $rc: $(head -c 300 got.err)"
        fi
        if [ -n "$why" ]; then
            echo "FAIL failmalloc/$name: allocation $n of $total failing: $why"
            bad=$((bad + 1))
        fi
        n=$((n + step))
    done
    [ "$out" = - ] || rm -f "$out".tmp.*
    if [ $bad = 0 ]; then
        pass=$((pass + 1))
        echo "failmalloc/$name: $ran runs of $total allocations, $oom reported out of memory, the others succeeded"
    else
        fail=$((fail + 1))
    fi
    cd "$top"
}

run fit out.csv "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone,band --min-rows 20 --target 0.8,0.9 -o out.csv
run fit_ratio_conf out.csv "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone --method ratio --confidence 0.9 --min-rows 20 -o out.csv
run fit_qr out.csv "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone --method qr --x distance_km --min-rows 60 -o out.csv
run apply out.csv "$bin" apply quotes.csv orders.csv --pred pred_s -o out.csv
run apply_actual out.csv "$bin" apply q.csv fresh.csv --pred pred_s --actual actual_s --round 60 -o out.csv
run check out.txt "$bin" check promised.csv --actual actual_s --upper promise_s=0.9 --by zone -o out.txt
run check_json out.json "$bin" check promised.csv --actual actual_s --upper promise_s=0.9 --by zone --format json -o out.json
run check_stdout - "$bin" check promised.csv --actual actual_s --upper promise_s=0.9 --format csv
run check_table out.txt "$bin" check promised.csv --actual actual_s --upper promise_s=0.9 --table q.csv -o out.txt
run check_table_json out.json "$bin" check promised.csv --actual actual_s --upper promise_s=0.9 --table q.csv --format json -o out.json
run qr out.txt "$bin" qr engel.csv --y foodexp --x income --tau 0.25,0.5 -o out.txt
run qr_json out.json "$bin" qr engel.csv --y foodexp --x income --tau 0.5 --format json -o out.json
run curve out.txt "$bin" curve cal.csv --actual actual_s --pred pred_s --by zone --from 0.85 --to 0.9 --step 0.05 -o out.txt
run curve_json out.json "$bin" curve cal.csv --actual actual_s --pred pred_s --from 0.85 --to 0.9 --step 0.05 --format json -o out.json
run backtest out.txt "$bin" backtest cal.csv --actual actual_s --pred pred_s --time placed_at --window 7d --every 7d -o out.txt
run backtest_json out.json "$bin" backtest cal.csv --actual actual_s --pred pred_s --time placed_at --window 7d --every 7d --format json -o out.json
run report out.html "$bin" report cal.csv --actual actual_s --pred pred_s --by zone --time placed_at -o out.html
# publish without replacing anything (--dry-run): the guards and the change
# report against the current table, which stays as it is
"$bin" publish "$work/cal.csv" --table "$work/pub.csv" --actual actual_s --pred pred_s --by zone --min-rows 20 \
    --min-total-rows 100 >/dev/null 2>&1 || { echo "FAIL failmalloc: the first publish failed"; exit 1; }
# Publish, whatever allocation fails: either the run without failure's exit
# status, change report and table, or exit 1 with "out of memory" and the
# table byte for byte as it was or exactly the new one (the failure may
# come after the replacement: "the table is published, but ..."), never a
# crash, a guard refused for want of memory, or a short report; no
# temporary file left.  Each run starts from the same current table.
run_publish() {
    name=$1
    shift
    cd "$work" || exit 1
    cp pub.csv pub.before
    ETACAL_FAIL_REPORT=1 LD_PRELOAD="$hook" "$@" >ref.out 2>ref.err
    ref_rc=$?
    total=$(sed -n 's/^failmalloc: \([0-9]*\) allocations$/\1/p' ref.err)
    cp pub.csv pub.after
    bad=0 ran=0
    n=1
    while [ $n -le "$total" ]; do
        cp pub.before pub.csv
        rm -f pub.csv.prev pub.csv.meta.json
        ETACAL_FAIL_AT=$n LD_PRELOAD="$hook" "$@" >got.out 2>got.err
        rc=$?
        ran=$((ran + 1))
        why=""
        if [ $rc = "$ref_rc" ]; then
            cmp -s got.out ref.out || why="exit $rc but the change report differs"
            cmp -s pub.csv pub.after || why="$why; exit $rc but the table is not that of the run without failure"
        elif [ $rc = 1 ] && grep -q "out of memory\|Cannot allocate memory" got.err; then
            # old or new, never half
            if ! cmp -s pub.csv pub.before && ! cmp -s pub.csv pub.after; then
                why="exit 1 and the table is neither the old nor the new one"
            fi
        else
            why="exit $rc (the run without failure: $ref_rc): $(head -c 300 got.err)"
        fi
        for t in pub.csv.tmp.* pub.csv.*.tmp.*; do [ -e "$t" ] && why="$why; $t left behind"; done
        if [ -n "$why" ]; then
            echo "FAIL failmalloc/$name: allocation $n of $total failing: $why"
            bad=$((bad + 1))
        fi
        n=$((n + 1))
    done
    cp pub.before pub.csv
    rm -f pub.csv.prev pub.csv.meta.json
    if [ $bad = 0 ]; then
        pass=$((pass + 1))
        echo "failmalloc/$name: $ran runs of $total allocations: each the run without failure, or out of memory reported with the table old or new, never half"
    else
        fail=$((fail + 1))
    fi
    cd "$top"
}
"$build/citygen" --seed 6 --rows 400 --fresh-rows 10 --cal "$work/cal2.csv" --fresh "$work/fresh2.csv" 2>/dev/null || exit 1
run_publish publish "$bin" publish cal2.csv --table pub.csv --actual actual_s --pred pred_s --by zone --min-rows 20 \
    --min-total-rows 100 --max-change 1d
run_publish publish_dry "$bin" publish cal.csv --table pub.csv --actual actual_s --pred pred_s --by zone --min-rows 20 \
    --min-total-rows 100 --dry-run
echo "failmalloc: $pass passed, $fail failed"
[ $fail = 0 ]
