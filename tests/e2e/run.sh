#!/bin/sh
# Runs every tests/e2e/test_*.sh in turn. Each script is one group of end-to-end checks:
# it exits 0 when all its checks pass. Environment given to each: WEFT (the binary),
# BUILD, TOP (the source tree), E2E_TMP (a fresh directory removed afterwards).
# E2E_SKIP: names of tests not to run (make check-asan sets it). A passing test's lines that
# start with "SKIP " (a part it could not run on this machine) are shown under its name.
# Each result line gives the test's wall time in seconds (to see what CI's time goes to).
# The last line is "e2e: N passed, N failed"; the exit status is 0 only when none failed.
set -u
TOP=$(cd "$(dirname "$0")/../.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
WEFT="$BUILD/weft"
export TOP BUILD WEFT
pass=0
fail=0
failed=""
skipped=0
for t in "$TOP"/tests/e2e/test_*.sh; do
    name=$(basename "$t" .sh)
    case " ${E2E_SKIP:-} " in
        *" $name "*) skipped=$((skipped + 1)); echo "[SKIP] e2e::$name (E2E_SKIP)"; continue ;;
    esac
    E2E_TMP=$(mktemp -d "${TMPDIR:-/tmp}/weft-e2e.XXXXXX")
    export E2E_TMP
    start=$(date +%s)
    if sh "$t" >"$E2E_TMP.log" 2>&1; then
        pass=$((pass + 1))
        echo "[PASS] e2e::$name ($(($(date +%s) - start)) s)"
        grep '^SKIP ' "$E2E_TMP.log" | sed 's/^/    /'   # a part a test could not run here
    else
        fail=$((fail + 1))
        failed="$failed $name"
        echo "[FAIL] e2e::$name ($(($(date +%s) - start)) s)"
        sed 's/^/    /' "$E2E_TMP.log" | tail -n 40
    fi
    rm -rf "$E2E_TMP" "$E2E_TMP.log"
done
[ "$skipped" -eq 0 ] || echo "e2e: $skipped skipped (E2E_SKIP)"
echo "e2e: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
