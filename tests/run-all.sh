#!/bin/sh
# make test: Criterion unit and reference tests, then the end-to-end tests, then the replay
# of every fuzz corpus and crash file (tests/fuzz/replay.sh, one check per target).
# The last line sums all three: "N passed, N failed". Exit status 0 only when everything passed.
set -u
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
cd "$TOP" || exit 1
log=$(mktemp)
"$BUILD/unit_tests" -j2 >"$log" 2>&1
unit_rc=$?
cat "$log"
# Criterion: "[====] Synthesis: Tested: 3 | Passing: 1 | Failing: 2 | Crashing: 1"
u_pass=$(sed -n 's/.*Synthesis: Tested: [0-9]* | Passing: \([0-9]*\) | Failing: \([0-9]*\).*/\1/p' "$log" | tail -n 1)
u_fail=$(sed -n 's/.*Synthesis: Tested: [0-9]* | Passing: \([0-9]*\) | Failing: \([0-9]*\).*/\2/p' "$log" | tail -n 1)
[ -n "$u_pass" ] || u_pass=0
[ -n "$u_fail" ] || u_fail=0
# A crashing fixture exits non-zero while Synthesis may show no failure: trust the exit code.
[ "$unit_rc" -ne 0 ] && [ "$u_fail" -eq 0 ] && u_fail=1
BUILD="$BUILD" tests/e2e/run.sh >"$log" 2>&1
e2e_rc=$?
cat "$log"
e_pass=$(sed -n 's/^e2e: \([0-9]*\) passed, \([0-9]*\) failed$/\1/p' "$log" | tail -n 1)
e_fail=$(sed -n 's/^e2e: \([0-9]*\) passed, \([0-9]*\) failed$/\2/p' "$log" | tail -n 1)
[ -n "$e_pass" ] || e_pass=0
[ -n "$e_fail" ] || e_fail=0
[ "$e2e_rc" -ne 0 ] && [ "$e_fail" -eq 0 ] && e_fail=1
BUILD="$BUILD" tests/fuzz/replay.sh >"$log" 2>&1
replay_rc=$?
cat "$log"
r_pass=$(sed -n 's/^replay: \([0-9]*\) passed, \([0-9]*\) failed$/\1/p' "$log" | tail -n 1)
r_fail=$(sed -n 's/^replay: \([0-9]*\) passed, \([0-9]*\) failed$/\2/p' "$log" | tail -n 1)
[ -n "$r_pass" ] || r_pass=0
[ -n "$r_fail" ] || r_fail=0
[ "$replay_rc" -ne 0 ] && [ "$r_fail" -eq 0 ] && r_fail=1
rm -f "$log"
echo "unit: $u_pass passed, $u_fail failed; e2e: $e_pass passed, $e_fail failed;" \
    "fuzz replay: $r_pass passed, $r_fail failed"
echo "$((u_pass + e_pass + r_pass)) passed, $((u_fail + e_fail + r_fail)) failed"
[ $((u_fail + e_fail + r_fail)) -eq 0 ]
