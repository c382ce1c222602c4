#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# run.sh: end-to-end tests of the etacal binary.  Each directory
# tests/data/<case>/ holds
#   cmd       one shell command line, run in a scratch copy of the directory
#             with $ETACAL set to the binary under test and $CITYGEN to the
#             data generator (for cases that need a large file), $QUANTGEN to
#             the generator of forecasts with known coverage (tests/tools)
#   stdout    expected standard output   (exact)
#   stderr    expected standard error    (exact)
#   status    expected exit status
#   absent    optional: files that must NOT exist afterwards (no partial output)
#   same      optional: "OUTPUT EXPECTED" pairs of files that must be byte-identical
# With ETACAL_GOLDEN=1 the expected stdout/stderr/status are rewritten from
# the run (review the diff before committing).
set -u
bin=$1
case $bin in /*) ;; *) bin=$(pwd)/$bin ;; esac
citygen=$(dirname "$bin")/citygen
quantgen=$(dirname "$bin")/quantgen
here=$(cd "$(dirname "$0")/../data" && pwd)
pass=0
fail=0
for dir in "$here"/*/; do
    name=$(basename "$dir")
    [ -f "$dir/cmd" ] || continue
    work=$(mktemp -d)
    cp -R "$dir/." "$work/"
    (cd "$work" && ETACAL="$bin" CITYGEN="$citygen" QUANTGEN="$quantgen" LC_ALL=C sh -c "$(cat cmd)" >"$work/.out" 2>"$work/.err" </dev/null
     echo $? >"$work/.status")
    if [ "${ETACAL_GOLDEN:-}" = 1 ] && [ "$(cat "$work/.status")" -lt 128 ]; then
        cp "$work/.out" "$dir/stdout"
        cp "$work/.err" "$dir/stderr"
        cp "$work/.status" "$dir/status"
    fi
    ok=1
    why=""
    # a crash is never an expected result, golden or not
    if [ "$(cat "$work/.status")" -ge 128 ]; then
        ok=0; why="$why killed by a signal (status $(cat "$work/.status"))"
    fi
    if ! cmp -s "$work/.status" "$dir/status"; then
        ok=0; why="$why status $(cat "$work/.status") (expected $(cat "$dir/status"))"
    fi
    if ! cmp -s "$work/.out" "$dir/stdout"; then
        ok=0; why="$why stdout differs:
$(diff "$dir/stdout" "$work/.out" | head -20)"
    fi
    if ! cmp -s "$work/.err" "$dir/stderr"; then
        ok=0; why="$why stderr differs:
$(diff "$dir/stderr" "$work/.err" | head -20)"
    fi
    if [ -f "$dir/absent" ]; then
        for f in $(cat "$dir/absent"); do
            if [ -e "$work/$f" ]; then ok=0; why="$why $f exists but must not"; fi
            # no temporary files left behind either
            for t in "$work/$f".tmp.*; do
                [ -e "$t" ] && { ok=0; why="$why leftover $t"; }
            done
        done
    fi
    if [ -f "$dir/same" ]; then
        while read -r got want; do
            [ -n "$got" ] || continue
            if ! cmp -s "$work/$got" "$work/$want"; then
                ok=0; why="$why $got differs from $want:
$(diff "$work/$want" "$work/$got" | head -10)"
            fi
        done <"$dir/same"
    fi
    if [ $ok = 1 ]; then
        pass=$((pass + 1))
    else
        fail=$((fail + 1))
        echo "FAIL e2e/$name:$why"
    fi
    rm -rf "$work"
done
echo "e2e: $pass passed, $fail failed"
[ $fail = 0 ]
