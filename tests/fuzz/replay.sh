#!/bin/sh
# make test: replays every fuzz corpus and crash file (tests/fuzz/corpus/TARGET,
# tests/fuzz/crashes/TARGET) through $BUILD/fuzz/replay_TARGET, the target built with
# tests/fuzz/replay.c instead of libFuzzer. Each target is one check; a failing one shows the
# input it failed on and the end of its output.
# The last line is "replay: N passed, N failed"; the exit status is 0 only when none failed.
set -u
TOP=$(cd "$(dirname "$0")/../.." && pwd)
cd "$TOP" || exit 1
BUILD=${BUILD:-build}
pass=0
fail=0
log=$(mktemp "${TMPDIR:-/tmp}/weft-replay.XXXXXX")
for src in tests/fuzz/fuzz_*.c; do
    t=$(basename "$src" .c)
    t=${t#fuzz_}
    set -- "tests/fuzz/corpus/$t"
    [ -d "tests/fuzz/crashes/$t" ] && set -- "$@" "tests/fuzz/crashes/$t"
    if [ -x "$BUILD/fuzz/replay_$t" ] && [ -d "tests/fuzz/corpus/$t" ] &&
        "$BUILD/fuzz/replay_$t" "$@" >"$log" 2>&1; then
        pass=$((pass + 1))
        echo "[PASS] replay::$t ($(sed -n 's/^replay_.*: \([0-9]* inputs\)$/\1/p' "$log"))"
    else
        fail=$((fail + 1))
        echo "[FAIL] replay::$t"
        [ -x "$BUILD/fuzz/replay_$t" ] || echo "    no $BUILD/fuzz/replay_$t"
        [ -d "tests/fuzz/corpus/$t" ] || echo "    no tests/fuzz/corpus/$t"
        last=$(sed -n 's/^replay: running //p' "$log" | tail -n 1)
        [ -z "$last" ] || echo "    the input: $last"
        grep -v '^replay: running ' "$log" | sed 's/^/    /' | tail -n 40
    fi
done
rm -f "$log"
echo "replay: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
