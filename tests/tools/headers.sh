#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# headers.sh CC CXX WERROR: every public header compiles on its own.  For
# each include/etacal/*.h, a translation unit that includes only that header
# is compiled as C11 with CC and, when a C++ compiler is installed, as C++11
# with CXX (the headers' extern "C" blocks); a header that leans on another
# include of its user (FILE without <stdio.h>) fails here.  Without a C++
# compiler the C++ half skips visibly (scripts/deps.sh --oracles installs
# g++).
set -u
cc=${1:-cc}
cxx=${2:-c++}
werror=${3:-}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
pass=0
fail=0
skip=0
have_cxx=1
command -v "$cxx" >/dev/null 2>&1 || { have_cxx=0; echo "SKIP headers as C++: $cxx is not installed (scripts/deps.sh --oracles installs g++)"; }
for h in include/etacal/*.h; do
    name=$(basename "$h")
    printf '#include "etacal/%s"\n' "$name" >"$work/one.c"
    # something to compile besides the header, so that an empty TU warning
    # cannot hide behind a header that defines nothing
    printf 'int etacal_header_test_%s;\n' "$(echo "$name" | tr -c 'a-z0-9\n' '_')" >>"$work/one.c"
    if "$cc" -std=c11 -Wall -Wextra -Wpedantic -Wstrict-prototypes $werror -Iinclude -c "$work/one.c" -o "$work/one.o" 2>"$work/err"; then
        pass=$((pass + 1))
    else
        echo "FAIL: $h does not compile on its own as C11:"; sed 's/^/  /' "$work/err"
        fail=$((fail + 1))
    fi
    if [ "$have_cxx" = 1 ]; then
        cp "$work/one.c" "$work/one.cc"
        if "$cxx" -std=c++11 -Wall -Wextra -Wpedantic $werror -Iinclude -c "$work/one.cc" -o "$work/one.o" 2>"$work/err"; then
            pass=$((pass + 1))
        else
            echo "FAIL: $h does not compile on its own as C++11:"; sed 's/^/  /' "$work/err"
            fail=$((fail + 1))
        fi
    else
        skip=$((skip + 1))
    fi
done
# No public header needs a FILE: every writer takes a sink or a path.
if grep -n 'FILE \*\|<stdio\.h>' include/etacal/*.h >"$work/file"; then
    echo "FAIL: the public headers use FILE or <stdio.h>:"; sed 's/^/  /' "$work/file"
    fail=$((fail + 1))
else
    pass=$((pass + 1))
fi

# The library's private headers (src/*.h), split by layer: each compiles on
# its own too, so that a module can include just the layers it uses.
deps=$(pkg-config --cflags gsl jansson 2>/dev/null)
for h in src/*.h; do
    name=$(basename "$h")
    printf '#include "%s"\nint etacal_private_header_test;\n' "$name" >"$work/one.c"
    # shellcheck disable=SC2086
    if "$cc" -std=c11 -D_POSIX_C_SOURCE=200809L -Wall -Wextra $werror -Iinclude -Isrc $deps -c "$work/one.c" \
        -o "$work/one.o" 2>"$work/err"; then
        pass=$((pass + 1))
    else
        echo "FAIL: $h does not compile on its own as C11:"; sed 's/^/  /' "$work/err"
        fail=$((fail + 1))
    fi
done
echo "headers: $pass passed, $fail failed, $skip skipped"
[ "$fail" = 0 ]
