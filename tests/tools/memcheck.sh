#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# memcheck.sh BUILD: a subset of the suite under valgrind memcheck, with
# zero reports required: invalid reads and writes, uses of uninitialised
# values and definite leaks all fail (--error-exitcode=99).  A few unit
# tests and a handful of commands on small inputs, error paths included;
# the whole suite runs under ASan/UBSan instead (make asan).  Skips with a
# notice when valgrind is missing.
set -u
build=$1
case $build in /*) ;; *) build=$(pwd)/$build ;; esac
if ! command -v valgrind >/dev/null 2>&1; then
    echo "SKIP memcheck: valgrind is not installed (apt-get install valgrind)"
    exit 0
fi
bin=$build/etacal
top=$(pwd)
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
vg="valgrind -q --error-exitcode=99 --leak-check=full --errors-for-leak-kinds=definite --show-leak-kinds=definite"
pass=0
fail=0
# check NAME WANT_STATUS COMMAND...: the command under valgrind exits
# WANT_STATUS (its own status: 0, or 1 for an input error) with no report
check() {
    name=$1 want=$2
    shift 2
    $vg --log-file="$work/$name.vg" "$@" >"$work/$name.out" 2>"$work/$name.err"
    rc=$?
    if [ $rc = "$want" ] && [ ! -s "$work/$name.vg" ]; then
        pass=$((pass + 1))
    else
        fail=$((fail + 1))
        echo "FAIL memcheck/$name: exit $rc (expected $want)"
        head -40 "$work/$name.vg"
        tail -5 "$work/$name.err"
    fi
}

for t in test_quote test_csv_read test_apply test_timeparse test_io test_fuzz_replay test_report; do
    check "$t" 0 "$build/tests/$t"
done
"$build/citygen" --seed 5 --rows 600 --fresh-rows 100 --cal "$work/cal.csv" --fresh "$work/fresh.csv" 2>/dev/null
cd "$work" || exit 1
check fit 0 "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone,band --min-rows 20 --target 0.8,0.9 -o q.csv
check fit_qr 0 "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone --method qr --x distance_km --min-rows 60 -q -o qq.csv
check fit_holdout 0 "$bin" fit cal.csv --actual actual_s --pred pred_s --by zone --holdout 0.2 --time placed_at -q -o qh.csv
check apply 0 "$bin" apply q.csv fresh.csv --pred pred_s --actual actual_s --round 60 -o promised.csv
check apply_qr 0 "$bin" apply qq.csv fresh.csv --pred pred_s -q -o promised_qr.csv
check check_json 0 "$bin" check promised.csv --actual actual_s --upper promise_s_80=0.8 --by zone --format json -o c.json
check qr 0 "$bin" qr "$top/tests/ref/engel.csv" --y foodexp --x income --tau 0.25,0.5 --format json -o qr.json
check curve 0 "$bin" curve cal.csv --actual actual_s --pred pred_s --from 0.85 --to 0.9 --step 0.05 -o curve.txt
check backtest 0 "$bin" backtest cal.csv --actual actual_s --pred pred_s --time placed_at --window 7d --every 7d -o bt.txt
check report 0 "$bin" report cal.csv --actual actual_s --pred pred_s --by zone --time placed_at --window 7d --every 7d -o r.html
# error paths: a bad quote table, a NUL byte, a ragged row, an overflowing number
printf 'zone,target,method,n,k,offset_s,slope\n*,0.9,add,10,9,5,1\nx,0.9,add,10,11,5,1\n' >bad_q.csv
check bad_quotes 1 "$bin" apply bad_q.csv fresh.csv --pred pred_s -o never.csv
printf 'zone,pred_s,actual_s\na,1\0000,12\n' >nul.csv
check nul 1 "$bin" fit nul.csv --actual actual_s --pred pred_s -o never.csv
printf 'zone,pred_s,actual_s\na,10,12\nb,10\nc,11,1e400\n' >ragged.csv
check ragged_skip 1 "$bin" fit ragged.csv --actual actual_s --pred pred_s --by zone --bad-rows skip -o never.csv
cd "$top" || exit 1
echo "memcheck: $pass passed, $fail failed"
[ $fail = 0 ]
