#!/bin/sh
# make bench, service part (called by bench/run.sh, or alone: BUILD=build sh bench/service.sh).
# Top-10 link queries over HTTP on a 40,943 x 200 matrix (the size of WN18RR), exact scan:
# weft serve against the Flask reference service of ../shared/bench/ref_service.py, the same
# matrix (make_emb.py) on both sides, each server pinned to core 1 and wrk to core 0, 16 and
# 64 connections, 20 s each. Goals: >= 5x the reference's requests/s, p99 <= 0.1x its p99.
# Then the first query after a snapshot swap against the tenth over SWAPS swaps (default 20;
# blobs are pre-faulted and warmed before the swap). Appends to $REPORT (default
# $BUILD/bench/report.md).
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
OUT="$BUILD/bench"
REPORT=${REPORT:-$OUT/report.md}
REFS=${REFS:-$TOP/../shared/bench}
DUR=${SERVICE_SECONDS:-20}
CC=${CC:-cc}
mkdir -p "$OUT"
for need in wrk taskset; do
    command -v $need >/dev/null || { echo "service bench: $need missing" >>"$REPORT"; exit 0; }
done
$CC -O2 -std=c11 -D_POSIX_C_SOURCE=200809L -I"$TOP/include" "$TOP/bench/bench_snapshot.c" \
    "$BUILD/libweft.a" -ljansson -llmdb -lopenblas -lnettle -lz -lpthread -lm \
    -o "$OUT/bench_snapshot"
/usr/bin/python3 "$REFS/make_emb.py" 40943 200 "$OUT/emb.npy"
rm -rf "$OUT/service-store"
"$OUT/bench_snapshot" "$OUT/emb.npy" "$OUT/service-store" >/dev/null
cat >"$OUT/weft_top.lua" <<'LUA'
-- random node per request, as ../shared/bench/wrk_top.lua does for the reference
local N = tonumber(os.getenv("WRK_N") or "40943")
math.randomseed(42)
request = function()
  return wrk.format("GET", "/v1/links/predict?source=" .. math.random(0, N - 1) .. "&k=10")
end
LUA
port() { /usr/bin/python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1]); s.close()'; }
wait_up() {   # wait_up URL
    i=0
    until curl -fsS "$1" >/dev/null 2>&1 || [ $i -ge 300 ]; do sleep 0.1; i=$((i + 1)); done
}
# run_wrk URL SCRIPT CONNS -> "req/s p99_ms non2xx errors"
run_wrk() {
    taskset -c 0 wrk -t1 -c"$3" -d"${DUR}s" --latency -s "$2" "$1" >"$OUT/wrk.txt" 2>&1
    cat "$OUT/wrk.txt" >>"$OUT/raw-wrk.txt"
    /usr/bin/python3 - "$OUT/wrk.txt" <<'PY'
import re, sys
t = open(sys.argv[1]).read()
def ms(v, u): return float(v) * {"us": 1e-3, "ms": 1.0, "s": 1e3}[u]
rps = float(re.search(r"Requests/sec:\s+([\d.]+)", t).group(1))
m = re.search(r"99%\s+([\d.]+)(us|ms|s)", t)
non2xx = re.search(r"Non-2xx or 3xx responses: (\d+)", t)
errs = re.search(r"Socket errors: (.*)", t)
print("%.1f %.2f %s %s" % (rps, ms(*m.groups()), non2xx.group(1) if non2xx else 0,
                           "yes" if errs else "no"))
PY
}
: >"$OUT/raw-wrk.txt"
WPORT=$(port)
taskset -c 1 "$BUILD/weft" serve --store "$OUT/service-store" --listen "127.0.0.1:$WPORT" \
    --access-log off >"$OUT/weft-serve.log" 2>&1 &
WPID=$!
wait_up "http://127.0.0.1:$WPORT/v1/links/predict?source=1&k=10"
w16=$(run_wrk "http://127.0.0.1:$WPORT" "$OUT/weft_top.lua" 16)
w64=$(run_wrk "http://127.0.0.1:$WPORT" "$OUT/weft_top.lua" 64)

# The first query after a snapshot swap against the tenth (bench/swap_first_query.py: the
# server's own times from its access log, SWAPS swaps under steady queries, a control without
# a swap, the rule it applies). A server of its own, polling every second, so that the
# promoting process is gone before the swap.
kill $WPID; wait $WPID 2>/dev/null || true
SWAPS=${SWAPS:-20}
"$BUILD/weft" snapshots export 1 "$OUT/service.snap" --store "$OUT/service-store" >/dev/null
i=0
while [ $i -lt "$SWAPS" ]; do
    "$BUILD/weft" snapshots import "$OUT/service.snap" --store "$OUT/service-store" >/dev/null
    i=$((i + 1))
done
rm -f "$OUT/swap-access.log"
WPORT=$(port)
taskset -c 1 "$BUILD/weft" serve --store "$OUT/service-store" --listen "127.0.0.1:$WPORT" \
    --access-log "$OUT/swap-access.log" --poll-ms 1000 >"$OUT/weft-serve-swap.log" 2>&1 &
WPID=$!
wait_up "http://127.0.0.1:$WPORT/v1/links/predict?source=1&k=10"
swap=$(taskset -c 0 /usr/bin/python3 "$TOP/bench/swap_first_query.py" "$WPORT" "$BUILD/weft" \
    "$OUT/service-store" "$SWAPS" 2 "$OUT/swap-access.log" "$WPID")
echo "$swap" >>"$OUT/raw.jsonl"
kill $WPID; wait $WPID 2>/dev/null || true

# The same queries through each index of the same matrix (weft train's defaults: int8 with
# oversample 4, ivf with nprobe tuned on the probe set); the manifest's record beside them.
for kind in int8 ivf; do
    rm -rf "$OUT/service-store-$kind"
    "$OUT/bench_snapshot" "$OUT/emb.npy" "$OUT/service-store-$kind" "$kind" \
        >"$OUT/service-index-$kind.json"
    WPORT=$(port)
    taskset -c 1 "$BUILD/weft" serve --store "$OUT/service-store-$kind" \
        --listen "127.0.0.1:$WPORT" --access-log off >"$OUT/weft-serve-$kind.log" 2>&1 &
    WPID=$!
    wait_up "http://127.0.0.1:$WPORT/v1/links/predict?source=1&k=10"
    eval "i16_$kind=\$(run_wrk \"http://127.0.0.1:\$WPORT\" \"\$OUT/weft_top.lua\" 16)"
    eval "i64_$kind=\$(run_wrk \"http://127.0.0.1:\$WPORT\" \"\$OUT/weft_top.lua\" 64)"
    kill $WPID; wait $WPID 2>/dev/null || true
done

have_ref=0
/usr/bin/python3 -c 'import flask' 2>/dev/null && [ -f "$REFS/ref_service.py" ] && have_ref=1
if [ "$have_ref" -eq 1 ]; then
    RPORT=$(port)
    taskset -c 1 /usr/bin/python3 "$REFS/ref_service.py" "$OUT/emb.npy" "$RPORT" \
        >"$OUT/ref-service.log" 2>&1 &
    RPID=$!
    wait_up "http://127.0.0.1:$RPORT/top?node=1&k=10"
    r16=$(run_wrk "http://127.0.0.1:$RPORT" "$REFS/wrk_top.lua" 16)
    r64=$(run_wrk "http://127.0.0.1:$RPORT" "$REFS/wrk_top.lua" 64)
    kill $RPID; wait $RPID 2>/dev/null || true
fi
row() {   # row CONNS WEFT REF
    set -- "$1" $2 ${3:-- - - -}
    if [ "$6" = "-" ]; then
        echo "| $1 | $2 | $3 | $4 / $5 | (reference missing) | | | |"
    else
        echo "| $1 | $2 | $3 | $4 / $5 | $6 | $7 | $(awk -v a="$2" -v b="$6" 'BEGIN{printf "%.2f", a/b}') (>= 5) | $(awk -v a="$3" -v b="$7" 'BEGIN{printf "%.3f", a/b}') (<= 0.1) |"
    fi
}
{
    echo
    echo "## Serving: top-10 link queries over HTTP, 40,943 x 200, exact scan"
    echo
    echo "Each server pinned to core 1, wrk -t1 on core 0, ${DUR} s per run; the same matrix"
    echo "(make_emb.py) on both sides. Command: BUILD=build sh bench/service.sh."
    echo
    echo "| connections | weft req/s | weft p99 ms | weft non-2xx / socket errors | reference req/s | reference p99 ms | req/s ratio (goal) | p99 ratio (goal) |"
    echo "|---|---|---|---|---|---|---|---|"
    row 16 "$w16" "${r16:-}"
    row 64 "$w64" "${r64:-}"
    echo
    echo "The same queries through an index of the same matrix (weft train's defaults; its"
    echo "manifest record: recall@10 on 200 probe queries against the exact scan, memory):"
    echo
    echo "| index | connections | weft req/s | weft p99 ms | weft non-2xx / socket errors | reference req/s | req/s ratio (goal) | recall@10 | index MiB |"
    echo "|---|---|---|---|---|---|---|---|---|"
    for kind in int8 ivf; do
        rec=$(/usr/bin/python3 -c 'import json,sys; r=json.load(open(sys.argv[1]))["index"]; print("%.4f %.1f %s" % (r["recall_at_10"], r["bytes"] / 2**20, ("%d&nbsp;lists,&nbsp;nprobe&nbsp;%d" % (r["lists"], r["nprobe"])) if "lists" in r else "oversample&nbsp;%d" % r["oversample"]))' "$OUT/service-index-$kind.json")
        for c in 16 64; do
            eval "res=\$i${c}_$kind"
            ref=$([ "$c" = 16 ] && echo "${r16:-}" || echo "${r64:-}")
            set -- $res ${ref:-- - - -} $rec
            ratio=$([ "$5" = "-" ] && echo "-" || awk -v a="$1" -v b="$5" 'BEGIN{printf "%.2f", a/b}')
            echo "| $kind (${11}) | $c | $1 | $2 | $3 / $4 | $5 | $ratio (>= 20) | $9 | ${10} |"
        done
    done
    echo
    /usr/bin/python3 - "$swap" <<'PY'
import json, sys
r = json.loads(sys.argv[1])
print("First query after a snapshot swap, under steady queries, the server's own times (its")
print("access log), medians over %d swaps (%d skipped): first %.3f ms, tenth %.3f ms, first /"
      % (r["swaps"], r["skipped"], r["first_ms"], r["tenth_ms"]))
print("tenth %.3f (rule: <= 1.05 and a one-sided Wilcoxon test of first > tenth p >= 0.05;"
      % r["ratio"])
print("p = %s): **%s**. Control, no swap: first %.3f, tenth %.3f, ratio %.3f. The request in"
      % ("%.3g" % r["wilcoxon_p"] if r["wilcoxon_p"] is not None else "n/a (no scipy)",
         "met" if r["met"] else "not met", r["control_first_ms"], r["control_tenth_ms"],
         r["control_ratio"]))
print("flight during the swap (it waits for the core the loader uses): %.3f ms. Most page"
      % r["during_swap_ms"])
print("faults the server took in the ten requests after a swap: %d (the matrix alone is 8,000"
      % r["most_faults"])
print("pages of 4 KiB; its pages are mapped, read and warmed before the swap).")
PY
} >>"$REPORT"
