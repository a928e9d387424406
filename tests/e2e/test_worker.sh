#!/bin/sh
# weft worker: trains when there is no snapshot, not again while the inputs are unchanged,
# again (warm-started) when an input changes or the interval passes; refuses a bad
# configuration with file and line; on SIGTERM during a training run it finishes the run,
# stores a complete snapshot, and stops. Data: Cora edges (tests/data/cora, provenance in
# tests/data/README.md), copied so that the test can change them.
. "$TOP/tests/e2e/lib.sh"
W="$E2E_TMP/w"
mkdir -p "$W"
cp "$TOP/tests/data/cora/edges.tsv" "$W/edges.tsv"
versions() {   # number of snapshots in the store
    mdb_dump -s catalog "$W/store" | sed -n '/HEADER=END/,/DATA=END/p' | grep -c '^ 0000'
}
cat >"$W/worker.conf" <<'CONF'
# a test configuration
store = store
check_every = 1s
keep = 0
[train]
edges = edges.tsv     # relative to this file
undirected = yes
epochs = 5
CONF

"$WEFT" worker --config "$W/worker.conf" --once >"$E2E_TMP/run1.log" 2>&1
check "first run: trains because there is no snapshot" grep -q "training (no snapshot yet)" "$E2E_TMP/run1.log"
check "first run: one snapshot" test "$(versions)" -eq 1
"$WEFT" worker --config "$W/worker.conf" --once >"$E2E_TMP/run2.log" 2>&1
check "unchanged inputs: no training" test "$(versions)" -eq 1
check "unchanged inputs: nothing said about training" sh -c "! grep -q 'training (' '$E2E_TMP/run2.log'"

printf 'n0\tn99\n' >>"$W/edges.tsv"
"$WEFT" worker --config "$W/worker.conf" --once >"$E2E_TMP/run3.log" 2>&1
check "changed input: retrains" grep -q "training (an input changed)" "$E2E_TMP/run3.log"
check "changed input: warm start from the live snapshot" \
    grep -q "warm start from snapshot 1: 2708 of 2708 nodes" "$E2E_TMP/run3.log"
check "changed input: a second snapshot" test "$(versions)" -eq 2

sed 's/^keep = 0/keep = 0\nretrain_every = 1s/' "$W/worker.conf" >"$W/interval.conf"
sleep 2
"$WEFT" worker --config "$W/interval.conf" --once >"$E2E_TMP/run4.log" 2>&1
check "interval passed: retrains" grep -q "training (interval passed)" "$E2E_TMP/run4.log"

# Bad configurations: the file and line, exit 1, nothing trained.
printf 'store = store\nretrain = 1d\n[train]\nedges = edges.tsv\n' >"$W/bad1.conf"
"$WEFT" worker --config "$W/bad1.conf" --once >"$E2E_TMP/bad1.log" 2>&1
check "unknown setting: exit 1" test $? -eq 1
check "unknown setting: file and line named" grep -q "bad1.conf:2: unknown setting" "$E2E_TMP/bad1.log"
printf 'store = store\n[train]\nedges = edges.tsv\nstore = elsewhere\n' >"$W/bad2.conf"
"$WEFT" worker --config "$W/bad2.conf" --once >"$E2E_TMP/bad2.log" 2>&1
check "an option the worker owns under [train]: refused with its line" \
    grep -q "bad2.conf:4: the worker sets this option itself" "$E2E_TMP/bad2.log"
printf 'store = store3\n[train]\nedges = edges.tsv\nno-such-option = 1\n' >"$W/bad3.conf"
"$WEFT" worker --config "$W/bad3.conf" --once >"$E2E_TMP/bad3.log" 2>&1
check "an option weft train does not know: the worker stops with status 1" test $? -eq 1

# SIGTERM in the middle of a training run: the run finishes and is stored; the worker stops.
printf 'n1\tn98\n' >>"$W/edges.tsv"
before=$(versions)
sed 's/^epochs = 5/epochs = 400/' "$W/worker.conf" >"$W/long.conf"
"$WEFT" worker --config "$W/long.conf" >"$E2E_TMP/run5.log" 2>&1 &
pid=$!
i=0
until grep -q "training (" "$E2E_TMP/run5.log" || [ $i -ge 100 ]; do sleep 0.1; i=$((i + 1)); done
sleep 0.5
kill -TERM $pid
wait $pid
rc=$?
check "SIGTERM: the worker exits 0" test $rc -eq 0
check "SIGTERM: it stopped on request after the run" grep -q "stopped on request" "$E2E_TMP/run5.log"
check "SIGTERM: the run in progress was finished and stored" test "$(versions)" -eq $((before + 1))
check "SIGTERM: the store reads back (the newest snapshot verifies through weft eval)" \
    "$WEFT" eval --store "$W/store" --test "$TOP/tests/data/cora/edges.tsv"
finish
