#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# install.sh: the install layout and a program embedding the library.
#
# `make install` into a temporary DESTDIR with a packager's LIBDIR: the
# binary, both libraries and the SONAME links, the headers, the pkg-config
# file and the man page.  Then examples/embed.c is built against the staged
# tree through `pkg-config --cflags --libs etacal`, once with the shared
# library and once static, and run: it builds a table of orders in memory,
# fits a quote table at 90% per zone and promises two orders.  Its rows are
# also written to a CSV file, and the installed `etacal fit` and `etacal
# apply` on that file must give the same two promises (the library in a
# program and the command line are one code path).
#   sh tests/tools/install.sh            (from the top of the repository)
set -u
make_cmd=${MAKE:-make}
dest=$(mktemp -d)
trap 'rm -rf "$dest"' EXIT
pass=0
fail=0
ok() { echo "  install: ok: $*"; pass=$((pass + 1)); }
bad() { echo "  install: FAIL: $*"; fail=$((fail + 1)); }

libdir=/usr/lib/x86_64-linux-gnu
if ! $make_cmd --no-print-directory install DESTDIR="$dest" PREFIX=/usr LIBDIR="$libdir" >"$dest/install.log" 2>&1; then
    cat "$dest/install.log"
    echo "install: 0 passed, 1 failed"
    exit 1
fi
missing=""
for f in usr/bin/etacal "${libdir#/}/libetacal.a" "${libdir#/}/libetacal.so.0.1.0" "${libdir#/}/pkgconfig/etacal.pc" \
    usr/include/etacal/etacal.h usr/include/etacal/quote.h usr/include/etacal/fit.h usr/share/man/man1/etacal.1; do
    test -f "$dest/$f" || missing="$missing $f"
done
for l in libetacal.so.0 libetacal.so; do
    test -L "$dest$libdir/$l" || missing="$missing $l"
done
if [ -z "$missing" ]; then ok "every file and link is in place"; else bad "missing:$missing"; fi
if "$dest/usr/bin/etacal" --version >/dev/null; then ok "the installed binary runs"; else bad "etacal --version"; fi

export PKG_CONFIG_PATH="$dest$libdir/pkgconfig" PKG_CONFIG_SYSROOT_DIR="$dest"
if ! flags=$(pkg-config --cflags --libs etacal); then
    bad "pkg-config --cflags --libs etacal"
    echo "install: $pass passed, $fail failed"
    exit 1
fi
ok "pkg-config: $flags"
# shellcheck disable=SC2046
if cc -std=c11 -Wall -Wextra -Werror $(pkg-config --cflags etacal) -o "$dest/embed_shared" examples/embed.c \
    $(pkg-config --libs etacal) -lm; then
    ok "examples/embed.c builds with the shared library"
else
    bad "examples/embed.c with the shared library"
fi
# shellcheck disable=SC2046
if cc -std=c11 -Wall -Wextra -Werror $(pkg-config --cflags etacal) -o "$dest/embed_static" examples/embed.c \
    "$dest$libdir/libetacal.a" $(pkg-config --static --libs etacal | sed 's/-letacal//'); then
    ok "examples/embed.c builds with the static library"
else
    bad "examples/embed.c with the static library"
fi
if LD_LIBRARY_PATH="$dest$libdir" "$dest/embed_shared" "$dest/rows.csv" >"$dest/embed.out" &&
    "$dest/embed_static" >"$dest/embed_static.out" && cmp -s "$dest/embed.out" "$dest/embed_static.out"; then
    ok "both programs print the same: $(sed -n 2p "$dest/embed.out")"
else
    bad "the embedding programs"
fi
# the same rows through the command line
etacal="$dest/usr/bin/etacal"
printf 'zone,pred_s\nold town,1260\nharbour,1260\n' >"$dest/orders.csv"
if "$etacal" fit "$dest/rows.csv" --actual actual_s --pred pred_s --by zone --target 0.9 -o "$dest/q.csv" >/dev/null 2>&1 &&
    "$etacal" apply "$dest/q.csv" "$dest/orders.csv" --pred pred_s --round 60 -o "$dest/promised.csv" >/dev/null 2>&1; then
    want=$(sed -n 's/^order [12] in [^:]*: predicted [0-9]* s, promised \([0-9]*\) s.*/\1/p' "$dest/embed.out" | tr '\n' ' ')
    got=$(sed 1d "$dest/promised.csv" | cut -d, -f3 | tr '\n' ' ')
    if [ -n "$want" ] && [ "$want" = "$got" ]; then
        ok "the command line promises the same on the same rows: $got"
    else
        bad "embed promised '$want', etacal fit + apply '$got'"
    fi
else
    bad "etacal fit/apply on the embedding program's rows"
fi
echo "install: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
