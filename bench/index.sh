#!/bin/sh
# make bench, index part (called by bench/run.sh, or alone: BUILD=build sh bench/index.sh).
# The approximate indexes of include/weft/link_index.h beside the exact scan, one core each
# (taskset -c 1), in one run:
#   1. bench_index on 1,000,000 x 128 and 40,943 x 200 float32 rows with cluster structure
#      (rows around N / 1000 centres, norms spread over a factor of 3): build time, memory,
#      queries/s and recall@10 against the exact scan's lists, for int8 and for the clustered
#      index at several nprobe. Goals: int8 >= 3x the exact scan's queries/s at recall@10
#      >= 0.99; clustered >= 20x at recall@10 >= 0.95.
#   2. WN18RR (Dettmers et al. 2018) through each path: a DistMult model trained here
#      (logistic loss, 256 negatives, 40 epochs, about a minute on 2 cores), then
#      bench_index_mrr: filtered MRR@100 and Hits@10 of the 2 x 3,134 test queries through the
#      exact scan, an int8 and the two clustered indexes (ivf: int8 lists; ivf-pq: 4-bit
#      product codes). Goal: within 0.005 of the exact figure. Then the same queries as
#      top-10 queries through each path, timed side by side, with recall@10 against the
#      exact lists. Goal for a clustered index: 20x the exact scan's queries/s at recall@10
#      >= 0.95.
# Appends to $REPORT (default $BUILD/bench/report.md).
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
OUT="$BUILD/bench"
REPORT=${REPORT:-$OUT/report.md}
CC=${CC:-cc}
WN=${WN18RR:-$TOP/../shared/datasets/wn18rr}
mkdir -p "$OUT"
LIBS="-ljansson -llmdb -lopenblas -lnettle -lz -lpthread -lm"
for prog in bench_index bench_index_mrr; do
    $CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/$prog.c" \
        "$BUILD/libweft.a" $LIBS -o "$OUT/$prog"
done
PIN=""
command -v taskset >/dev/null && PIN="taskset -c 1"

table() {   # table JSON-LINES: the report rows of one bench_index run
    /usr/bin/python3 - "$1" <<'PY'
import json, sys
rows = [json.loads(l) for l in open(sys.argv[1]) if l.startswith("{")]
setup = next(r for r in rows if r["mode"] == "setup")
exact = next(r for r in rows if r["mode"] == "exact")
print("%d x %d, %d centres, %d queries (VNNI: %s)\n" % (setup["N"], setup["d"], setup["centres"],
                                                       setup["queries"], setup["vnni"]))
print("| path | build s | memory MiB | ms per query | queries/s | x exact (goal) | recall@10 (goal) |")
print("|---|---|---|---|---|---|---|")
print("| exact scan | - | %.1f | %.3f | %.0f | 1 | 1 |" % (exact["bytes"] / 2**20, exact["ms_per_query"], exact["qps"]))
for r in rows:
    if r["mode"] == "int8":
        print("| int8, oversample %d | %.2f | %.1f | %.3f | %.0f | %.2f (>= 3) | %.4f (>= 0.99) |" % (
            r["oversample"], r["build_s"], r["bytes"] / 2**20, r["ms_per_query"], r["qps"],
            r["speedup"], r["recall_at_10"]))
build = next((r for r in rows if r["mode"] == "ivf_build"), None)
for r in rows:
    if r["mode"] == "ivf":
        print("| ivf, %d lists, nprobe %d | %.1f | %.1f | %.4f | %.0f | %.2f (>= 20) | %.4f (>= 0.95) |" % (
            build["lists"], r["nprobe"], build["build_s"], build["bytes"] / 2**20,
            r["ms_per_query"], r["qps"], r["speedup"], r["recall_at_10"]))
PY
}

{
    echo
    echo "## Approximate top-k indexes against the exact scan (one core)"
    echo
    echo "Command: BUILD=build sh bench/index.sh (bench_index N D QUERIES on core 1)."
} >>"$REPORT"
for size in "1000000 128 100" "40943 200 200"; do
    # shellcheck disable=SC2086
    $PIN "$OUT/bench_index" $size | tee -a "$OUT/raw.jsonl" >"$OUT/index-run.jsonl"
    { echo; table "$OUT/index-run.jsonl"; } >>"$REPORT"
done

if [ -d "$WN" ]; then
    rm -rf "$OUT/wn-index-store"
    "$BUILD/weft" train --store "$OUT/wn-index-store" --model distmult --edges "$WN/train.tsv" \
        --valid "$WN/valid.tsv" --test "$WN/test.tsv" --loss logistic --negatives 256 \
        --epochs 40 --seed 1 --quiet --force >"$OUT/wn-index-train.txt" 2>&1
    $PIN "$OUT/bench_index_mrr" "$OUT/wn-index-store" "$WN/test.tsv" 100 \
        | tee -a "$OUT/raw.jsonl" >"$OUT/index-mrr.jsonl"
    /usr/bin/python3 - "$OUT/index-mrr.jsonl" >>"$REPORT" <<'PY'
import json, sys
rows = [json.loads(l) for l in open(sys.argv[1]) if l.startswith("{")]
exact = next(r for r in rows if r["path"] == "exact")
print("\nWN18RR test queries (both directions, filtered) through each path; DistMult, dim 200, trained")
print("here for 40 epochs (logistic loss, 256 negatives):\n")
print("| path | MRR@100 | Hits@10 | MRR - exact (goal: within 0.005) | ms per query | index | recall@10 on the probes |")
print("|---|---|---|---|---|---|---|")
for r in rows:
    what = "-" if r["path"] == "exact" else (
        "%.1f MiB, built in %.1f s%s, oversample %d" % (r["bytes"] / 2**20, r["build_s"],
        ", %d of %d lists scanned" % (r["nprobe"], r["lists"]) if r["path"].startswith("ivf") else "",
        r["oversample"]))
    print("| %s | %.4f | %.4f | %+.4f | %.3f | %s | %s |" % (
        r["path"], r["mrr_at_k"], r["hits_at_10"], r["mrr_at_k"] - exact["mrr_at_k"],
        r["ms_per_query"], what, "-" if r["path"] == "exact" else "%.4f" % r["probe_recall_at_10"]))
print("\nThe same %d queries as top-10 queries without filters, each path timed alone over all of" % exact["queries"])
print("them (best of 3 rounds), recall@10 against the exact lists:\n")
print("| path | us per query | queries/s | x exact (goal for ivf, ivf-pq: >= 20) | recall@10 (goal: >= 0.95) |")
print("|---|---|---|---|---|")
for r in rows:
    print("| %s | %.1f | %.0f | %.2f | %.4f |" % (r["path"], r["top10_us_per_query"], r["top10_qps"],
                                              r["top10_x_exact"], r["top10_recall"]))
PY
fi
