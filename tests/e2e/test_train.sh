#!/bin/sh
# weft train and weft inspect from the command line: a good run on the karate club graph
# (Zachary 1977, tests/data/karate), gzip input, the report file, and bad input that must
# fail with file and line while the store keeps exactly what it had.
. "$TOP/tests/e2e/lib.sh"
KARATE="$TOP/tests/data/karate/edges.tsv"
STORE="$E2E_TMP/store"

catalog_entries() {
    mdb_stat -s catalog "$STORE" | sed -n 's/^ *Entries: //p'
}

# 1. inspect: figures computed independently here with scipy over the same file.
"$WEFT" inspect --json "$KARATE" >"$E2E_TMP/inspect.json"
check "inspect exits 0" test $? -eq 0
/usr/bin/python3 - "$KARATE" "$E2E_TMP/inspect.json" >"$E2E_TMP/inspect.check" <<'PY'
import json, sys
import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
pairs = [l.split("\t") for l in open(sys.argv[1]).read().splitlines() if l and not l.startswith("#")]
names = sorted({x for p in pairs for x in p})
idx = {n: i for i, n in enumerate(names)}
r = [idx[a] for a, b in pairs]; c = [idx[b] for a, b in pairs]
a = coo_matrix((np.ones(len(r)), (r, c)), shape=(len(names),) * 2).tocsr()
n_comp, lab = connected_components(a, directed=True, connection="weak")
sym = ((a + a.T) > 0).astype(int)
deg = np.asarray(sym.sum(axis=1)).ravel()
got = json.load(open(sys.argv[2]))
want = {"nodes": len(names), "edges": len(set(map(tuple, pairs))), "components": n_comp,
        "largest": int(np.bincount(lab).max()), "min": int(deg.min()), "max": int(deg.max()),
        "median": float(np.median(deg))}
have = {"nodes": got["nodes"], "edges": got["edges"], "components": got["components"]["count"],
        "largest": got["components"]["largest"], "min": got["degree"]["min"],
        "max": got["degree"]["max"], "median": got["degree"]["median"]}
print("ok" if want == have else "want %s\nhave %s" % (want, have))
PY
check "inspect figures match scipy" grep -qx ok "$E2E_TMP/inspect.check"

# 2. A good training run writes version 1, live, and a report. The default holdout keeps a
#    validation share, so training may stop early and keep its best epoch.
# --force: karate's few held-out edges cannot show a model beating popularity reliably;
# this test is about the command line and the report, and the gate has its own (test_gate.sh).
"$WEFT" train --store "$STORE" --edges "$KARATE" --undirected --dim 16 --epochs 30 --quiet \
    --force --report "$E2E_TMP/report.json" >"$E2E_TMP/train.out" 2>&1
check "train exits 0" test $? -eq 0
check "train prints MRR beside the baseline" grep -q "MRR .*|" "$E2E_TMP/train.out"
check "train prints AUC-ROC for a one-relation graph" grep -q "AUC-ROC .*|" "$E2E_TMP/train.out"
check "train says version 1 is live" grep -q "snapshot 1 .*live" "$E2E_TMP/train.out"
check "catalog holds one snapshot" test "$(catalog_entries)" = 1
check "report has model, test, valid, baselines, curve" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
assert {"model", "test", "valid", "per_relation", "baselines", "curve"} <= set(r), r.keys()
assert 0 < r["test"]["mrr"] <= 1 and 0 <= r["test"]["hits@10"] <= 1
assert 0 <= r["test"]["auc"] <= 1 and 0 < r["test"]["ap"] <= 1
assert 0 < r["valid"]["mrr"] <= 1
assert "mrr" in r["baselines"]["popularity"] and "auc" in r["baselines"]["popularity"]
assert r["split"] == {"method": "holdout", "train": 132, "valid": 8, "test": 16, "seed": 1,
                      "holdout": [0.05, 0.1]}, r["split"]
run = r["model"]
assert len(r["curve"]) == run["epochs_run"] <= 30 and 1 <= run["best_epoch"] <= run["epochs_run"]
assert all("valid_mrr" in e for e in r["curve"])' "$E2E_TMP/report.json"

# A test share alone: no validation, so every epoch runs.
"$WEFT" train --store "$STORE" --edges "$KARATE" --undirected --dim 16 --epochs 30 --quiet \
    --holdout 0.1 --report "$E2E_TMP/report2.json" >"$E2E_TMP/train2.out" 2>&1
check "--holdout 0.1 trains every epoch without validation" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
assert r["valid"] == {} and r["split"]["valid"] == 0 and r["split"]["test"] == 16, r["split"]
assert len(r["curve"]) == 30 and not any("valid_mrr" in e for e in r["curve"])' "$E2E_TMP/report2.json"
check "catalog holds two snapshots" test "$(catalog_entries)" = 2

# 3. gzip input reads the same graph.
gzip -c "$KARATE" >"$E2E_TMP/edges.tsv.gz"
"$WEFT" train --store "$STORE" --edges "$E2E_TMP/edges.tsv.gz" --undirected --dim 16 \
    --epochs 5 --quiet >"$E2E_TMP/gz.out" 2>&1
check "gzip input trains" grep -q "graph: 34 nodes, 156 edges" "$E2E_TMP/gz.out"
check "catalog holds three snapshots" test "$(catalog_entries)" = 3

# 4. Bad input: error names file and line; the store is left as it was.
cp "$STORE/data.mdb" "$E2E_TMP/before.mdb"
bad_case() {   # bad_case NAME CONTENT EXPECTED-TEXT
    printf "$2" >"$E2E_TMP/$1.tsv"
    "$WEFT" train --store "$STORE" --edges "$E2E_TMP/$1.tsv" --quiet >"$E2E_TMP/$1.out" 2>&1
    rc=$?
    check "$1: exits 1" test "$rc" -eq 1
    check "$1: says '$3'" grep -qF "$3" "$E2E_TMP/$1.out"
}
bad_case columns 'a\tb\nc\td\te\tf\n' "columns.tsv:2:"
bad_case empty_field 'a\tb\n\tc\n' "empty_field.tsv:2: field 1"
bad_case utf8 'a\tb\nc\t\377\n' "utf8.tsv:2:"
bad_case empty_graph '# only a comment\n' "empty graph"
long=$(head -c 1100 /dev/zero | tr '\0' x)
bad_case long_name "a\\tb\\n$long\\tc\\n" "long_name.tsv:2: field 1"
"$WEFT" train --store "$STORE" --edges "$E2E_TMP/absent.tsv" >"$E2E_TMP/absent.out" 2>&1
check "missing file: exits 1 naming it" grep -q "absent.tsv: No such file" "$E2E_TMP/absent.out"
"$WEFT" train --store "$STORE" --edges "$KARATE" --dim 0 >"$E2E_TMP/usage.out" 2>&1
check "bad option value: exits 2" test $? -eq 2
"$WEFT" train --store "$STORE" --edges "$KARATE" --holdout 0.1,x >"$E2E_TMP/usage2.out" 2>&1
check "bad --holdout: exits 2" test $? -eq 2
check "catalog still holds three snapshots" test "$(catalog_entries)" = 3
check "store file unchanged by the failures" cmp -s "$STORE/data.mdb" "$E2E_TMP/before.mdb"
finish
