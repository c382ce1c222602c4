#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# exports.sh BUILD SONAME: the shared and the static library export the
# public API only.
# Every defined dynamic symbol of BUILD/libetacal.so.0* must be etacal_*
# (the library's objects are built with -fvisibility=hidden and the public
# headers mark their declarations visible), at least one must be (a library
# exporting nothing would pass the first check), and the SONAME must be
# SONAME.  Skips visibly when nm or readelf (binutils) is missing.
set -u
build=$1
soname=$2
pass=0
fail=0
for tool in nm readelf; do
    command -v "$tool" >/dev/null 2>&1 || { echo "SKIP exports: $tool is not installed (binutils)"; echo "exports: 0 passed, 0 failed, 1 skipped"; exit 0; }
done
lib=$(ls "$build"/libetacal.so.0.* 2>/dev/null | head -1)
[ -n "$lib" ] || { echo "FAIL exports: no $build/libetacal.so.0.*"; echo "exports: 0 passed, 1 failed"; exit 1; }

# nm -D --defined-only: T/D/B/R symbols; the linker's own markers (_init,
# _fini, __bss_start, _edata, _end) are not the library's.
syms=$(nm -D --defined-only "$lib" | awk '{print $NF}' | grep -v -E '^(_init|_fini|__bss_start|_edata|_end)$')
bad=$(printf '%s\n' "$syms" | grep -v '^etacal_' || true)
n=$(printf '%s\n' "$syms" | grep -c '^etacal_')
if [ -z "$bad" ] && [ "$n" -gt 0 ]; then
    echo "ok: $lib exports $n symbols, all etacal_*"
    pass=$((pass + 1))
else
    echo "FAIL: $lib exports $n etacal_* symbols and these others:"
    printf '%s\n' "$bad" | sed 's/^/  /'
    fail=$((fail + 1))
fi
# the static library's global symbols (defined, of any kind) are etacal_*
# too: the Makefile links its objects into one and makes the hidden ones
# local, so a program linking libetacal.a cannot clash with its helpers
if [ -f "$build/libetacal.a" ]; then
    sglob=$(nm -g --defined-only "$build/libetacal.a" 2>/dev/null | awk 'NF == 3 {print $3}')
    sbad=$(printf '%s\n' "$sglob" | grep -v '^etacal_' | grep -v '^$' || true)
    sn=$(printf '%s\n' "$sglob" | grep -c '^etacal_')
    if [ -z "$sbad" ] && [ "$sn" -gt 0 ]; then
        echo "ok: $build/libetacal.a defines $sn global symbols, all etacal_*"
        pass=$((pass + 1))
    else
        echo "FAIL: $build/libetacal.a defines these global symbols besides etacal_*:"
        printf '%s\n' "$sbad" | sed 's/^/  /'
        fail=$((fail + 1))
    fi
fi
# every function the public headers declare is among them
want=$(cat include/etacal/*.h | tr '\n' ' ' | grep -o 'etacal_[a-z0-9_]* *(' | sed 's/ *($//' | sort -u)
missing=""
for w in $want; do
    printf '%s\n' "$syms" | grep -qx "$w" || missing="$missing $w"
done
if [ -z "$missing" ]; then
    echo "ok: every etacal_* function declared in include/etacal/ is exported ($(printf '%s\n' $want | wc -l))"
    pass=$((pass + 1))
else
    echo "FAIL: declared in include/etacal/ but not exported:$missing"
    fail=$((fail + 1))
fi
got=$(readelf -d "$lib" | sed -n 's/.*(SONAME).*\[\(.*\)\].*/\1/p')
if [ "$got" = "$soname" ]; then
    echo "ok: SONAME $got"
    pass=$((pass + 1))
else
    echo "FAIL: SONAME '$got', expected '$soname'"
    fail=$((fail + 1))
fi
echo "exports: $pass passed, $fail failed"
[ "$fail" = 0 ]
