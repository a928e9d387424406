#!/bin/sh
# make test: Criterion unit and reference tests, then the end-to-end tests, then the replay
# of every fuzz corpus and crash file (tests/fuzz/replay.sh, one check per target).
# The last line sums all three: "N passed, N failed". Exit status 0 only when everything passed.
set -u
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
cd "$TOP" || exit 1
log=$(mktemp)
# group NAME COMMAND...: run one group, show its output, and set NAME_pass and NAME_fail from
# its summary line ("PREFIX: N passed, N failed"; for Criterion, the Synthesis line). A
# non-zero exit with no failure counted (a crash before the summary) counts as one failure.
group() {
    name=$1
    shift
    "$@" >"$log" 2>&1
    rc=$?
    cat "$log"
    if [ "$name" = unit ]; then
        # Criterion: "[====] Synthesis: Tested: 3 | Passing: 1 | Failing: 2 | Crashing: 1"
        expr='s/.*Synthesis: Tested: [0-9]* | Passing: \([0-9]*\) | Failing: \([0-9]*\).*/\1 \2/p'
    else
        expr="s/^$name: \\([0-9]*\\) passed, \\([0-9]*\\) failed\$/\\1 \\2/p"
    fi
    set -- $(sed -n "$expr" "$log" | tail -n 1) 0 0
    [ "$rc" -ne 0 ] && [ "$2" -eq 0 ] && set -- "$1" 1
    eval "${name}_pass=$1 ${name}_fail=$2"
}
# Two jobs unless CRITERION_JOBS says otherwise (make check-asan runs one: see the Makefile).
group unit "$BUILD/unit_tests" -j"${CRITERION_JOBS:-2}"
group e2e env BUILD="$BUILD" tests/e2e/run.sh
group replay env BUILD="$BUILD" tests/fuzz/replay.sh
rm -f "$log"
echo "unit: $unit_pass passed, $unit_fail failed; e2e: $e2e_pass passed, $e2e_fail failed;" \
    "fuzz replay: $replay_pass passed, $replay_fail failed"
echo "$((unit_pass + e2e_pass + replay_pass)) passed, $((unit_fail + e2e_fail + replay_fail)) failed"
[ $((unit_fail + e2e_fail + replay_fail)) -eq 0 ]
