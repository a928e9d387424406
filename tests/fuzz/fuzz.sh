#!/bin/sh
# make fuzz and make fuzz-merge: the libFuzzer targets of tests/fuzz, one at a time.
#   tests/fuzz/fuzz.sh run TARGET...    run each $BUILD/fuzz/fuzz_TARGET for FUZZ_SECONDS
#                                       (default 600) on its corpus and crash files; new
#                                       inputs go to $BUILD/fuzz/new/TARGET, findings to
#                                       $BUILD/fuzz/artifacts/TARGET, the output to
#                                       $BUILD/fuzz/logs/TARGET.log. One line per target:
#                                       time, executions, exec/s, coverage, findings.
#   tests/fuzz/fuzz.sh merge TARGET...  add to tests/fuzz/corpus/TARGET the new inputs that
#                                       reach coverage it lacks (libFuzzer -merge=1)
# BUILD defaults to build-fuzz. The exit status is 0 only when no target found anything.
set -u
TOP=$(cd "$(dirname "$0")/../.." && pwd)
cd "$TOP" || exit 1
BUILD=${BUILD:-build-fuzz}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
SECONDS_EACH=${FUZZ_SECONDS:-600}
mode=${1:-}
[ $# -gt 0 ] && shift
if [ "$mode" != run ] && [ "$mode" != merge ] || [ $# -eq 0 ]; then
    echo "usage: tests/fuzz/fuzz.sh run|merge TARGET..." >&2
    exit 2
fi

# The last value libFuzzer printed for "stat::NAME:", or "?".
stat_of() {
    v=$(sed -n "s/^stat::$1: *//p" "$2" | tail -n 1)
    echo "${v:-?}"
}

run_one() {
    t=$1
    bin=$BUILD/fuzz/fuzz_$t
    new=$BUILD/fuzz/new/$t
    art=$BUILD/fuzz/artifacts/$t
    log=$BUILD/fuzz/logs/$t.log
    tmp=$BUILD/fuzz/tmp/$t
    rm -rf "$art" "$tmp"
    mkdir -p "$new" "$art" "$tmp" "$BUILD/fuzz/logs" "tests/fuzz/corpus/$t"
    set -- -max_total_time="$SECONDS_EACH" -timeout=10 -rss_limit_mb=2048 -detect_leaks=1 \
        -print_final_stats=1 -artifact_prefix="$art/"
    [ -f "tests/fuzz/$t.dict" ] && set -- "$@" -dict="tests/fuzz/$t.dict"
    # The worker's reader prints every rejected file on stderr.
    [ "$t" = worker_config ] && set -- "$@" -close_fd_mask=2
    set -- "$@" "$new" "tests/fuzz/corpus/$t"
    [ -d "tests/fuzz/crashes/$t" ] && set -- "$@" "tests/fuzz/crashes/$t"
    start=$(date +%s)
    TMPDIR=$tmp ASAN_OPTIONS=detect_leaks=1 \
        UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 "$bin" "$@" >"$log" 2>&1
    rc=$?
    end=$(date +%s)
    rm -rf "$tmp"
    cov=$(grep -o 'cov: [0-9]* ft: [0-9]*' "$log" | tail -n 1)
    finds=$(find "$art" -type f | wc -l)
    verdict=ok
    if [ "$rc" -ne 0 ] || [ "$finds" -ne 0 ]; then
        verdict="FAILED (exit $rc; see $log and $art)"
    fi
    echo "fuzz $t: $((end - start)) s, $(stat_of number_of_executed_units "$log") runs," \
        "$(stat_of average_exec_per_sec "$log") exec/s, ${cov:-cov: ?}," \
        "$(stat_of new_units_added "$log") new inputs, peak RSS $(stat_of peak_rss_mb "$log") MB," \
        "$finds findings: $verdict"
    [ "$verdict" = ok ]
}

merge_one() {
    t=$1
    new=$BUILD/fuzz/new/$t
    if [ ! -d "$new" ]; then
        echo "fuzz $t: no new inputs ($new)"
        return 0
    fi
    before=$(find "tests/fuzz/corpus/$t" -type f | wc -l)
    tmp=$BUILD/fuzz/tmp/$t
    rm -rf "$tmp"
    mkdir -p "$tmp" "$BUILD/fuzz/logs"
    TMPDIR=$tmp "$BUILD/fuzz/fuzz_$t" -merge=1 -timeout=10 -rss_limit_mb=2048 \
        "tests/fuzz/corpus/$t" "$new" >"$BUILD/fuzz/logs/$t.merge.log" 2>&1 ||
        { echo "fuzz $t: merge failed (see $BUILD/fuzz/logs/$t.merge.log)"; return 1; }
    rm -rf "$tmp"
    after=$(find "tests/fuzz/corpus/$t" -type f | wc -l)
    echo "fuzz $t: corpus $before -> $after files"
}

failed=0
for t in "$@"; do
    if [ ! -x "$BUILD/fuzz/fuzz_$t" ]; then
        echo "fuzz $t: no $BUILD/fuzz/fuzz_$t (make fuzz builds it)"
        failed=$((failed + 1))
        continue
    fi
    "${mode}_one" "$t" || failed=$((failed + 1))
done
[ "$failed" -eq 0 ]
