#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# run.sh BUILD PYTHON: the demo report rendered in a real browser.  Writes
# the demo data and report (as make demo does), renders the page in headless
# Chromium (Debian's chromium package, installed here when missing and we
# may) to a PNG, and checks that it rendered: the expected size, not blank,
# no console message.  Without chromium it prints a visible SKIP and exits 0
# (counted as skipped).  With ETACAL_SHOT=FILE the PNG is also copied there
# (how docs/report.png is made).
set -u
build=$1
py=${2:-/usr/bin/python3}
here=$(cd "$(dirname "$0")" && pwd)
if ! command -v chromium >/dev/null 2>&1; then
    if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
        echo "browser: installing Debian's chromium for the rendering test" >&2
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends chromium >/dev/null 2>&1 ||
            { apt-get update -qq >/dev/null 2>&1 &&
              DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends chromium >/dev/null 2>&1; }
    fi
fi
if ! command -v chromium >/dev/null 2>&1; then
    echo "SKIP browser/render: chromium is not installed (Debian package chromium)"
    echo "browser: 0 passed, 0 failed, 1 skipped"
    exit 0
fi
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
case $build in /*) ;; *) build=$(pwd)/$build ;; esac
# relative names, so that the page (and the screenshot) shows no path of this machine
(cd "$work" && "$build/citygen" --seed 2026 --cal cal.csv --fresh fresh.csv 2>/dev/null &&
    "$build/etacal" report cal.csv --actual actual_s --pred pred_s --by zone,band --time placed_at \
        --window 14d --title "Veldmark couriers: promise report" -o report.html) || exit 1
W=1000
H=2600
# --user-data-dir keeps the run off any profile; the host rules make sure
# nothing is fetched from anywhere even if the page asked
timeout 120 chromium --headless --no-sandbox --disable-gpu --hide-scrollbars --no-first-run \
    --user-data-dir="$work/profile" --host-resolver-rules="MAP * ~NOTFOUND" \
    --enable-logging=stderr --v=0 --force-device-scale-factor=1 \
    --window-size=$W,$H --screenshot="$work/report.png" "file://$work/report.html" \
    >"$work/log" 2>&1 </dev/null
rc=$?
if [ $rc != 0 ] || [ ! -s "$work/report.png" ]; then
    echo "FAIL browser/render: chromium exited with $rc"
    tail -5 "$work/log"
    echo "browser: 0 passed, 1 failed, 0 skipped"
    exit 1
fi
if out=$("$py" "$here/check_png.py" "$work/report.png" $W $H "$work/log" 2>&1); then
    echo "  browser/render: $out"
    [ -n "${ETACAL_SHOT:-}" ] && cp "$work/report.png" "$ETACAL_SHOT"
    echo "browser: 1 passed, 0 failed, 0 skipped"
else
    echo "FAIL browser/render: $out"
    echo "browser: 0 passed, 1 failed, 0 skipped"
    exit 1
fi
