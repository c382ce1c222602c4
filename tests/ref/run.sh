#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# run.sh BUILD PYTHON: the checks against reference libraries from outside
# the project.  Each script names its oracle; when the oracle is not
# installed it prints a visible SKIP line and counts as skipped, not passed.
set -u
build=$1
py=${2:-/usr/bin/python3}
here=$(cd "$(dirname "$0")" && pwd)
pass=0
fail=0
skip=0
for t in "$here"/test_*.py; do
    name=$(basename "$t" .py)
    out=$(ETACAL="$build/etacal" REFCALC="$build/tests/refcalc" "$py" "$t" 2>&1)
    rc=$?
    case $rc in
    0) pass=$((pass + 1)); printf '%s\n' "$out" | sed "s/^/  ref\/$name: /" ;;
    77) skip=$((skip + 1)); printf '%s\n' "$out" | sed "s/^/  ref\/$name: /" ;;
    *) fail=$((fail + 1)); printf '%s\n' "$out" | sed "s/^/  ref\/$name: /"; echo "FAIL ref/$name" ;;
    esac
done
echo "ref: $pass passed, $fail failed, $skip skipped"
[ $fail = 0 ]
