#!/bin/sh
# make bench, soak part (called by bench/run.sh, or alone: SOAK_SECONDS=600 BUILD=build sh
# bench/soak.sh; tests/e2e/test_soak.sh runs 60 s of it).
# SOAK_SECONDS (default 600) of mixed load from wrk (-t1, SOAK_CONNECTIONS connections,
# default 8) against weft serve on a store with a link model and a label model (Cora,
# tests/data/cora), while `weft snapshots promote` alternates the live version between two
# stored ones every 10 s. The mix, by fixed weights out of 10: GET /v1/links/predict (top 10)
# 4, /v1/labels/predict 2, /v1/links/explain 1, /v1/labels/explain 2, /metrics 1; nodes drawn
# uniformly. Every 10 s, just before each promotion, the server's resident memory (VmRSS),
# open file descriptors (/proc/PID/fd, the fewest of three looks 50 ms apart) and threads
# are sampled.
# Errors: wrk's non-2xx answers and socket errors, and the answers the server itself counted
# outside 2xx (/metrics); all must be 0.
# Growth, the rule: the baseline is the sample at the end of the warm-up (max(30 s, a tenth
# of the run): both versions have been loaded by then); the end is the last sample, still
# under load. Resident memory is not growing when the end is within max(2 MiB, 5%) of the
# baseline; file descriptors and threads when the end is at most the baseline. The
# least-squares slope of resident memory after the warm-up is reported beside it.
# Resident memory is also given split into anonymous memory (the heap: where a leak would
# show) and file pages (the store's map, bounded by data.mdb).
# Appends a section to $REPORT (default $BUILD/bench/report.md) and keeps the samples, wrk's
# output and the last /metrics in $SOAK_DIR (default $BUILD/bench/soak); exit status 1 when
# there was an error, a promotion was not served, or something grew.
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
WEFT="$BUILD/weft"
OUT=${SOAK_DIR:-$BUILD/bench/soak}
REPORT=${REPORT:-$BUILD/bench/report.md}
SOAK=${SOAK_SECONDS:-600}
CONNS=${SOAK_CONNECTIONS:-8}
PERIOD=10
CORA="$TOP/tests/data/cora"
command -v wrk >/dev/null || { echo "soak: wrk missing (deploy/install-deps.sh)" >&2; exit 1; }
[ "$SOAK" -ge 30 ] || { echo "soak: SOAK_SECONDS must be at least 30" >&2; exit 2; }
rm -rf "$OUT"
mkdir -p "$OUT"
SERVER=""
WRK=""
cleanup() {
    [ -n "$WRK" ] && kill "$WRK" 2>/dev/null
    [ -n "$SERVER" ] && kill "$SERVER" 2>/dev/null
    return 0
}
trap cleanup EXIT
trap 'exit 1' INT TERM

# ---- the store: 2 = links (dot) + labels (GCN), 3 = other links (seed 2) + the same labels ----
S="$OUT/store"
{
    "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --epochs 5 --force
    "$WEFT" train --store "$S" --model gcn --edges "$CORA/edges.tsv" --features \
        "$CORA/features.tsv" --labels "$CORA/labels.tsv" --split "$CORA/split.tsv"
    "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --epochs 5 --force \
        --seed 2
    "$WEFT" snapshots promote 2 --store "$S"
} >"$OUT/train.log" 2>&1 || { echo "soak: training failed, see $OUT/train.log" >&2; exit 1; }


PORT=$(/usr/bin/python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1]); s.close()')
BASE="http://127.0.0.1:$PORT"
"$WEFT" serve --store "$S" --listen "127.0.0.1:$PORT" --access-log off >"$OUT/serve.log" 2>&1 &
SERVER=$!
i=0
until curl -fsS "$BASE/readyz" >/dev/null 2>&1 || [ $i -ge 100 ]; do sleep 0.1; i=$((i + 1)); done
curl -fsS "$BASE/readyz" >/dev/null || { echo "soak: the server did not start" >&2; cat "$OUT/serve.log" >&2; exit 1; }

# sample T: "T rss_kib fds threads anon_kib file_kib" of the server. File descriptors are
# the fewest of three looks 50 ms apart: a /metrics request holds a /proc file open for a
# moment, which is not what a leak looks like.
sample() {
    fds=""
    for look in 1 2 3; do
        n=$(ls "/proc/$SERVER/fd" | wc -l)
        [ -z "$fds" ] || [ "$n" -lt "$fds" ] && fds=$n
        [ $look -lt 3 ] && sleep 0.05
    done
    awk -v t="$1" -v fds="$fds" '{ v[$1] = $2 }
        END { print t, v["VmRSS:"], fds, v["Threads:"], v["RssAnon:"], v["RssFile:"] + v["RssShmem:"] }' \
        "/proc/$SERVER/status"
}
SAMPLES="$OUT/samples.txt"   # seconds since the load began, VmRSS KiB, fds, threads, anon, file
sample 0 >"$SAMPLES"
wrk -t1 -c"$CONNS" -d"$((SOAK + 5))s" --latency -s "$TOP/bench/mixed_load.lua" "$BASE" >"$OUT/wrk.txt" 2>&1 &
WRK=$!
start=$(date +%s)
: >"$OUT/promotions.txt"
k=1
next=3
while [ $((k * PERIOD)) -le "$SOAK" ]; do
    wait_s=$((start + k * PERIOD - $(date +%s)))
    [ "$wait_s" -gt 0 ] && sleep "$wait_s"
    kill -0 "$SERVER" 2>/dev/null || { echo "soak: the server died at $((k * PERIOD)) s" >&2; break; }
    sample $((k * PERIOD)) >>"$SAMPLES"
    if [ $((k * PERIOD)) -lt "$SOAK" ]; then
        if "$WEFT" snapshots promote "$next" --store "$S" >>"$OUT/promote.log" 2>&1; then
            echo "$((k * PERIOD)) $next ok" >>"$OUT/promotions.txt"
        else
            echo "$((k * PERIOD)) $next failed" >>"$OUT/promotions.txt"
        fi
        next=$((5 - next))
    fi
    k=$((k + 1))
done
wait "$WRK" || true
WRK=""
curl -fsS "$BASE/metrics" >"$OUT/metrics.txt" || : >"$OUT/metrics.txt"
alive=yes
kill -0 "$SERVER" 2>/dev/null || alive=no
kill "$SERVER" 2>/dev/null || true
wait "$SERVER" 2>/dev/null || true
SERVER=""

# ---- figures and verdict ----
set +e
/usr/bin/python3 - "$OUT" "$SOAK" "$CONNS" "$alive" "$REPORT" <<'PY'
import re, sys
out, soak, conns, alive, report = sys.argv[1], int(sys.argv[2]), sys.argv[3], sys.argv[4], sys.argv[5]
wrk = open(out + "/wrk.txt").read()
samples = [tuple(map(int, l.split())) for l in open(out + "/samples.txt") if l.strip()]
promos = [l.split() for l in open(out + "/promotions.txt") if l.strip()]
metrics = open(out + "/metrics.txt").read()

def num(pattern, text, default=0.0):
    m = re.search(pattern, text)
    return float(m.group(1)) if m else default

def ms(name):
    m = re.search(r"%s\s+([\d.]+)(us|ms|s)\b" % re.escape(name), wrk)
    return float(m.group(1)) * {"us": 1e-3, "ms": 1.0, "s": 1e3}[m.group(2)] if m else float("nan")

requests = int(num(r"(\d+) requests in", wrk))
rps = num(r"Requests/sec:\s+([\d.]+)", wrk)
non2xx = int(num(r"Non-2xx or 3xx responses: (\d+)", wrk))
sock = re.search(r"Socket errors: connect (\d+), read (\d+), write (\d+), timeout (\d+)", wrk)
sock_errors = sum(map(int, sock.groups())) if sock else 0
by_route, server_bad = {}, 0
for m in re.finditer(r'^weft_http_requests_total\{method="([^"]*)",route="([^"]*)",status="(\d+|other)"\} (\S+)$',
                     metrics, re.M):
    n = int(float(m.group(4)))
    by_route[m.group(2)] = by_route.get(m.group(2), 0) + n
    if not m.group(3).startswith("2"):
        server_bad += n
swaps = int(num(r"(?m)^weft_snapshot_swaps_total (\S+)$", metrics, -1))
failures = int(num(r"(?m)^weft_snapshot_load_failures_total (\S+)$", metrics, -1))
promoted = sum(1 for p in promos if p[2] == "ok")
promote_failed = sum(1 for p in promos if p[2] != "ok")

warmup = max(30, soak // 10)
base = next((s for s in samples if s[0] >= warmup), samples[-1])
end = samples[-1]
start = samples[0]
peak = tuple(max(s[i] for s in samples) for i in range(6))
tol_kib = max(2048, base[1] * 0.05)
rss_ok = end[1] <= base[1] + tol_kib
fds_ok = end[2] <= base[2]
thr_ok = end[3] <= base[3]
def slope_of(points):   # least-squares slope of resident memory, KiB per minute
    if len(points) < 3:
        return float("nan")
    mt = sum(s[0] for s in points) / len(points)
    mr = sum(s[1] for s in points) / len(points)
    den = sum((s[0] - mt) ** 2 for s in points)
    return sum((s[0] - mt) * (s[1] - mr) for s in points) / den * 60 if den else float("nan")
slope = slope_of([s for s in samples if s[0] >= base[0]])
late = slope_of([s for s in samples if s[0] >= end[0] / 2])
errors = non2xx + sock_errors + server_bad
served_all = swaps == promoted + 1 and failures == 0
ok = errors == 0 and rss_ok and fds_ok and thr_ok and alive == "yes" and promote_failed == 0 \
    and served_all and requests > 0
growing = [w for w, good in (("resident memory", rss_ok), ("file descriptors", fds_ok),
                             ("threads", thr_ok)) if not good]
verdict = "not growing" if not growing else "GROWING: " + ", ".join(growing)
mib = lambda kib: "%.1f" % (kib / 1024)
lines = [
    "",
    "## Soak: %d s of mixed load with a promotion every 10 s" % soak,
    "",
    "wrk -t1 -c%s on the server's cores (2), Cora store with a link model (dot) and a label model" % conns,
    "(GCN); `weft snapshots promote` alternates versions 2 and 3 every 10 s. Mix out of 10:",
    "links predict 4, labels predict 2, links explain 1, labels explain 2, /metrics 1.",
    "Command: SOAK_SECONDS=%d BUILD=build sh bench/soak.sh (samples in build/bench/soak/)." % soak,
    "",
    "| | start (idle) | after warm-up (%d s) | end (%d s, under load) | max |" % (base[0], end[0]),
    "|---|---|---|---|---|",
    "| resident memory, MiB | %s | %s | %s | %s |" % (mib(start[1]), mib(base[1]), mib(end[1]), mib(peak[1])),
    "| of it anonymous (heap, stacks), MiB | %s | %s | %s | %s |" % (mib(start[4]), mib(base[4]), mib(end[4]), mib(peak[4])),
    "| of it file pages (the store's map), MiB | %s | %s | %s | %s |" % (mib(start[5]), mib(base[5]), mib(end[5]), mib(peak[5])),
    "| open file descriptors | %d | %d | %d | %d |" % (start[2], base[2], end[2], peak[2]),
    "| threads | %d | %d | %d | %d |" % (start[3], base[3], end[3], peak[3]),
    "",
    "Requests: %d (%.0f/s; p50 %.2f ms, p99 %.2f ms). By route (the server's count): %s." % (
        requests, rps, ms("50%"), ms("99%"),
        ", ".join("%s %d" % (r, n) for r, n in sorted(by_route.items(), key=lambda x: -x[1]))),
    "Errors: %d (wrk non-2xx %d, socket errors %d; answers outside 2xx counted by the server %d)." % (
        errors, non2xx, sock_errors, server_bad),
    "Promotions: %d done, %d failed; versions the server made live: %d (the first load and one per"
    " promotion), load failures %d. Server alive at the end: %s." % (
        promoted, promote_failed, swaps, failures, alive),
    "Growth: %s. Rule: against the sample after the warm-up (max(30 s, a tenth of the run)), the"
    " last sample's resident memory within max(2 MiB, 5%%) (here %.1f MiB), file descriptors and"
    " threads no more. Resident memory after the warm-up moved %+.1f MiB (least-squares slope"
    " %+.1f KiB/min; over the second half of the run %+.1f KiB/min)." % (
        verdict, tol_kib / 1024, (end[1] - base[1]) / 1024, slope, late),
    "Verdict: %s." % ("PASS" if ok else "FAIL"),
]
text = "\n".join(lines) + "\n"
open(report, "a").write(text)
sys.stdout.write(text)
sys.exit(0 if ok else 1)
PY
