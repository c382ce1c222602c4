#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# run.sh ETACAL CITYGEN PYTHON: the report page checked as a file
# (check_html.py: parses, self-contained, escapes, deterministic, bounded in
# size, the same numbers as fit, curve and backtest).
set -u
py=${3:-/usr/bin/python3}
here=$(cd "$(dirname "$0")" && pwd)
if ! "$py" -c 'import html.parser, xml.etree.ElementTree' 2>/dev/null; then
    echo "SKIP report/html: $py cannot run the checks"
    echo "report: 0 passed, 0 failed, 1 skipped"
    exit 0
fi
if out=$("$py" "$here/check_html.py" "$1" "$2" 2>&1); then
    printf '%s\n' "$out" | sed 's/^/  report\/html: /'
    echo "report: 1 passed, 0 failed, 0 skipped"
else
    printf '%s\n' "$out" | sed 's/^/  report\/html: /'
    echo "FAIL report/html"
    echo "report: 0 passed, 1 failed, 0 skipped"
    exit 1
fi
