#!/bin/sh
# make bench: side-by-side measurements in one run, same machine, same environment.
# Writes $BUILD/bench/report.md. Both sides run on one core (taskset -c 1) with one OpenBLAS
# thread; OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE are left as the machine sets them.
# The reference is ../shared/bench/ref_topk.c (OpenBLAS sgemv, then a heap over all scores).
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
OUT="$BUILD/bench"
mkdir -p "$OUT"
REF_SRC=${REF_TOPK:-$TOP/../shared/bench/ref_topk.c}
CC=${CC:-cc}

$CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_topk.c" \
    "$BUILD/libweft.a" -lopenblas -lm -o "$OUT/bench_topk"
have_ref=0
if [ -f "$REF_SRC" ]; then
    $CC -O3 -march=native "$REF_SRC" -lopenblas -o "$OUT/ref_topk" && have_ref=1
fi
export OPENBLAS_NUM_THREADS=1
PIN=""
command -v taskset >/dev/null && PIN="taskset -c 1"

report="$OUT/report.md"
{
    echo "# weft benchmark report"
    echo
    echo "Date: $(date -u +%Y-%m-%dT%H:%M:%SZ). Host: $(nproc) cores. Command: make bench."
    echo "Environment: OPENBLAS_NUM_THREADS=1, ${PIN:-no pinning}, OPENBLAS_CORETYPE=${OPENBLAS_CORETYPE:-unset}."
    echo
    echo "## Top-10 for one query (brute force over all rows)"
    echo
    echo "| N x d | weft_topk_scan q/s | reference sgemv+heap q/s | ratio |"
    echo "|---|---|---|---|"
} >"$report"
for size in "40943 200" "1000000 128"; do
    set -- $size
    w=$($PIN "$OUT/bench_topk" "$1" "$2" | tee -a "$OUT/raw.jsonl")
    wq=$(echo "$w" | sed 's/.*"qps":\([0-9.]*\).*/\1/')
    if [ "$have_ref" -eq 1 ]; then
        r=$($PIN "$OUT/ref_topk" "$1" "$2" 3 | grep sgemv | tee -a "$OUT/raw.jsonl")
        rq=$(echo "$r" | sed 's/.*"qps":\([0-9.]*\).*/\1/')
        ratio=$(awk -v a="$wq" -v b="$rq" 'BEGIN { printf "%.2f", a / b }')
    else
        rq="(reference not found)"
        ratio="-"
    fi
    echo "| $1 x $2 | $wq | $rq | $ratio |" >>"$report"
done
echo >>"$report"
echo "Raw JSON lines: $OUT/raw.jsonl" >>"$report"
cat "$report"
