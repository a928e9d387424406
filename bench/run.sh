#!/bin/sh
# make bench: side-by-side measurements in one run, same machine, same environment.
# Writes $BUILD/bench/report.md. Both sides run on one core (taskset -c 1) with one OpenBLAS
# thread; OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE are left as the machine sets them.
# BENCH_ONLY=topk runs the top-k section alone (about a minute) and stops there; it needs
# only $BUILD/libweft.a (make build/libweft.a). BENCH_ONLY=index (bench/index.sh: the
# approximate indexes, a few minutes) and BENCH_ONLY=service (bench/service.sh: the HTTP
# service against the Flask reference, about 3 minutes) run the top-k section and that one.
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
OUT="$BUILD/bench"
mkdir -p "$OUT"
: >"$OUT/raw.jsonl"
CC=${CC:-cc}
BENCH_ONLY=${BENCH_ONLY:-}

# ---- Exact top-10 by brute force: one query, and batches of 64 ----
# References: ../shared/bench/ref_topk.c (OpenBLAS sgemv, or sgemm for 64 queries, then a
# heap over all scores) and ../shared/bench/bandwidth.c (a sum over 1 GB: the core's read
# bandwidth). All three are built as their READMEs say, allocate their matrix the same way
# (2 MiB aligned, MADV_HUGEPAGE) and run pinned to the same core with one OpenBLAS thread.
# This VM is shared, so TOPK_ROUNDS (default 5) rounds each run bandwidth, weft and the
# reference back to back; the report gives medians over rounds, and the share of bandwidth is
# the median of each round's weft GB/s over that round's bandwidth.
# One round by hand: bandwidth 1 9; bench_topk 1000000 128 16 3; ref_topk 1000000 128 3;
# bench_topk 40943 200 64 0; ref_topk 40943 200 1.
REF_SRC=${REF_TOPK:-$TOP/../shared/bench/ref_topk.c}
BW_SRC=${REF_BANDWIDTH:-$TOP/../shared/bench/bandwidth.c}
TOPK_ROUNDS=${TOPK_ROUNDS:-5}
$CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_topk.c" \
    "$BUILD/libweft.a" -lopenblas -lm -o "$OUT/bench_topk"
have_ref=0
if [ -f "$REF_SRC" ]; then
    $CC -O3 -march=native "$REF_SRC" -lopenblas -o "$OUT/ref_topk" && have_ref=1
fi
have_bw=0
if [ -f "$BW_SRC" ]; then
    $CC -O3 -march=native -fopenmp-simd "$BW_SRC" -o "$OUT/bandwidth" && have_bw=1
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
} >"$report"

jnum() { echo "$1" | sed -n "s/.*\"$2\":\([0-9.]*\).*/\1/p"; }   # jnum JSON-LINE KEY
median() { sort -n | awk '{ v[NR] = $1 } END { if (NR == 0) print "-"; else if (NR % 2) print v[(NR + 1) / 2]; else printf "%.3f\n", (v[NR / 2] + v[NR / 2 + 1]) / 2 }'; }
tk="$OUT/topk-rounds.txt"   # one "name value" line per measurement and round
: >"$tk"
i=0
while [ "$i" -lt "$TOPK_ROUNDS" ]; do
    i=$((i + 1))
    bw=""
    if [ "$have_bw" -eq 1 ]; then
        b=$($PIN "$OUT/bandwidth" 1 9 | tee -a "$OUT/raw.jsonl")
        bw=$(jnum "$b" median_GBps)
        echo "bw $bw" >>"$tk"
    fi
    w=$($PIN "$OUT/bench_topk" 1000000 128 16 3 | tee -a "$OUT/raw.jsonl")
    w1=$(echo "$w" | grep '"weft_topk_scan"')
    echo "w_ms $(jnum "$w1" ms_per_query)" >>"$tk"
    echo "w_gbps $(jnum "$w1" eff_GBps)" >>"$tk"
    [ -n "$bw" ] && awk -v a="$(jnum "$w1" eff_GBps)" -v b="$bw" 'BEGIN { printf "w_share %.1f\n", 100 * a / b }' >>"$tk"
    echo "w_batch $(jnum "$(echo "$w" | grep batch64)" qps)" >>"$tk"
    echo "$w" | grep -q '"same_as_one_query":true' || echo "batch_differs 1" >>"$tk"
    w=$($PIN "$OUT/bench_topk" 40943 200 64 0 | tee -a "$OUT/raw.jsonl")
    echo "w_wn $(jnum "$w" qps)" >>"$tk"
    if [ "$have_ref" -eq 1 ]; then
        r=$($PIN "$OUT/ref_topk" 1000000 128 3 | tee -a "$OUT/raw.jsonl")
        echo "r_ms $(jnum "$(echo "$r" | grep sgemv)" ms_per_query)" >>"$tk"
        echo "r_gbps $(jnum "$(echo "$r" | grep sgemv)" eff_GBps)" >>"$tk"
        echo "r_batch $(jnum "$(echo "$r" | grep sgemm64)" qps)" >>"$tk"
        r=$($PIN "$OUT/ref_topk" 40943 200 1 | tee -a "$OUT/raw.jsonl")
        echo "r_wn $(jnum "$(echo "$r" | grep sgemv)" qps)" >>"$tk"
    fi
done
med() { awk -v k="$1" '$1 == k { print $2 }' "$tk" | median; }
rat() { awk -v a="$1" -v b="$2" 'BEGIN { if (b + 0 > 0 && a + 0 > 0) printf "%.2f", a / b; else print "-" }'; }
{
    echo
    echo "## Exact top-10 by brute force, one core (medians of $TOPK_ROUNDS rounds)"
    echo
    echo "| measure | weft | reference | ratio (goal) |"
    echo "|---|---|---|---|"
    echo "| read bandwidth of one core, GB/s (bandwidth.c) | $(med bw) | | |"
    echo "| 1,000,000 x 128, one query: ms | $(med w_ms) | $(med r_ms) (sgemv + heap) | $(rat "$(med r_ms)" "$(med w_ms)") x faster |"
    echo "| 1,000,000 x 128, one query: effective GB/s | $(med w_gbps) | $(med r_gbps) | |"
    echo "| 1,000,000 x 128, one query: % of the bandwidth | $(med w_share) | | (>= 70) |"
    echo "| 1,000,000 x 128, batches of 64: queries/s | $(med w_batch) | $(med r_batch) (sgemm + heap) | $(rat "$(med w_batch)" "$(med r_batch)") (>= 1.0) |"
    echo "| 40,943 x 200, one query: queries/s | $(med w_wn) | $(med r_wn) (sgemv + heap) | $(rat "$(med w_wn)" "$(med r_wn)") (> 1.0) |"
    echo
    echo "Each round: bandwidth.c 1 9, bench_topk (weft_topk_scan and weft_topk_scan_batch), ref_topk."
    echo "Per round (bandwidth GB/s; weft ms, % of bandwidth, batch q/s; reference ms, batch q/s):"
    for k in bw w_ms w_share w_batch w_wn r_ms r_batch r_wn; do
        echo "$k: $(awk -v k="$k" '$1 == k { printf "%s ", $2 }' "$tk")"
    done | sed 's/^/    /'
    if grep -q batch_differs "$tk"; then
        echo
        echo "**A batch list differed from the one-query list** (see raw.jsonl)."
    fi
    echo
    echo "Raw JSON lines: $OUT/raw.jsonl"
} >>"$report"
if [ "$BENCH_ONLY" = topk ]; then
    cat "$report"
    exit 0
fi

# ---- the indexes (bench/index.sh) and the service over HTTP (bench/service.sh) ----
# Each appends its own section; BENCH_ONLY=index or BENCH_ONLY=service runs one alone.
for part in index service; do
    if [ -z "$BENCH_ONLY" ] || [ "$BENCH_ONLY" = "$part" ]; then
        REPORT="$report" BUILD="$BUILD" sh "$TOP/bench/$part.sh" >/dev/null \
            || echo "**bench/$part.sh failed**: see $OUT." >>"$report"
    fi
done
if [ "$BENCH_ONLY" = index ] || [ "$BENCH_ONLY" = service ]; then
    cat "$report"
    exit 0
fi

# ---- GCN on Cora (Sen et al. 2008; split of Yang et al. 2016): speed and quality ----
# Reference: ../shared/bench/ref_gcn.py (PyTorch, Kipf & Welling 2017 recipe, sparse
# features), 10 seeds, GCN_THREADS threads (default 1) on both sides, same environment.
# One epoch = a training step and a validation forward pass on both sides.
CORA=${CORA:-$TOP/../shared/datasets/cora}
REF_GCN=${REF_GCN:-$TOP/../shared/bench/ref_gcn.py}
GCN_THREADS=${GCN_THREADS:-1}
if [ -d "$CORA" ]; then
    unset OPENBLAS_NUM_THREADS
    $CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_gcn.c" \
        "$BUILD/libweft.a" -ljansson -lopenblas -lnettle -lz -lpthread -lm -o "$OUT/bench_gcn"
    gfield() { /usr/bin/python3 -c 'import json,sys; print(json.loads(sys.argv[1].split(" ", 1)[1])[sys.argv[2]])' "$1" "$2"; }
    wg=$("$OUT/bench_gcn" "$CORA" "$GCN_THREADS" 10 | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
    {
        echo
        echo "## GCN node classification on Cora: 10 seeds, $GCN_THREADS thread(s)"
        echo
        echo "| | weft | reference (PyTorch) | ratio (goal) |"
        echo "|---|---|---|---|"
    } >>"$report"
    if /usr/bin/python3 -c 'import torch' 2>/dev/null && [ -f "$REF_GCN" ]; then
        rg=$(/usr/bin/python3 "$REF_GCN" "$CORA" "$GCN_THREADS" 10 --sparse-x | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
        we=$(gfield "$wg" median_epoch_ms); re=$(gfield "$rg" median_epoch_ms)
        wr=$(gfield "$wg" median_train_s); rr=$(gfield "$rg" median_train_s)
        {
            echo "| median ms per epoch | $we | $re | $(awk -v a="$we" -v b="$re" 'BEGIN{printf "%.3f", a/b}') (<= 0.2) |"
            echo "| median s per run (early stopping on both sides) | $wr | $rr | $(awk -v a="$wr" -v b="$rr" 'BEGIN{printf "%.3f", a/b}') |"
            echo "| 200 epochs at the median epoch time, s | $(awk -v e="$we" 'BEGIN{printf "%.3f", e*0.2}') | $(awk -v e="$re" 'BEGIN{printf "%.3f", e*0.2}') | $(awk -v a="$we" -v b="$re" 'BEGIN{printf "%.3f", a/b}') (<= 0.2) |"
            echo "| mean epochs run | $(gfield "$wg" mean_epochs) | $(gfield "$rg" median_epochs) (median) | |"
            echo "| test accuracy, mean +- sd (%) | $(gfield "$wg" test_acc_mean) +- $(gfield "$wg" test_acc_std) | $(gfield "$rg" test_acc_mean) +- $(gfield "$rg" test_acc_std) | paper 81.5 |"
            echo "| peak memory (maxrss), MB | $(gfield "$wg" maxrss_mb) | $(gfield "$rg" maxrss_mb) | $(awk -v a="$(gfield "$wg" maxrss_mb)" -v b="$(gfield "$rg" maxrss_mb)" 'BEGIN{printf "%.3f", a/b}') |"
        } >>"$report"
    else
        echo "| median ms per epoch | $(gfield "$wg" median_epoch_ms) | (PyTorch missing) | - |" >>"$report"
    fi
    # GCN link prediction (graph auto-encoder setting, Kipf & Welling 2016: AUC 0.910, AP
    # 0.920 on Cora with features, 85/5/10 edge split): weft train --model gcn-link with its
    # defaults, seeds 1-5; test edges against as many sampled non-edges.
    {
        echo
        echo "## GCN link prediction on Cora with features, 85/5/10 edge split, seeds 1-5"
        echo
        echo "| seed | test AUC-ROC (goal >= 0.90) | test AP (goal >= 0.90) | popularity AUC | train s |"
        echo "|---|---|---|---|---|"
    } >>"$report"
    for seed in 1 2 3 4 5; do
        rm -rf "$OUT/gcn-link-store"
        "$BUILD/weft" train --store "$OUT/gcn-link-store" --model gcn-link --undirected \
            --edges "$CORA/edges.tsv" --features "$CORA/features.tsv" --holdout 0.05,0.1 \
            --seed "$seed" --quiet --report "$OUT/gcn-link.$seed.json" >/dev/null
        /usr/bin/python3 -c 'import json,sys
r = json.load(open(sys.argv[1])); t = r["test"]
secs = sum(e["seconds"] for e in r["curve"])
print("| %s | %.4f | %.4f | %.4f | %.2f |" % (sys.argv[2], t["auc"], t["ap"], r["baselines"]["popularity"]["auc"], secs))' \
            "$OUT/gcn-link.$seed.json" "$seed" >>"$report"
    done
    rm -rf "$OUT/gcn-link-store"
fi

# ---- Link prediction on WN18RR (Dettmers et al. 2018): speed and quality ----
# Reference: ../shared/bench/ref_kge.py (PyTorch DistMult), same data, dimension 200, batch
# 1000, 128 negatives per side, 2 threads, same environment. Both sides run with
# GLIBC_TUNABLES=glibc.malloc.hugetlb=1, the setting under which ../shared/bench/README.md
# measured the reference (without it the reference's 1-vs-all epoch is about 4x slower here).
# BENCH_QUICK=1 skips the 10-minute quality runs.
WN=${WN18RR:-$TOP/../shared/datasets/wn18rr}
REF_KGE=${REF_KGE:-$TOP/../shared/bench/ref_kge.py}
THREADS=${BENCH_THREADS:-2}
if [ -d "$WN" ]; then
    $CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_kge.c" \
        "$BUILD/libweft.a" -ljansson -lopenblas -lnettle -lz -lpthread -lm -o "$OUT/bench_kge"
    $CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_sgemm.c" \
        "$BUILD/libweft.a" -lopenblas -lm -o "$OUT/bench_sgemm"
    unset OPENBLAS_NUM_THREADS
    export GLIBC_TUNABLES=glibc.malloc.hugetlb=1
    field() {   # field JSON-LINE KEY: a number from a flat or nested JSON line
        /usr/bin/python3 -c 'import json,sys
d = json.loads(sys.argv[1].split(" ", 1)[1] if sys.argv[1].startswith("SUMMARY") else sys.argv[1])
for k in sys.argv[2].split("."): d = d[k]
print(d)' "$1" "$2"
    }
    ratio() { awk -v a="$1" -v b="$2" 'BEGIN { printf "%.2f", a / b }'; }
    sg=$("$OUT/bench_sgemm" 1000 40943 200 "$THREADS" | tee -a "$OUT/raw.jsonl")
    sg_gflops=$(field "$(echo "$sg" | grep openblas_sgemm)" gflops)
    wg_gflops=$(field "$(echo "$sg" | grep '"weft_gemm')" gflops)
    # Speed: the mean of two epochs of weft; 60 to 90 s of the reference, extrapolated per epoch.
    w1=$("$OUT/bench_kge" "$WN" distmult softmax 100000 "$THREADS" epochs=2 eval_every=1000 | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
    wns=$("$OUT/bench_kge" "$WN" distmult logistic 100000 "$THREADS" epochs=2 neg=256 batch=1000 eval_every=1000 | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
    have_torch=0
    /usr/bin/python3 -c 'import torch' 2>/dev/null && [ -f "$REF_KGE" ] && have_torch=1
    if [ "$have_torch" -eq 1 ]; then
        r1=$(/usr/bin/python3 "$REF_KGE" "$WN" 1n 90 "$THREADS" eval_every=100000 | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
        rns=$(/usr/bin/python3 "$REF_KGE" "$WN" ns 60 "$THREADS" eval_every=100000 | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
    fi
    w1_epoch=$(field "$w1" s_per_epoch)
    wns_epoch=$(field "$wns" s_per_epoch)
    flops_epoch=$(awk 'BEGIN { printf "%.0f", 2 * 86835 * 3 * 2 * 40943 * 200 }')
    {
        echo
        echo "## Link prediction on WN18RR: time per epoch (DistMult, dim 200, $THREADS threads)"
        echo
        echo "Both sides: GLIBC_TUNABLES=$GLIBC_TUNABLES, OPENBLAS_CORETYPE=${OPENBLAS_CORETYPE:-unset}, no pinning."
        echo
        echo "| variant | weft s/epoch | reference s/epoch | ratio (goal) | weft triples/s |"
        echo "|---|---|---|---|---|"
        if [ "$have_torch" -eq 1 ]; then
            r1_epoch=$(field "$r1" sec_per_epoch_from_steps)
            rns_epoch=$(field "$rns" sec_per_epoch_from_steps)
            echo "| 1-vs-all softmax, batch 1000 | $w1_epoch | $r1_epoch | $(ratio "$w1_epoch" "$r1_epoch") (<= 0.5) | $(awk -v e="$w1_epoch" 'BEGIN{printf "%.0f", 86835/e}') |"
            echo "| negatives, 256 per positive (reference: 128 per side) | $wns_epoch | $rns_epoch | $(ratio "$wns_epoch" "$rns_epoch") (<= 0.25) | $(awk -v e="$wns_epoch" 'BEGIN{printf "%.0f", 86835/e}') |"
        else
            echo "| 1-vs-all softmax, batch 1000 | $w1_epoch | (PyTorch missing) | - | |"
            echo "| negatives, 256 per positive | $wns_epoch | (PyTorch missing) | - | |"
        fi
        echo
        echo "Dense products of a 1-vs-all epoch: $(awk -v f="$flops_epoch" 'BEGIN{printf "%.2f", f/1e12}') TFLOP;"
        echo "weft's effective rate over a whole epoch $(awk -v f="$flops_epoch" -v e="$w1_epoch" 'BEGIN{printf "%.0f", f/e/1e9}') GFLOP/s; on the batch's three products alone, weft_gemm $wg_gflops GFLOP/s against OpenBLAS sgemm $sg_gflops GFLOP/s."
        echo "Full filtered test evaluation (6,268 queries): weft $(field "$w1" test_eval_s) s$([ "$have_torch" -eq 1 ] && echo ", reference $(field "$r1" test_eval_s) s, ratio $(ratio "$(field "$w1" test_eval_s)" "$(field "$r1" test_eval_s)") (goal <= 0.5)")."
        echo "Peak memory: weft $(field "$w1" peak_rss_mb) MB$([ "$have_torch" -eq 1 ] && echo ", reference $(field "$r1" maxrss_mb) MB")."
    } >>"$report"
    if [ "${BENCH_QUICK:-0}" != 1 ]; then
        {
            echo
            echo "## Link prediction on WN18RR: quality within 10 minutes of training (defaults, $THREADS threads)"
            echo
            echo "| model | epochs | test MRR (goal) | Hits@1 | Hits@10 (goal) | popularity MRR |"
            echo "|---|---|---|---|---|---|"
        } >>"$report"
        for kind in distmult complex; do
            q=$("$OUT/bench_kge" "$WN" "$kind" softmax 600 "$THREADS" | tee -a "$OUT/raw.jsonl" | grep SUMMARY)
            goal_mrr=0.44
            [ "$kind" = complex ] && goal_mrr=0.45
            echo "| $kind | $(field "$q" epochs) | $(field "$q" test_mrr) (>= $goal_mrr) | $(field "$q" test_h1) | $(field "$q" test_h10) (>= 0.50) | $(field "$q" popularity_mrr) |" >>"$report"
        done
        echo "Published: DistMult MRR 0.43, Hits@10 0.49 (Dettmers et al. 2018)." >>"$report"
    fi
fi
# ---- the snapshot store: write and open time by size ----
# bench/bench_store.c: one N x 128 float32 snapshot written live (median of 3; the commit is
# fsynced), then opened: the catalog read (head + manifest), weft_snapshot_open warm (CRC-32
# of every blob and a pre-fault pass) and cold (store closed, data.mdb dropped from the page
# cache with posix_fadvise, store and snapshot opened again), the CRC pass and the page-touch
# pass alone. Reproduce one row: bench_store DIR 1000000 128 3 (DIR must not hold a store).
$CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_store.c" \
    "$BUILD/libweft.a" -ljansson -llmdb -lopenblas -lnettle -lz -lpthread -lm -o "$OUT/bench_store"
{
    echo
    echo "## Snapshot store: write and open time of an N x 128 float32 snapshot"
    echo
    echo "| N x 128 | MiB | write s | catalog ms | open s (warm) | open s (cold) | CRC-32 s | page touch s | verify s |"
    echo "|---|---|---|---|---|---|---|---|---|"
} >>"$report"
sfield() { echo "$1" | sed "s/.*\"$2\":\([0-9.]*\).*/\1/"; }
for rows in 10000 100000 1000000; do
    rm -rf "$OUT/store-bench"
    b=$("$OUT/bench_store" "$OUT/store-bench" "$rows" 128 3 | tee -a "$OUT/raw.jsonl")
    echo "| $rows x 128 | $(sfield "$b" MiB) | $(sfield "$b" write_s) | $(sfield "$b" catalog_ms) | $(sfield "$b" open_s) | $(sfield "$b" cold_open_s) | $(sfield "$b" crc_s) | $(sfield "$b" touch_s) | $(sfield "$b" verify_s) |" >>"$report"
done
rm -rf "$OUT/store-bench"
{
    echo
    echo "What grows with the size: weft_snapshot_open checks the CRC-32 of every blob and reads"
    echo "every page once before a snapshot is served, so its time is O(size) (the CRC column is"
    echo "nearly all of it). What does not: the map itself. The catalog read (a read transaction,"
    echo "head and manifest) is the same at every size, and blobs are read in place, never copied."
    echo "Cold means out of this machine's page cache (the disk under a VM may cache too)."
    echo "Command: make bench (this section: bench_store DIR N 128 3)."
} >>"$report"

# ---- soak: SOAK_SECONDS (default 600) of mixed load with a promotion every 10 s ----
# bench/soak.sh appends its own section (errors, resident memory, file descriptors and
# threads at start, after warm-up, at the end, and the verdict); SOAK_SECONDS=0 skips it.
# Alone: SOAK_SECONDS=600 BUILD=build sh bench/soak.sh.
if [ "${SOAK_SECONDS:-600}" != 0 ]; then
    REPORT="$report" BUILD="$BUILD" SOAK_SECONDS="${SOAK_SECONDS:-600}" sh "$TOP/bench/soak.sh" \
        >/dev/null || echo "**bench/soak.sh failed**: see its section above and $OUT/soak." >>"$report"
fi

cat "$report"
