#!/bin/sh
# The gate and the two model parts of a snapshot (DESIGN.md: at most one link model and one
# label model over one node table), on Cora (tests/data/cora, provenance in
# tests/data/README.md):
# - a run that trains one part carries the other over from the live snapshot when the node
#   table is the same, byte for byte, and drops it with a notice when it is not;
# - a model that falls more than the tolerance below the live key metric is stored as
#   rejected with the reason, weft exits 3 and the live snapshot stays; --force promotes it
#   and records that; --no-promote stores it staged;
# - --model dot,gcn trains both parts into one snapshot.
. "$TOP/tests/e2e/lib.sh"
C="$TOP/tests/data/cora"
S="$E2E_TMP/store"

# manifest STORE VERSION EXPR: evaluates EXPR over manifest `m` (decoded from mdb_dump).
manifest() {
    /usr/bin/python3 - "$@" <<'PY'
import json, subprocess, sys
store, version, expr = sys.argv[1], int(sys.argv[2]), sys.argv[3]
out = subprocess.run(["mdb_dump", "-s", "catalog", store], capture_output=True, text=True,
                     check=True).stdout
rows = out.split("HEADER=END")[1].split("DATA=END")[0].split()
cat = {int(k, 16): json.loads(bytes.fromhex(v)) for k, v in zip(rows[0::2], rows[1::2])}
m = cat[version]
print(eval(expr))
PY
}
blob_crc() {   # blob_crc STORE VERSION NAME
    manifest "$1" "$2" "m['blobs']['$3']['crc32']"
}

dot() { "$WEFT" train --store "$S" --edges "$C/edges.tsv" --undirected --quiet "$@"; }
gcn() {
    "$WEFT" train --store "$S" --model gcn --edges "$C/edges.tsv" --features "$C/features.tsv" \
        --labels "$C/labels.tsv" --split "$C/split.tsv" --quiet "$@"
}

dot >"$E2E_TMP/1.out" 2>&1
check "v1: a dot model goes live" test "$(manifest "$S" 1 "m['state']")" = live
gcn >"$E2E_TMP/2.out" 2>&1
check "v2: a GCN goes live" test "$(manifest "$S" 2 "m['state']")" = live
check "v2 carries v1's link model over (said so)" grep -q "snapshot 1's link model is carried over" "$E2E_TMP/2.out"
check "v2: the carried link blobs are v1's, byte for byte (CRC-32 of entity)" \
    test "$(blob_crc "$S" 1 entity)" = "$(blob_crc "$S" 2 entity)"
check "v2 manifest: labels trained in 2, link carried from 1" \
    test "$(manifest "$S" 2 "(m['models']['labels']['trained_in'], m['models']['link']['carried_from'], 'link' in m, 'labels' in m)")" = "(2, 1, True, True)"

start_server "$S"
curl -fsS "$BASE/v1/links/predict?source=n0&k=3" >"$E2E_TMP/links.json"
check "the live snapshot serves links" test $? -eq 0
curl -fsS "$BASE/v1/labels/predict?node=n0" >"$E2E_TMP/labels.json"
check "and labels" test $? -eq 0
stop_server

# A clearly worse link model (one epoch): refused by the gate.
dot --epochs 1 >"$E2E_TMP/3.out" 2>&1
rc=$?
check "worse model: exit status 3" test $rc -eq 3
check "worse model: stored as rejected with the reason" \
    test "$(manifest "$S" 3 "(m['state'], m['gate']['passed'], 'below the live' in m['gate']['reason'])")" = "('rejected', False, True)"
check "worse model: the live snapshot is still 2" grep -q "the live snapshot is unchanged" "$E2E_TMP/3.out"
check "worse model: the store records the reason with the state" \
    test "$(manifest "$S" 3 "'below the live' in m['reason']")" = True
"$WEFT" snapshots promote 3 --store "$S" >"$E2E_TMP/promote3.out" 2>&1
check "a rejected snapshot is not promoted without --force" test $? -ne 0
check "worse model: v2 is still live" test "$(manifest "$S" 2 "m['state']")" = live
dot --epochs 1 --force >"$E2E_TMP/4.out" 2>&1
check "--force: promoted, recorded as forced" \
    test "$(manifest "$S" 4 "(m['state'], m['gate']['passed'], m['gate'].get('forced'))")" = "('live', False, True)"
check "--force: the label model is carried over again" \
    test "$(manifest "$S" 4 "m['models']['labels']['carried_from']")" = 2
dot --no-promote >"$E2E_TMP/5.out" 2>&1
check "--no-promote: stored as staged, v4 stays live" \
    test "$(manifest "$S" 5 "m['state']") $(manifest "$S" 4 "m['state']")" = "staged live"

# A different node table: one more node. The label model cannot follow: dropped, with a notice.
cp "$C/edges.tsv" "$E2E_TMP/more.tsv"
printf 'n0\tnew-node\n' >>"$E2E_TMP/more.tsv"
"$WEFT" train --store "$S" --edges "$E2E_TMP/more.tsv" --undirected --quiet --force \
    >"$E2E_TMP/6.out" 2>&1
check "new node table: the label model is dropped with a notice" \
    grep -q "label model is dropped: its node table differs" "$E2E_TMP/6.out"
check "new node table: v6 has a link model only" \
    test "$(manifest "$S" 6 "(sorted(m['models']), 'labels' in m)")" = "(['link'], False)"

# Both parts in one run.
"$WEFT" train --store "$E2E_TMP/both" --model dot,gcn --edges "$C/edges.tsv" --undirected \
    --features "$C/features.tsv" --labels "$C/labels.tsv" --split "$C/split.tsv" --quiet \
    --report "$E2E_TMP/both.json" >"$E2E_TMP/both.out" 2>&1
check "--model dot,gcn: one run" test $? -eq 0
check "--model dot,gcn: both parts trained in version 1, gate checked both" \
    test "$(manifest "$E2E_TMP/both" 1 "(m['models']['link']['trained_in'], m['models']['labels']['trained_in'], len(m['gate']['checks']), m['state'])")" = "(1, 1, 2, 'live')"
check "--model dot,gcn: the report has both models" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
assert r["models"]["labels"]["metrics"]["test"]["accuracy"] > 0.75
assert r["models"]["link"]["metrics"]["test"]["mrr"] > r["baselines"]["popularity"]["mrr"]' "$E2E_TMP/both.json"
"$WEFT" train --store "$E2E_TMP/both" --model gcn,gcn --edges "$C/edges.tsv" --quiet \
    >"$E2E_TMP/bad.out" 2>&1
check "--model gcn,gcn: usage error" test $? -eq 2
finish
