#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# deps.sh: make sure the Debian packages etacal builds and tests with are
# installed.  As root with apt-get it installs what is missing; otherwise it
# prints the exact command to run and fails.
#   scripts/deps.sh            build and test libraries (GSL, libcsv, cmocka)
#   scripts/deps.sh --oracles  also the reference libraries the oracle tests
#                              compare against (numpy, scipy, scikit-learn,
#                              statsmodels, R's quantreg, html5lib),
#                              chromium, which renders the report in
#                              tests/browser, and the fault-testing tools
#                              (valgrind for make memcheck, clang and its
#                              sanitizer runtimes for make fuzz), g++ for
#                              the C++ compile of the public headers and
#                              binutils (nm, readelf) for the export check;
#                              missing ones only make those tests skip, so
#                              failure to install them is a warning.  Each
#                              one that cannot be installed is named, and
#                              does not keep the others from installing.
# make check runs it with --oracles; make test installs nothing.
set -u

need=""
have_pkg() { dpkg-query -W -f='${Status}' "$1" 2>/dev/null | grep -q 'install ok installed'; }

for p in libgsl-dev libcsv-dev libcmocka-dev libjansson-dev pkg-config; do
    have_pkg "$p" || need="$need $p"
done

oracles=""
if [ "${1:-}" = "--oracles" ]; then
    for p in python3-numpy python3-scipy python3-sklearn python3-statsmodels r-cran-quantreg chromium python3-html5lib \
        valgrind clang libclang-rt-dev g++ binutils; do
        have_pkg "$p" || oracles="$oracles $p"
    done
fi

[ -z "$need$oracles" ] && exit 0

if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
    echo "etacal: installing Debian packages:$need$oracles" >&2
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq >/dev/null 2>&1 || true
    if [ -n "$need" ]; then
        apt-get install -y -qq --no-install-recommends $need >/dev/null || {
            echo "etacal: could not install:$need" >&2
            exit 1
        }
    fi
    if [ -n "$oracles" ] && ! apt-get install -y -qq --no-install-recommends $oracles >/dev/null 2>&1; then
        # one package that cannot be had must not keep the others out
        failed=""
        for p in $oracles; do
            apt-get install -y -qq --no-install-recommends "$p" >/dev/null 2>&1 || failed="$failed $p"
        done
        [ -n "$failed" ] &&
            echo "etacal: warning: could not install:$failed (their tests will skip)" >&2
    fi
    exit 0
fi

if [ -n "$need" ]; then
    echo "etacal: missing Debian packages:$need" >&2
    echo "etacal: install them with:  sudo apt-get install$need" >&2
    exit 1
fi
echo "etacal: note: oracle tests will skip; to run them:  sudo apt-get install$oracles" >&2
exit 0
