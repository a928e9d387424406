#!/bin/sh
# Crash safety (DESIGN.md: a snapshot is written in one write transaction, so a writer killed
# at any moment leaves the store as it was). tests/e2e/crash_writer.c commits snapshots of
# 4 x 16 MiB in a loop; it is killed with SIGKILL at 20 random moments of its write
# transactions: after it prints "begin V", at a uniform random point of 1.3 times the time a
# write takes (the slowest of three measured first). After each kill:
# - the store opens and `weft snapshots verify` passes (every blob's header and CRC-32);
# - the live snapshot is complete: crash_writer check reads it back byte for byte (the
#   bytes it writes for that version, computed again), and it is either the version being
#   written (the commit finished before the kill) or the one live before that write began.
# Then `weft snapshots import` of a 64 MiB file is killed at 5 random moments: the store
# verifies and live is unchanged (an import is never live). CRASH_SEED fixes the moments.
set -u
. "$TOP/tests/e2e/lib.sh"
S="$E2E_TMP/store"
H="$E2E_TMP/crash_writer"
BLOBS=4
MIB=16
SEED=${CRASH_SEED:-$(od -An -N4 -tu4 /dev/urandom | tr -d ' ')}
echo "CRASH_SEED=$SEED (set it to repeat these kill moments)"

# make test builds it with the library's flags ($BUILD/crash_writer); alone, build it here.
if [ -x "$BUILD/crash_writer" ]; then
    cp "$BUILD/crash_writer" "$H"
    check "the crash writer is built" test -x "$H"
else
    check "build the crash writer" ${CC:-cc} -std=c11 -D_POSIX_C_SOURCE=200809L -O2 \
        -I"$TOP/include" "$TOP/tests/e2e/crash_writer.c" "$BUILD/libweft.a" -ljansson -llmdb \
        -lopenblas -lnettle -lz -lpthread -lm -o "$H" || finish
fi

# wait_for PATTERN FILE PID: until a line matches (or the process ended, or 30 s passed).
wait_for() {
    n=0
    while ! grep -q "$1" "$2" 2>/dev/null; do
        kill -0 "$3" 2>/dev/null || return 1
        n=$((n + 1))
        [ $n -gt 3000 ] && return 1
        sleep 0.01
    done
}

# random_seconds I MS: a uniform random delay in [0, MS] ms as seconds, from SEED and I.
random_seconds() {
    /usr/bin/python3 -c 'import random, sys
r = random.Random(int(sys.argv[1]) * 1000 + int(sys.argv[2]))
print("%.3f" % (r.random() * float(sys.argv[3]) / 1000))' "$SEED" "$1" "$2"
}

live_of() {
    "$WEFT" snapshots list --store "$S" --json | /usr/bin/python3 -c \
        'import json,sys; print(json.load(sys.stdin)["live"])'
}

# ---- how long one write takes: three complete ones ----
"$H" write "$S" $BLOBS $MIB >"$E2E_TMP/warm.log" 2>"$E2E_TMP/warm.err" &
pid=$!
wait_for "^done 3 " "$E2E_TMP/warm.log" $pid
kill -9 $pid 2>/dev/null
wait $pid 2>/dev/null
# The slowest of them: the first write of a fresh process (as each killed one is) is slower.
MS=$(awk '$1 == "done" { print $3 }' "$E2E_TMP/warm.log" | sort -n | tail -n 1)
check "warm-up: the writer committed 3 snapshots (slowest write ${MS:-?} ms)" test -n "$MS"
[ -n "$MS" ] || finish
WINDOW=$(awk -v ms="$MS" 'BEGIN { printf "%d", ms * 1.3 + 1 }')

rolled_back=0
committed=0
i=1
while [ $i -le 20 ]; do
    before=$(live_of)
    "$H" write "$S" $BLOBS $MIB >"$E2E_TMP/w.log" 2>"$E2E_TMP/w.err" &
    pid=$!
    if ! wait_for "^begin" "$E2E_TMP/w.log" $pid; then
        check "kill $i: the writer began a snapshot" false
        cat "$E2E_TMP/w.err"
        kill -9 $pid 2>/dev/null
        break
    fi
    delay=$(random_seconds $i "$WINDOW")
    sleep "$delay"
    kill -9 $pid
    wait $pid 2>/dev/null
    version=$(awk '$1 == "begin" { v = $2 } END { print v }' "$E2E_TMP/w.log")
    # Live before the killed transaction: the last version this run committed, if any.
    last_done=$(awk '$1 == "done" { v = $2 } END { print v }' "$E2E_TMP/w.log")
    [ -n "$last_done" ] && before=$last_done
    "$WEFT" snapshots verify --store "$S" >"$E2E_TMP/verify.txt" 2>&1
    verified=$?
    live=$("$H" check "$S" $BLOBS $MIB 2>&1)
    checked=$?
    if [ "$live" = "live $version" ]; then
        outcome="committed"
        committed=$((committed + 1))
    else
        outcome="rolled back"
        rolled_back=$((rolled_back + 1))
    fi
    check "kill $i, ${delay}s after begin $version ($outcome): verify passes, live is complete" \
        sh -c '[ $1 -eq 0 ] && [ $2 -eq 0 ] && { [ "$3" = "live $4" ] || [ "$3" = "live $5" ]; }' \
        sh $verified $checked "$live" "$version" "$before"
    [ $verified -eq 0 ] || cat "$E2E_TMP/verify.txt"
    i=$((i + 1))
done
echo "20 kills: $rolled_back rolled back inside the write transaction, $committed committed"
# With kills uniform over 1.3 times the write time, about 3 in 4 land before the commit ends.
check "most kills landed inside a write transaction ($rolled_back of 20 rolled back)" \
    test $rolled_back -ge 8

# ---- an import killed midway ----
check "export the live snapshot (64 MiB)" \
    "$WEFT" snapshots export live "$E2E_TMP/big.snap" --store "$S"
start=$(date +%s%N)
"$WEFT" snapshots import "$E2E_TMP/big.snap" --store "$S" >/dev/null
IMPORT_MS=$(( ($(date +%s%N) - start) / 1000000 ))
check "a complete import takes ${IMPORT_MS} ms" test "$IMPORT_MS" -gt 0
i=1
while [ $i -le 5 ]; do
    before=$(live_of)
    "$WEFT" snapshots import "$E2E_TMP/big.snap" --store "$S" >/dev/null 2>&1 &
    pid=$!
    delay=$(random_seconds $((100 + i)) "$IMPORT_MS")
    sleep "$delay"
    kill -9 $pid 2>/dev/null
    wait $pid 2>/dev/null
    check "import killed after ${delay}s: verify passes, live unchanged and complete" sh -c '
        "$1" snapshots verify --store "$2" >/dev/null 2>&1 &&
        [ "$("$3" check "$2" 4 16)" = "live $4" ]' sh "$WEFT" "$S" "$H" "$before"
    i=$((i + 1))
done

finish
