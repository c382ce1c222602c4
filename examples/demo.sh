#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# demo.sh BUILD: the main job on the demo data of Veldmark's courier network
# (an invented city; the data come from examples/citygen.c with a fixed
# seed).  Fit a quote table on four weeks of delivered orders, promise the
# next week's orders with it, show the on-time rate reached next to that of
# the bare prediction, and check the promises per zone with their
# confidence intervals, write the report page, publish a table as the
# nightly job would and show a guard refusing a thin night.
set -eu
build=${1:-build}
etacal=$build/etacal
demo=$build/demo
mkdir -p "$demo"

echo "== 1. Demo data: four weeks to calibrate on, one fresh week to promise"
"$build/citygen" --seed 2026 --cal "$demo/cal.csv" --fresh "$demo/fresh.csv"

echo
echo "== 2. etacal fit: buffers per zone and hour band for a 90% on-time target"
echo "\$ etacal fit $demo/cal.csv --actual actual_s --pred pred_s --by zone,band --target 0.9 -o $demo/quotes.csv"
"$etacal" fit "$demo/cal.csv" --actual actual_s --pred pred_s --by zone,band --target 0.9 \
    -o "$demo/quotes.csv"

echo
echo "== 3. etacal apply: promises for the fresh week, rounded up to whole minutes"
echo "\$ etacal apply $demo/quotes.csv $demo/fresh.csv --pred pred_s --round 60 --actual actual_s -o $demo/promised.csv"
"$etacal" apply "$demo/quotes.csv" "$demo/fresh.csv" --pred pred_s --round 60 --actual actual_s \
    -o "$demo/promised.csv"

echo
echo "First promised orders ($demo/promised.csv):"
head -4 "$demo/promised.csv"

echo
echo "== 4. etacal check: do the promises keep their word on the fresh week, per zone?"
echo "\$ etacal check $demo/promised.csv --actual actual_s --upper promise_s=0.9 --by zone --gate"
"$etacal" check "$demo/promised.csv" --actual actual_s --upper promise_s=0.9 --by zone --gate

echo
echo "== 5. etacal report: the evidence on one HTML page (charts, tables, no scripts)"
echo "\$ etacal report $demo/cal.csv --actual actual_s --pred pred_s --by zone,band --time placed_at --window 14d -o $demo/report.html"
"$etacal" report "$demo/cal.csv" --actual actual_s --pred pred_s --by zone,band --time placed_at --window 14d \
    --title "Veldmark couriers: promise report" -o "$demo/report.html"

echo
echo "== 6. etacal publish: the nightly job, which replaces a table only when every guard holds"
pub=$demo/published
rm -rf "$pub"
mkdir -p "$pub"
opts="--actual actual_s --pred pred_s --by zone,band --time placed_at --holdout 0.2 --require-holdout"
echo "\$ etacal publish $demo/cal.csv --table $pub/quotes.csv $opts -q"
# shellcheck disable=SC2086
"$etacal" publish "$demo/cal.csv" --table "$pub/quotes.csv" $opts -q
echo "first table published: $pub/quotes.csv, provenance in $pub/quotes.csv.meta.json"
echo "A night with only one week of data, as a dry run (a guard should refuse it):"
echo "\$ etacal publish $demo/fresh.csv --table $pub/quotes.csv $opts --max-change 3m --show 5 --dry-run"
status=0
# shellcheck disable=SC2086
"$etacal" publish "$demo/fresh.csv" --table "$pub/quotes.csv" $opts --max-change 3m --show 5 --dry-run || status=$?
echo "exit status $status (3: refused by a guard; the published table is unchanged)"
[ "$status" = 3 ] || { echo "demo: expected the change guard to refuse"; exit 1; }

echo
echo "Quote table: $demo/quotes.csv"
echo "Report: $demo/report.html (open it in any browser; it needs no network)"
