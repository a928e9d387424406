#!/bin/sh
# Faults around a serving store (issue 7, item 4). test_crash.sh kills a bare writer inside
# its transactions; test_hotswap.sh promotes under load with nothing going wrong. Here:
# (a) weft worker retrains and promotes while wrk keeps the server busy with a mix of link,
#     label, explanation and metric requests; the worker and its `weft train` child are
#     SIGKILLed together (its process group, as a container stop would) at KILLS random
#     moments, uniform over twice one unhurried cycle under the same load (so that kills
#     land in training, in the write, and after the promotion), and restarted. After each
#     kill `weft snapshots verify` passes, the live version holds both models, and the server
#     answers from it; at the end: no non-2xx answer and no socket error (wrk, and the
#     server's own counters),
#     the server answers from the store's live version, and one more worker run promotes a
#     version the server then serves.
# (b) a full disk: the store on a tmpfs sized for one snapshot and not two. The second
#     `weft train` and a `weft snapshots import` fail, exit 1, with a message naming the
#     store's data file and the free space; every database of the store dumps to the same
#     bytes (mdb_dump -a) as before, it verifies, lists the same, and a server on it answers
#     the same. With room again the write goes through. Where mounting is not permitted, the
#     same checks run under a file size limit (RLIMIT_FSIZE) and a SKIP line says so
#     (FAULT_TMPFS=no takes that path on purpose).
# (c) a damaged blob: one byte of a staged version's entity blob flipped in data.mdb;
#     `weft snapshots verify` names it and `promote` refuses it. Then the damage lands between
#     a promotion's verification and the server's load (the server is paused with SIGSTOP
#     while another version is promoted and damaged): the server keeps answering from the
#     version it had, byte for byte the same, under load and without a failed request;
#     /v1/health warns with a snapshot_load check naming the version and the CRC-32 mismatch
#     (valid against the OpenAPI HealthReport schema); /metrics counts one load failure.
#     After `weft snapshots rollback` the check is ok again (it still names the failure),
#     and a version trained afterwards is served.
# Data: Cora (tests/data/cora, provenance in tests/data/README.md). FAULT_SEED fixes the kill
# moments; KILLS (default 15) sets their number.
set -u
. "$TOP/tests/e2e/lib.sh"
command -v wrk >/dev/null || { echo "wrk missing: deploy/install-deps.sh installs it"; exit 1; }
command -v setsid >/dev/null || { echo "setsid missing (util-linux)"; exit 1; }
CORA="$TOP/tests/data/cora"
KILLS=${KILLS:-15}
SEED=${FAULT_SEED:-$(od -An -N4 -tu4 /dev/urandom | tr -d ' ')}
echo "FAULT_SEED=$SEED (set it to repeat these kill moments)"
MNT=""
WRK=""
WORKER=""

cleanup() {
    [ -n "$WRK" ] && kill "$WRK" 2>/dev/null
    [ -n "$WORKER" ] && kill -s KILL -- "-$WORKER" 2>/dev/null
    [ -n "${SERVER_PID:-}" ] && { kill -s CONT "$SERVER_PID"; stop_server; } 2>/dev/null
    [ -n "$MNT" ] && umount "$MNT" 2>/dev/null
    MNT=""
}
trap cleanup EXIT
trap 'exit 1' INT TERM

# The request mix of bench/soak.sh (bench/mixed_load.lua).

# start_load OUT: wrk on $BASE until stop_load (SIGINT makes it print its figures).
start_load() {
    wrk -t1 -c8 -d3600s -s "$TOP/bench/mixed_load.lua" "$BASE" >"$1" 2>&1 &
    WRK=$!
}
stop_load() {
    kill -s INT "$WRK"
    wait "$WRK"
    WRK=""
}
wrk_clean() {   # wrk_clean OUT: it answered requests, none non-2xx, no socket error
    grep -q "requests in" "$1" && ! grep -q "Non-2xx" "$1" && ! grep -q "Socket errors" "$1"
}
wrk_requests() { sed -n 's/^ *\([0-9]*\) requests in.*/\1/p' "$1"; }

# The server's own count of answers that were not 2xx, from /metrics.
server_failures() {
    curl -fsS "$BASE/metrics" | awk '/^weft_http_requests_total/ && !/status="2/ { n += $2 } END { print n + 0 }'
}
metric() { curl -fsS "$BASE/metrics" | awk -v k="$1" '$1 == k { print $2 }'; }
served_version() { curl -fsS "$BASE/v1/model" | /usr/bin/python3 -c 'import json,sys; print(json.load(sys.stdin)["version"])'; }
live_of() {   # live_of STORE
    "$WEFT" snapshots list --store "$1" --json | /usr/bin/python3 -c 'import json,sys; print(json.load(sys.stdin)["live"])'
}
# wait_served V: until the server answers from version V (at most 5 s).
wait_served() {
    n=0
    until [ "$(served_version 2>/dev/null)" = "$1" ] || [ $n -ge 50 ]; do sleep 0.1; n=$((n + 1)); done
    [ "$(served_version 2>/dev/null)" = "$1" ]
}
# random_seconds I MS: a uniform random delay in [0, MS] ms as seconds, from SEED and I.
random_seconds() {
    /usr/bin/python3 -c 'import random, sys
r = random.Random(int(sys.argv[1]) * 1000 + int(sys.argv[2]))
print("%.3f" % (r.random() * float(sys.argv[3]) / 1000))' "$SEED" "$1" "$2"
}
now_ms() { date +%s%3N; }
# both_models STORE V: version V holds a link model and a label model, every blob verified.
both_models() {
    "$WEFT" snapshots verify "$2" --store "$1" >/dev/null 2>&1 &&
        "$WEFT" snapshots show "$2" --store "$1" --json | /usr/bin/python3 -c '
import json, sys
m = json.load(sys.stdin)
sys.exit(0 if {"link", "labels"} <= set(m["models"]) and "entity" in m["blobs"] and "label.prob" in m["blobs"] else 1)'
}
# served_whole STORE V: both_models, and the server answers from V.
served_whole() { both_models "$1" "$2" && wait_served "$2"; }
# answers FILE: the bodies of a fixed set of link and label queries, one per line.
answers() {
    for q in "links/predict?source=n0&k=10" "links/predict?source=n1000&k=10" \
             "links/predict?source=n2707&k=5" "labels/predict?node=n0" \
             "labels/predict?node=n1500" "links/explain?source=n3&target=n7" \
             "labels/explain?node=n42"; do
        curl -sS "$BASE/v1/$q"
        echo
    done >"$1"
}
# train_links STORE EDGES [ARG...]: a dot link model (5 epochs) into STORE.
train_links() {
    tl_store=$1
    tl_edges=$2
    shift 2
    "$WEFT" train --store "$tl_store" --edges "$tl_edges" --undirected --quiet --epochs 5 \
        --force "$@" >>"$E2E_TMP/train.log" 2>&1
}
# states STORE: "LIVE STATE STATE ..." (the states in version order).
states() {
    "$WEFT" snapshots list --store "$1" --json | /usr/bin/python3 -c 'import json,sys
d = json.load(sys.stdin)
print(d["live"], *[m["state"] for m in d["snapshots"]])'
}
# health_check FILE NAME STATUS TEXT...: the /v1/health body in FILE has check NAME with
# STATUS and every TEXT in its message.
health_check() {
    /usr/bin/python3 -c 'import json,sys
c = [c for c in json.load(open(sys.argv[1]))["checks"] if c["name"] == sys.argv[2]]
print(c[0] if c else "no check %s" % sys.argv[2])
sys.exit(0 if c and c[0]["status"] == sys.argv[3] and all(t in c[0]["message"] for t in sys.argv[4:]) else 1)' "$@"
}

# ======== (a) the worker killed at random moments under load ========
A="$E2E_TMP/a"
mkdir -p "$A"
cp "$CORA/edges.tsv" "$A/edges.tsv"
"$WEFT" train --store "$A/store" --edges "$A/edges.tsv" --undirected --quiet --epochs 5 \
    --force >"$E2E_TMP/train.log" 2>&1 &&
"$WEFT" train --store "$A/store" --model gcn --edges "$A/edges.tsv" --features \
    "$CORA/features.tsv" --labels "$CORA/labels.tsv" --split "$CORA/split.tsv" --quiet \
    >>"$E2E_TMP/train.log" 2>&1
check "(a) versions 1 (links) and 2 (labels, links carried) trained" both_models "$A/store" 2
cat >"$A/worker.conf" <<'CONF'
# retrain at once at every start and every second after; keep the store small. Cold starts:
# warm-started 5-epoch runs lose quality run after run until the gate refuses them.
store = store
check_every = 1s
retrain_every = 1s
keep = 3
gate_tolerance = 1
warm_start = no
[train]
edges = edges.tsv
undirected = yes
epochs = 5
CONF
start_server "$A/store" --poll-ms 100 --access-log off || finish
start_load "$E2E_TMP/wrk-a.txt"
sleep 1
# One unhurried cycle under this load: start, train, store, promote, prune.
t0=$(now_ms)
"$WEFT" worker --config "$A/worker.conf" --once >"$A/calibrate.log" 2>&1
CYCLE_MS=$(( $(now_ms) - t0 ))
check "(a) a worker cycle under load promotes a version (${CYCLE_MS} ms)" \
    grep -q "trained: the new snapshot is live" "$A/calibrate.log"
WINDOW=$(awk -v ms="$CYCLE_MS" 'BEGIN { printf "%d", ms * 2 + 1 }')
in_training=0
in_other=0
committed=0
# kill_worker N DELAY|train: start the worker, kill its process group after DELAY seconds
# (train: once its weft train child has run for a random part of a short while), note what
# the kill interrupted, and check the store and the server.
kill_worker() {
    before=$(live_of "$A/store")
    setsid "$WEFT" worker --config "$A/worker.conf" >"$A/worker.$1.log" 2>&1 &
    WORKER=$!
    delay=$2
    if [ "$2" = train ]; then
        n=0
        until ps -o args= --ppid "$WORKER" 2>/dev/null | grep -q '^[^ ]*weft train' \
            || [ $n -ge 600 ]; do
            sleep 0.01
            n=$((n + 1))
        done
        delay="train + $(random_seconds "$1" 300)"
        sleep "${delay#train + }"
    else
        sleep "$delay"
    fi
    # What the kill interrupts: a weft train (or prune) child, or the worker alone.
    child=$(ps -o stat=,args= --ppid "$WORKER" 2>/dev/null | awk '$1 !~ /^Z/ { print $3; exit }')
    kill -s KILL -- "-$WORKER"
    wait "$WORKER" 2>/dev/null
    WORKER=""
    if [ "$child" = train ]; then
        in_training=$((in_training + 1))
        what="during weft train"
    elif [ -n "$child" ]; then
        in_other=$((in_other + 1))
        what="during weft $child"
    else
        in_other=$((in_other + 1))
        what="the worker between steps"
    fi
    live=$(live_of "$A/store")
    [ "$live" != "$before" ] && committed=$((committed + 1))
    check "(a) kill $1 after ${delay}s ($what): store verifies, live version $live holds both models, served" \
        served_whole "$A/store" "$live"
}
i=1
while [ $i -le "$KILLS" ]; do
    kill_worker $i "$(random_seconds $i "$WINDOW")"
    i=$((i + 1))
done
# Random moments may miss the training runs on a loaded machine: aim the rest at them.
while [ "$in_training" -lt 3 ] && [ $i -le $((KILLS + 6)) ]; do
    kill_worker $i train
    i=$((i + 1))
done
KILLS=$((i - 1))
echo "$KILLS kills: $in_training during weft train, $in_other elsewhere (window ${WINDOW} ms);"
echo "$committed of them after a new version was promoted"
check "(a) kills landed during training runs ($in_training of $KILLS)" test "$in_training" -ge 3
live=$(live_of "$A/store")
check "(a) after the kills the server answers from the store's live version $live" wait_served "$live"
sleep 2   # retrain_every = 1s counts whole seconds from the newest snapshot's "created"
"$WEFT" worker --config "$A/worker.conf" --once >"$A/final.log" 2>&1
after=$(live_of "$A/store")
check "(a) a worker run after the kills promotes version $after" \
    sh -c '[ "$1" -gt "$2" ] && grep -q "trained: the new snapshot is live" "$3"' sh "$after" "$live" "$A/final.log"
check "(a) the server answers from it" wait_served "$after"
check "(a) the store verifies" "$WEFT" snapshots verify --store "$A/store"
stop_load
cat "$E2E_TMP/wrk-a.txt"
echo "versions made live in this server: $(metric weft_snapshot_swaps_total); load failures: $(metric weft_snapshot_load_failures_total)"
check "(a) wrk: $(wrk_requests "$E2E_TMP/wrk-a.txt") requests, no non-2xx, no socket error" \
    wrk_clean "$E2E_TMP/wrk-a.txt"
check "(a) the server counted no answer other than 2xx" test "$(server_failures)" -eq 0
check "(a) the server loaded every version it was shown" test "$(metric weft_snapshot_load_failures_total)" -eq 0
stop_server

# ======== (b) a full disk during a snapshot write ========
B="$E2E_TMP/b"
mkdir -p "$B/full"
# How much one snapshot takes: the same training into a scratch store on the ordinary disk.
train_links "$B/scratch" "$CORA/edges.tsv"
one=$(( $(stat -c %s "$B/scratch/data.mdb") + $(stat -c %s "$B/scratch/lock.mdb") ))
train_links "$B/scratch" "$CORA/edges.tsv" --seed 2
"$WEFT" snapshots export 2 "$B/second.snap" --store "$B/scratch" >/dev/null
# Room for one snapshot and 256 KiB: the second (about 1 MiB) cannot fit.
SIZE=$(( (one + 262144 + 4095) / 4096 * 4096 ))
if [ "${FAULT_TMPFS:-yes}" = no ]; then
    echo "FAULT_TMPFS=no" >"$B/mount.err"
    false
else
    mount -t tmpfs -o "size=$SIZE" weft-faults "$B/full" 2>"$B/mount.err"
fi
if [ $? -eq 0 ]; then
    MNT="$B/full"
    S="$B/full/store"
    how="tmpfs of $SIZE bytes"
    limit() { "$@"; }
else
    echo "SKIP (b) full tmpfs: mounting is not permitted here ($(cat "$B/mount.err")); the"
    echo "     same checks run under a file size limit (RLIMIT_FSIZE), as"
    echo "     store_ops/a_full_disk_fails_the_write_clearly_and_keeps_the_store does"
    S="$B/store"
    how="file size limit of $SIZE bytes"
    # limit CMD...: CMD with RLIMIT_FSIZE at SIZE and SIGXFSZ ignored (writes fail with EFBIG).
    limit() {
        /usr/bin/python3 -c 'import os, resource, signal, sys
signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
n = int(sys.argv[1])
resource.setrlimit(resource.RLIMIT_FSIZE, (n, n))
os.execv(sys.argv[2], sys.argv[2:])' "$SIZE" "$@"
    }
fi
limit "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --quiet --epochs 5 \
    --force >>"$E2E_TMP/train.log" 2>&1
check "(b) the first snapshot fits ($how)" test "$(live_of "$S")" = 1
start_server "$S" --access-log off || finish
answers "$B/answers-before.txt"
mdb_dump -a "$S" >"$B/dump-before.txt"
"$WEFT" snapshots list --store "$S" --json >"$B/list-before.json"
limit "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --quiet --epochs 5 \
    --force --seed 2 >"$B/train2.out" 2>"$B/train2.err"
rc=$?
cat "$B/train2.err"
check "(b) the second weft train fails with exit 1" test $rc -eq 1
check "(b) its message names the store's data file, the full disk and the free space" sh -c '
    grep -q "weft: .*$1/data.mdb failed: " "$2" && grep -q "free there" "$2" &&
    grep -Eq "no space left on device|file size limit" "$2" &&
    grep -q "nothing was stored, the store is as it was" "$2"' sh "$S" "$B/train2.err"
limit "$WEFT" snapshots import "$B/second.snap" --store "$S" >"$B/import.out" 2>"$B/import.err"
rc=$?
cat "$B/import.err"
check "(b) weft snapshots import fails too, exit 1, naming the data file" \
    sh -c '[ $1 -eq 1 ] && grep -q "$2/data.mdb failed: .*free there" "$3"' sh $rc "$S" "$B/import.err"
mdb_dump -a "$S" >"$B/dump-after.txt"
check "(b) every database of the store dumps to the same bytes (mdb_dump -a)" \
    cmp -s "$B/dump-before.txt" "$B/dump-after.txt"
check "(b) weft snapshots list is unchanged" sh -c \
    '"$1" snapshots list --store "$2" --json | cmp -s - "$3"' sh "$WEFT" "$S" "$B/list-before.json"
check "(b) the store verifies" "$WEFT" snapshots verify --store "$S"
answers "$B/answers-after.txt"
check "(b) the server answers exactly as before" cmp -s "$B/answers-before.txt" "$B/answers-after.txt"
stop_server
if [ -n "$MNT" ]; then
    mount -o "remount,size=$((SIZE * 4))" "$MNT"
    "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --quiet --epochs 5 \
        --force --seed 2 >>"$E2E_TMP/train.log" 2>&1
else
    "$WEFT" train --store "$S" --edges "$CORA/edges.tsv" --undirected --quiet --epochs 5 \
        --force --seed 2 >>"$E2E_TMP/train.log" 2>&1
fi
check "(b) with room again the same write goes through as version 2" \
    sh -c '[ "$("$1" snapshots list --store "$2" --json | /usr/bin/python3 -c "import json,sys; print(json.load(sys.stdin)[\"live\"])")" = 2 ] && "$1" snapshots verify --store "$2" >/dev/null' sh "$WEFT" "$S"
[ -n "$MNT" ] && umount "$MNT" && MNT=""

# ======== (c) a blob damaged on disk ========
C="$E2E_TMP/c/store"
mkdir -p "$E2E_TMP/c"
train_links "$C" "$CORA/edges.tsv"
"$WEFT" train --store "$C" --model gcn --edges "$CORA/edges.tsv" --features \
    "$CORA/features.tsv" --labels "$CORA/labels.tsv" --split "$CORA/split.tsv" --quiet \
    >>"$E2E_TMP/train.log" 2>&1
train_links "$C" "$CORA/edges.tsv" --seed 3 --no-promote
train_links "$C" "$CORA/edges.tsv" --seed 4 --no-promote
check "(c) version 2 live (links and labels), 3 and 4 staged with other link models" \
    test "$(states "$C")" = "2 retired live staged staged"
# damage V: flip one bit in the middle of version V's entity blob inside data.mdb. The blob is
# found by its stored form: the 48-byte header (magic WEFTBLB1, dtype, ndim, 3 shape slots,
# data length; core/internal.h) with the manifest's shape and length, followed by data whose
# CRC-32 is the manifest's (each version's link model was trained with its own seed, so
# exactly one place matches).
damage() {
    "$WEFT" snapshots show "$1" --store "$C" --json >"$E2E_TMP/c/manifest.json" &&
    /usr/bin/python3 - "$C/data.mdb" "$E2E_TMP/c/manifest.json" <<'PY'
import json, mmap, struct, sys, zlib
desc = json.load(open(sys.argv[2]))["blobs"]["entity"]
with open(sys.argv[1], "r+b") as f:
    m = mmap.mmap(f.fileno(), 0)
    hits, at = [], m.find(b"WEFTBLB1")
    while at >= 0:
        ndim, = struct.unpack_from("<I", m, at + 12)
        shape = list(struct.unpack_from("<3Q", m, at + 16))[:ndim]
        nbytes, = struct.unpack_from("<Q", m, at + 40)
        data = at + 48
        if shape == desc["shape"] and nbytes == desc["bytes"] and data + nbytes <= len(m) \
                and zlib.crc32(m[data:data + nbytes]) == desc["crc32"]:
            hits.append(data)
        at = m.find(b"WEFTBLB1", at + 1)
    if len(hits) != 1:
        sys.exit("entity blob found %d times" % len(hits))
    m[hits[0] + desc["bytes"] // 2] ^= 0x10
    m.flush()
    print("flipped bit 4 of byte %d of the entity blob (file offset %d)" % (desc["bytes"] // 2, hits[0] + desc["bytes"] // 2))
PY
}
start_server "$C" --poll-ms 100 --access-log off || finish
answers "$E2E_TMP/c/answers-before.txt"
check "(c) the server answers from version 2" test "$(served_version)" = 2
start_load "$E2E_TMP/wrk-c.txt"
sleep 1
check "(c) damage version 3's entity blob" damage 3
"$WEFT" snapshots verify 3 --store "$C" >"$E2E_TMP/c/verify3.txt" 2>&1
rc=$?
cat "$E2E_TMP/c/verify3.txt"
check "(c) weft snapshots verify 3 fails and names the blob and its CRC-32" \
    sh -c '[ $1 -eq 1 ] && grep -q "blob .entity.: CRC-32" "$2"' sh $rc "$E2E_TMP/c/verify3.txt"
"$WEFT" snapshots promote 3 --store "$C" >"$E2E_TMP/c/promote3.txt" 2>&1
rc=$?
cat "$E2E_TMP/c/promote3.txt"
check "(c) weft snapshots promote 3 refuses it: exit 1, version 2 stays live" \
    sh -c '[ $1 -eq 1 ] && grep -q "version 3 fails verification" "$2" && [ "$3" = 2 ]' \
    sh $rc "$E2E_TMP/c/promote3.txt" "$(live_of "$C")"
# The damage lands after the promotion verified version 4 and before the server loads it.
kill -s STOP "$SERVER_PID"
"$WEFT" snapshots promote 4 --store "$C" >"$E2E_TMP/c/promote4.txt" 2>&1
promoted=$?
damage 4 >"$E2E_TMP/c/damage4.txt" 2>&1
damaged=$?
kill -s CONT "$SERVER_PID"
cat "$E2E_TMP/c/promote4.txt" "$E2E_TMP/c/damage4.txt"
check "(c) version 4 promoted (verified), then damaged on disk" test $promoted -eq 0 -a $damaged -eq 0
n=0
until curl -sS "$BASE/v1/health" 2>/dev/null | grep -q snapshot_load || [ $n -ge 50 ]; do
    sleep 0.1
    n=$((n + 1))
done
curl -sS -o "$E2E_TMP/c/health.json" -w '%{http_code}\n' "$BASE/v1/health" >"$E2E_TMP/c/health.status"
/usr/bin/python3 -m json.tool "$E2E_TMP/c/health.json" | sed -n '1,12p'
check "(c) /v1/health answers 200 with status warn" sh -c \
    '[ "$(cat "$1")" = 200 ] && grep -q "\"status\":\"warn\"" "$2"' sh "$E2E_TMP/c/health.status" "$E2E_TMP/c/health.json"
check "(c) its snapshot_load check warns, naming version 4, the blob and the CRC-32 mismatch" \
    health_check "$E2E_TMP/c/health.json" snapshot_load warn "live version 4" \
    "blob 'entity': CRC-32 mismatch" "version 2, verified"
check "(c) the health body is valid against the OpenAPI HealthReport schema" \
    /usr/bin/python3 -c 'import json, sys
sys.path.insert(0, sys.argv[1] + "/tests/e2e")
import jsonschema, openapi_schema
doc, resolver = openapi_schema.load(sys.argv[1] + "/openapi/openapi.yaml")
jsonschema.validate(json.load(open(sys.argv[2])), doc["components"]["schemas"]["HealthReport"], resolver=resolver)' \
    "$TOP" "$E2E_TMP/c/health.json"
check "(c) /metrics: one load failure, the check's status 1 (warn), version 2 live" sh -c \
    '[ "$1" = 1 ] && [ "$2" = 1 ] && [ "$3" = 2 ]' sh "$(metric weft_snapshot_load_failures_total)" \
    "$(metric 'weft_health_check_status{check="snapshot_load"}')" "$(metric weft_snapshot_version)"
check "(c) /readyz stays 200" curl -fsS -o /dev/null "$BASE/readyz"
answers "$E2E_TMP/c/answers-after.txt"
check "(c) the server answers from version 2, byte for byte as before" \
    cmp -s "$E2E_TMP/c/answers-before.txt" "$E2E_TMP/c/answers-after.txt"
check "(c) the server log says version 4 is not served and why" \
    grep -q "version 4 not served, version 2 stays live: .*CRC-32 mismatch" "$E2E_TMP/server.log"
# What an operator does on that warning: roll back to the previous version (verified first).
"$WEFT" snapshots rollback --store "$C" --reason "version 4 is damaged" >/dev/null
n=0
until curl -sS -o "$E2E_TMP/c/health-rollback.json" "$BASE/v1/health" &&
    health_check "$E2E_TMP/c/health-rollback.json" snapshot_load ok >/dev/null || [ $n -ge 50 ]; do
    sleep 0.1
    n=$((n + 1))
done
check "(c) after weft snapshots rollback, snapshot_load is ok and still names version 4" \
    health_check "$E2E_TMP/c/health-rollback.json" snapshot_load ok \
    "live version 2 is served" "version 4 failed to load"
train_links "$C" "$CORA/edges.tsv" --seed 5
check "(c) a good version 5 trained afterwards (labels carried from 2) is served" wait_served 5
curl -sS -o "$E2E_TMP/c/health5.json" "$BASE/v1/health"
check "(c) and snapshot_load stays ok" \
    health_check "$E2E_TMP/c/health5.json" snapshot_load ok "live version 5 is served"
stop_load
cat "$E2E_TMP/wrk-c.txt"
check "(c) wrk: $(wrk_requests "$E2E_TMP/wrk-c.txt") requests, no non-2xx, no socket error" \
    wrk_clean "$E2E_TMP/wrk-c.txt"
check "(c) the server counted no answer other than 2xx" test "$(server_failures)" -eq 0
finish
