#!/bin/sh
# weft sync: two replicas, each a `weft sync` loop into its own store and a `weft serve` on
# it, follow one directory of exports. They serve the same snapshot (the one created last,
# whatever the file names) with identical top-k answers; a new export reaches both within
# seconds while a damaged export (reported once, never promoted) and a file still being
# written (ignored) change nothing; removing the newest export brings the one before back;
# a restarted sync imports nothing twice; SIGTERM stops sync cleanly and the stores verify.
# Data: the karate club (tests/data/karate, provenance in tests/data/README.md), 5 epochs,
# promoted with --force (the gate is not under test here).
set -u
. "$TOP/tests/e2e/lib.sh"

PY=/usr/bin/python3
SRC="$E2E_TMP/source"
EXP="$E2E_TMP/exports"
mkdir -p "$EXP"
train() {   # train SEED: one more snapshot in the source store, live
    "$WEFT" train --store "$SRC" --edges "$TOP/tests/data/karate/edges.tsv" --undirected \
        --epochs 5 --seed "$1" --force --quiet >>"$E2E_TMP/train.log" 2>&1
}
export_to() {   # export_to VERSION NAME: prints the file's SHA-256
    "$WEFT" snapshots export "$1" "$EXP/$2" --store "$SRC" --json |
        $PY -c 'import json,sys; print(json.load(sys.stdin)["sha256"])'
}
# "created" has a resolution of one second: a pause keeps the versions apart.
train 1
sleep 1.1
train 2
check "source: two versions trained" test "$("$WEFT" snapshots list --store "$SRC" --json |
    $PY -c 'import json,sys; print(len(json.load(sys.stdin)["snapshots"]))')" -eq 2
# The names sort against the creation order: the rule follows "created", not names.
sha2=$(export_to 2 a-second.snap)
export_to 1 b-first.snap >/dev/null

# ---- two replicas ----
start_replica() {   # start_replica N: sync loop and server for replica N
    "$WEFT" sync --from "$EXP" --store "$E2E_TMP/r$1" --interval 0.2s --keep 1 \
        >"$E2E_TMP/sync$1.log" 2>&1 &
    eval "SYNC$1=\$!"
    port=$(free_port)
    eval "PORT$1=$port"
    mkdir -p "$E2E_TMP/r$1"
    "$WEFT" serve --store "$E2E_TMP/r$1" --listen "127.0.0.1:$port" --poll-ms 50 \
        --access-log off >"$E2E_TMP/serve$1.log" 2>&1 &
    eval "SERVE$1=\$!"
}
SYNC1="" SYNC2="" SERVE1="" SERVE2=""
trap 'kill $SYNC1 $SYNC2 $SERVE1 $SERVE2 2>/dev/null' EXIT
start_replica 1
start_replica 2
# origin_of N: the SHA-256 of the export file replica N serves (from its live manifest).
origin_of() {
    eval "port=\$PORT$1"
    curl -fsS "http://127.0.0.1:$port/v1/model" 2>/dev/null |
        $PY -c 'import json,sys; print(json.load(sys.stdin)["origin"]["sha256"])' 2>/dev/null
}
wait_origin() {   # wait_origin SHA: both replicas serve the export with that SHA-256 (10 s)
    i=0
    until [ "$(origin_of 1)" = "$1" ] && [ "$(origin_of 2)" = "$1" ]; do
        i=$((i + 1))
        [ $i -ge 100 ] && return 1
        sleep 0.1
    done
}
topk() {   # topk N: replica N's top-10 for a few sources, without the version numbers
    eval "port=\$PORT$1"
    for s in m0 m5 m33; do
        curl -fsS "http://127.0.0.1:$port/v1/links/predict?source=$s&k=10"
        echo
    done | $PY -c 'import json,sys
for line in filter(str.strip, sys.stdin):
    d = json.loads(line)
    print(d["source"], [(p["target"], p["score"]) for p in d["predictions"]])'
}
wait_origin "$sha2"
check "both replicas serve the export created last (a-second.snap), not the last name" test $? -eq 0
check "both replicas are ready" sh -c "curl -fsS -o /dev/null http://127.0.0.1:$PORT1/readyz &&
    curl -fsS -o /dev/null http://127.0.0.1:$PORT2/readyz"
topk 1 >"$E2E_TMP/topk1.a"
topk 2 >"$E2E_TMP/topk2.a"
check "identical top-10 answers from both replicas" cmp -s "$E2E_TMP/topk1.a" "$E2E_TMP/topk2.a"
check "the answers are real: three lists of 10 predictions" \
    test "$(grep -c "^m[0-9]* \[\(('m[0-9]*', [-0-9.e]*), \)\{9\}" "$E2E_TMP/topk1.a")" -eq 3
# The same model as the source's version 2, answered from its own store.
start_server "$SRC"
curl -fsS "$BASE/v1/links/predict?source=m0&k=10" >"$E2E_TMP/source.json"
stop_server
check "the replicas answer as the source store's version 2" $PY -c 'import json,sys
src = json.load(open(sys.argv[1]))
line = open(sys.argv[2]).readline()
sys.exit(line.strip() != "m0 " + str([(p["target"], p["score"]) for p in src["predictions"]]))' \
    "$E2E_TMP/source.json" "$E2E_TMP/topk1.a"

# ---- a third export, a damaged one and one still being written ----
sleep 1.1
train 3
"$WEFT" snapshots export 3 "$E2E_TMP/third.snap" --store "$SRC" >/dev/null
# A damaged copy of the newest export (one byte flipped in the middle of its blobs; moved in
# whole, as a writer should) and the start of it under the name of a file being written.
$PY - "$E2E_TMP/third.snap" "$E2E_TMP/damaged.snap" <<'EOF'
import sys
data = bytearray(open(sys.argv[1], "rb").read())
data[len(data) // 2] ^= 0xFF
open(sys.argv[2], "wb").write(data)
EOF
mv "$E2E_TMP/damaged.snap" "$EXP/d-damaged.snap"
head -c 5000 "$E2E_TMP/third.snap" >"$EXP/e-partial.snap.tmp"
sha3=$(export_to 3 c-third.snap)
wait_origin "$sha3"
check "a new export: both replicas serve it within 10 s" test $? -eq 0
sleep 1   # five more looks
topk 1 >"$E2E_TMP/topk1.b"
topk 2 >"$E2E_TMP/topk2.b"
check "identical top-10 answers again" cmp -s "$E2E_TMP/topk1.b" "$E2E_TMP/topk2.b"
check "and they changed with the version" sh -c "! cmp -s '$E2E_TMP/topk1.a' '$E2E_TMP/topk1.b'"
for n in 1 2; do
    check "replica $n: the damaged export reported once" \
        test "$(grep -c 'skipping d-damaged.snap' "$E2E_TMP/sync$n.log")" -eq 1
    check "replica $n: the report says what is wrong" \
        grep -q 'skipping d-damaged.snap: .*\(CRC-32\|SHA-256\|header\|damaged\)' "$E2E_TMP/sync$n.log"
    check "replica $n: the file being written is not looked at" \
        sh -c "! grep -q e-partial '$E2E_TMP/sync$n.log'"
    check "replica $n: its store holds 3 versions: nothing of the damaged file" \
        test "$("$WEFT" snapshots list --store "$E2E_TMP/r$n" --json |
            $PY -c 'import json,sys; print(len(json.load(sys.stdin)["snapshots"]))')" -eq 3
done
check "the damaged file is still there, untouched" test -f "$EXP/d-damaged.snap"

# ---- taking the newest export away brings the one before back ----
rm "$EXP/c-third.snap"
wait_origin "$sha2"
check "c-third.snap removed: both replicas serve a-second.snap again" test $? -eq 0
topk 1 >"$E2E_TMP/topk1.c"
check "the answers are those of before" cmp -s "$E2E_TMP/topk1.a" "$E2E_TMP/topk1.c"

# ---- SIGTERM ----
for n in 1 2; do
    eval "pid=\$SYNC$n"
    kill -TERM "$pid"
    wait "$pid"
    check "replica $n: sync exits 0 on SIGTERM" test $? -eq 0
    check "replica $n: it says it stopped on request" grep -q "stopped on request" "$E2E_TMP/sync$n.log"
    eval "pid=\$SERVE$n"
    kill -TERM "$pid"
    wait "$pid"
    check "replica $n: the store verifies" "$WEFT" snapshots verify --store "$E2E_TMP/r$n"
done

# ---- a restart imports nothing twice; --once; bad arguments ----
"$WEFT" sync --from "$EXP" --store "$E2E_TMP/r1" --once >"$E2E_TMP/sync1-again.log" 2>&1
check "restarted sync (--once): exit 0" test $? -eq 0
check "restarted sync: the files it imported are known by their origin" \
    sh -c "grep -q 'a-second.snap: already stored' '$E2E_TMP/sync1-again.log' &&
        ! grep -q 'imported ' '$E2E_TMP/sync1-again.log'"
check "restarted sync: the damaged file is reported again, once" \
    test "$(grep -c 'skipping d-damaged.snap' "$E2E_TMP/sync1-again.log")" -eq 1
"$WEFT" sync --from "$E2E_TMP/no-such-dir" --store "$E2E_TMP/r3" --once >"$E2E_TMP/nodir.log" 2>&1
check "--once with an unreadable --from: exit 1, said why" \
    sh -c "[ $? -eq 1 ] && grep -q 'cannot read .*no-such-dir' '$E2E_TMP/nodir.log'"
"$WEFT" sync --from "$EXP" >/dev/null 2>&1
check "no --store: exit 2" test $? -eq 2
"$WEFT" sync --from "$EXP" --store "$E2E_TMP/r3" --interval 5x >/dev/null 2>&1
check "a bad --interval: exit 2" test $? -eq 2
"$WEFT" sync --help >"$E2E_TMP/help.txt"
check "--help lists every flag with its default" sh -c "grep -q -- '--from DIR' '$E2E_TMP/help.txt' &&
    grep -q -- '--store DIR' '$E2E_TMP/help.txt' && grep -q -- '--interval DURATION.*' '$E2E_TMP/help.txt' &&
    grep -q 'default 10s' '$E2E_TMP/help.txt' && grep -q -- '--keep N' '$E2E_TMP/help.txt' &&
    grep -q 'default 2; 0 keeps all' '$E2E_TMP/help.txt' && grep -q -- '--once' '$E2E_TMP/help.txt'"
finish
