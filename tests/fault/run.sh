#!/bin/sh
# SPDX-License-Identifier: GPL-3.0-or-later
# run.sh BUILD: fault tests of `etacal publish`, the nightly job's command.
#   kill       publish is killed with SIGKILL at random moments; each time
#              the table must be the old one or the new one, byte for byte,
#              and a valid quote table, never truncated or mixed
#   disk full  the table's directory is a full tmpfs: a clear error, the old
#              table untouched, no temporary file left (needs mount rights;
#              skips with a notice without them)
#   read-only  the same with the file system mounted read-only
#   file size  RLIMIT_FSIZE (ulimit -f) makes the write fail as a full disk
#              would; runs everywhere
# Bounded: FAULT_KILLS runs of the kill loop (default 30).
set -u
build=$1
case $build in /*) ;; *) build=$(pwd)/$build ;; esac
etacal=$build/etacal
citygen=$build/citygen
kills=${FAULT_KILLS:-30}
pass=0
fail=0
skip=0
w=$(mktemp -d)
mnt=""
cleanup() {
    [ -n "$mnt" ] && umount "$mnt" 2>/dev/null
    rm -rf "$w"
}
trap cleanup EXIT
cd "$w" || exit 1

ok() { pass=$((pass + 1)); echo "  ok: $1"; }
bad() { fail=$((fail + 1)); echo "FAIL fault/$1"; }

"$citygen" -s 21 -n 300000 -f 10 -c a.csv -F /dev/null 2>/dev/null &&
    "$citygen" -s 22 -n 300000 -f 10 -c b.csv -F /dev/null 2>/dev/null || { echo "fault: no data"; exit 1; }
pub="publish --actual actual_s --pred pred_s --by zone,band --max-change-pct 100 -q"
printf 'zone,band,pred_s\nharbour,lunch,1500\nnowhere,late,900\n' > orders.csv
# the old table A and the new table B that publishing b.csv over A gives
mkdir ref
$etacal $pub a.csv --table ref/A.csv || { echo "fault: cannot make table A"; exit 1; }
cp ref/A.csv ref/B.csv
$etacal $pub b.csv --table ref/B.csv || { echo "fault: cannot make table B"; exit 1; }
cmp -s ref/A.csv ref/B.csv && { echo "fault: A and B are the same table"; exit 1; }

# ---- kill ----------------------------------------------------------------
# how long one publish takes here, to spread the kills over it
mkdir k
cp ref/A.csv k/q.csv
t0=$(date +%s%N)
$etacal $pub b.csv --table k/q.csv
t1=$(date +%s%N)
ms=$(( (t1 - t0) / 1000000 ))
[ "$ms" -ge 1 ] || ms=1
old=0
new=0
broken=0
i=0
while [ $i -lt "$kills" ]; do
    rm -rf k && mkdir k && cp ref/A.csv k/q.csv
    # delays from 0 to 1.2 times the run, from a seeded sequence
    delay=$(awk -v i=$i -v ms="$ms" 'BEGIN { srand(1000 + i); printf "%.3f", rand() * 1.2 * ms / 1000 }')
    $etacal $pub b.csv --table k/q.csv &
    pid=$!
    sleep "$delay"
    kill -9 $pid 2>/dev/null
    wait $pid 2>/dev/null
    if cmp -s k/q.csv ref/A.csv; then
        old=$((old + 1))
        # the provenance record is written after the table: none yet
        [ -e k/q.csv.meta.json ] && { broken=$((broken + 1)); echo "  run $i: record of a table not published"; }
    elif cmp -s k/q.csv ref/B.csv; then
        new=$((new + 1))
        cmp -s k/q.csv.prev ref/A.csv || { broken=$((broken + 1)); echo "  run $i: previous table not kept"; }
    else
        broken=$((broken + 1))
        echo "  run $i: the table is neither the old nor the new one (delay $delay s)"
    fi
    $etacal apply k/q.csv orders.csv --pred pred_s -o k/out.csv >/dev/null 2>k/err ||
        { broken=$((broken + 1)); echo "  run $i: apply cannot use the table: $(cat k/err)"; }
    i=$((i + 1))
done
# the next publish clears what the killed ones left behind
$etacal $pub b.csv --table k/q.csv >/dev/null 2>&1
left=$(ls k | grep -c '\.tmp\.')
[ "$left" = 0 ] || { broken=$((broken + 1)); echo "  $left temporary files left after the next publish"; }
if [ $broken = 0 ]; then
    ok "kill: $kills runs killed at random (one publish takes ${ms} ms): $old left the old table, $new the new one, none broken"
    [ $old = 0 ] || [ $new = 0 ] && echo "  note: every kill fell on the same side of the rename this time"
else
    bad "kill: $broken of $kills runs left a broken table"
fi

# ---- file size limit: a write that fails like a full disk ----------------
rm -rf f && mkdir f && cp ref/A.csv f/q.csv
# the table (about 2 KB) cannot be written under a 1-block limit; SIGXFSZ
# is ignored so that the write fails with EFBIG instead of killing
(trap '' XFSZ; ulimit -f 1; exec $etacal publish --actual actual_s --pred pred_s --by zone,band \
    --max-change-pct 100 b.csv --table f/q.csv) >f/out 2>f/err
st=$?
if [ $st = 1 ] && cmp -s f/q.csv ref/A.csv && grep -q "f/q.csv: write failed: File too large" f/err &&
    [ -z "$(ls f | grep '\.tmp\.')" ] && [ ! -e f/q.csv.prev ]; then
    ok "file size limit: exit 1, '$(cat f/err)', the old table untouched, no temporary file"
else
    bad "file size limit: status $st, stderr: $(cat f/err); files: $(ls f)"
fi

# ---- disk full and read-only: a small tmpfs --------------------------------
mkdir m
if mount -t tmpfs -o size=256k tmpfs m 2>/dev/null; then
    mnt=$w/m
    cp ref/A.csv m/q.csv
    dd if=/dev/zero of=m/fill bs=4096 2>/dev/null
    $etacal $pub b.csv --table m/q.csv >m.out 2>m.err
    st=$?
    if [ $st = 1 ] && cmp -s m/q.csv ref/A.csv && grep -q "No space left on device" m.err &&
        [ -z "$(ls m | grep '\.tmp\.')" ]; then
        ok "disk full: exit 1, '$(cat m.err)', the old table untouched, no temporary file"
    else
        bad "disk full: status $st, stderr: $(cat m.err); files: $(ls m)"
    fi
    rm -f m/fill
    mount -o remount,ro "$mnt"
    $etacal $pub b.csv --table m/q.csv >m.out 2>m.err
    st=$?
    if [ $st = 1 ] && cmp -s m/q.csv ref/A.csv && grep -q "Read-only file system" m.err; then
        ok "read-only: exit 1, '$(cat m.err)', the old table untouched"
    else
        bad "read-only: status $st, stderr: $(cat m.err)"
    fi
    umount "$mnt" && mnt=""
elif [ "$(id -u)" != 0 ]; then
    # without mount rights: a directory without write permission
    cp ref/A.csv m/q.csv
    touch m/q.csv.lock
    chmod 555 m
    $etacal $pub b.csv --table m/q.csv >m.out 2>m.err
    st=$?
    chmod 755 m
    if [ $st = 1 ] && cmp -s m/q.csv ref/A.csv && grep -q "Permission denied" m.err; then
        ok "unwritable directory: exit 1, '$(cat m.err)', the old table untouched"
    else
        bad "unwritable directory: status $st, stderr: $(cat m.err)"
    fi
    echo "  SKIP disk full: cannot mount a tmpfs here (not root)"
    skip=$((skip + 1))
else
    echo "  SKIP disk full and read-only: cannot mount a tmpfs here"
    skip=$((skip + 2))
fi

echo "fault: $pass passed, $fail failed, $skip skipped"
[ $fail = 0 ]
