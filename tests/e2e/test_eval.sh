#!/bin/sh
# weft train with train / valid / test files and weft eval of the stored snapshot: on a slice
# of WN18RR (tests/data/wn18rr-slice, provenance in tests/data/README.md) eval gives the test
# figures train reported, the popularity baseline matches a brute-force numpy computation
# over the three files, and names eval does not know fail with file and line. On karate
# (one relation, undirected) AUC-ROC and AP agree between train and eval too.
. "$TOP/tests/e2e/lib.sh"
SLICE="$TOP/tests/data/wn18rr-slice"
STORE="$E2E_TMP/store"

# 1. Train on the three files (short: the point is the bookkeeping, not the quality).
"$WEFT" train --store "$STORE" --edges "$SLICE/train.tsv" --valid "$SLICE/valid.tsv" \
    --test "$SLICE/test.tsv" --model distmult --dim 32 --epochs 8 --threads 2 --quiet \
    --report "$E2E_TMP/report.json" >"$E2E_TMP/train.out" 2>&1
check "train with --valid and --test exits 0" test $? -eq 0
check "train names the split" grep -q "split: 4960 training, 108 validation, 136 test edges, from files" \
    "$E2E_TMP/train.out"
check "train prints per-relation rows" grep -q "_has_part" "$E2E_TMP/train.out"
check "report has valid, per relation, baselines, curve" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
for k in ("model", "test", "valid", "per_relation", "baselines", "curve"):
    assert k in r, k
assert r["model"]["kind"] == "distmult", r["model"]
assert r["valid"]["queries"] == 216 and r["test"]["queries"] == 272, (r["valid"], r["test"])
assert "_has_part" in r["per_relation"] and "_has_part" in r["per_relation_baselines"]["popularity"]
assert sum(m["queries"] for m in r["per_relation"].values()) == 272
assert "auc" not in r["test"], "AUC is for one-relation graphs"
assert r["split"]["method"] == "files" and r["split"]["test"] == 136
assert any("valid_mrr" in e for e in r["curve"]), r["curve"]
assert 1 <= len(r["curve"]) <= 8' "$E2E_TMP/report.json"

# 2. The popularity baseline recomputed here from the three files with numpy: filter every
#    known triple, count degrees over train + valid (every known edge that is not a test
#    edge), ties as the mean of the optimistic and pessimistic rank.
/usr/bin/python3 - "$SLICE" "$E2E_TMP/report.json" >"$E2E_TMP/pop.check" <<'PY'
import json, sys
import numpy as np
d = sys.argv[1]
parts = {p: [tuple(l.split("\t")) for l in open("%s/%s.tsv" % (d, p)).read().splitlines() if l]
         for p in ("train", "valid", "test")}
nodes = sorted({x for p in parts.values() for (h, r, t) in p for x in (h, t)})
rels = sorted({r for p in parts.values() for (h, r, t) in p})
ni = {n: i for i, n in enumerate(nodes)}
ri = {r: i for i, r in enumerate(rels)}
ids = lambda rows: sorted({(ni[h], ri[r], ni[t]) for h, r, t in rows})
known = set(ids(parts["train"] + parts["valid"] + parts["test"]))
test = ids(parts["test"])
counted = known - set(test)
n, R = len(nodes), len(rels)
indeg = np.zeros((R, n)); outdeg = np.zeros((R, n))
for s, r, t in counted:
    indeg[r, t] += 1; outdeg[r, s] += 1
has_loops = any(s == t for s, r, t in known)
def rank(scores, target, banned, anchor):
    keep = np.ones(n, bool); keep[list(banned)] = False
    if not has_loops: keep[anchor] = False
    keep[target] = True
    o = scores[keep]
    return 1 + np.sum(o > scores[target]) + (np.sum(o == scores[target]) - 1) / 2
ranks = []
for s, r, t in test:
    ranks.append(rank(indeg[r], t, {b for (a, q, b) in known if a == s and q == r}, s))
    ranks.append(rank(outdeg[r], s, {a for (a, q, b) in known if b == t and q == r}, t))
ranks = np.array(ranks)
want = {"mrr": np.mean(1 / ranks), "mean_rank": np.mean(ranks), "hits@1": np.mean(ranks <= 1),
        "hits@3": np.mean(ranks <= 3), "hits@10": np.mean(ranks <= 10)}
got = json.load(open(sys.argv[2]))["baselines"]["popularity"]
bad = {k: (v, got[k]) for k, v in want.items() if abs(v - got[k]) > 1e-9 * max(1, abs(v))}
print("ok" if not bad else "numpy, weft: %s" % bad)
PY
check "popularity figures match a numpy brute force" grep -qx ok "$E2E_TMP/pop.check"

# 3. weft eval of the live snapshot on the same test file: the figures train reported.
"$WEFT" eval --store "$STORE" --test "$SLICE/test.tsv" --json >"$E2E_TMP/eval.json" \
    2>"$E2E_TMP/eval.err"
check "eval exits 0" test $? -eq 0
same_figures() {   # same_figures REPORT EVAL KEY...
    /usr/bin/python3 - "$@" <<'PY'
import json, sys
a, b = json.load(open(sys.argv[1])), json.load(open(sys.argv[2]))
def close(x, y, path):
    if isinstance(x, dict):
        assert set(x) == set(y), "%s: keys %s vs %s" % (path, sorted(x), sorted(y))
        for k in x:
            close(x[k], y[k], path + "." + k)
    else:
        assert abs(x - y) <= 1e-9 * max(1, abs(x)), "%s: %r vs %r" % (path, x, y)
for key in sys.argv[3:]:
    close(a[key], b[key], key)
PY
}
check "eval gives train's test figures" same_figures "$E2E_TMP/report.json" \
    "$E2E_TMP/eval.json" test per_relation baselines per_relation_baselines
"$WEFT" eval --store "$STORE" --version 1 --threads 1 --test "$SLICE/test.tsv" --json \
    >"$E2E_TMP/eval1.json" 2>&1
check "eval --version 1 --threads 1 gives the same figures" same_figures "$E2E_TMP/eval.json" \
    "$E2E_TMP/eval1.json" test per_relation baselines
"$WEFT" eval --store "$STORE" --test "$SLICE/test.tsv" >"$E2E_TMP/eval.txt" 2>&1
check "eval prints a table beside the baseline" grep -q "MRR .*|" "$E2E_TMP/eval.txt"

# 4. Names the snapshot does not know: exit 1, naming file and line.
{ head -n 2 "$SLICE/test.tsv"; printf '08524735\t_has_part\tno_such_synset\n'; } >"$E2E_TMP/bad_node.tsv"
"$WEFT" eval --store "$STORE" --test "$E2E_TMP/bad_node.tsv" >"$E2E_TMP/bad_node.out" 2>&1
check "unknown node: exit 1" test $? -eq 1
check "unknown node: file, line and field" \
    grep -qF "bad_node.tsv:3: field 3 (target): unknown node 'no_such_synset'" "$E2E_TMP/bad_node.out"
printf '08524735\t_no_such_relation\t08524735\n' >"$E2E_TMP/bad_rel.tsv"
"$WEFT" eval --store "$STORE" --test "$E2E_TMP/bad_rel.tsv" >"$E2E_TMP/bad_rel.out" 2>&1
check "unknown relation: exit 1 naming file and line" \
    sh -c 'test $1 -eq 1 && grep -qF "bad_rel.tsv:1: field 2 (relation)" "$2"' sh $? "$E2E_TMP/bad_rel.out"
"$WEFT" eval --store "$STORE" --version 9 --test "$SLICE/test.tsv" >"$E2E_TMP/v9.out" 2>&1
check "absent version: exit 1" test $? -eq 1
"$WEFT" eval --store "$STORE" >"$E2E_TMP/usage.out" 2>&1
check "eval without --test: exit 2" test $? -eq 2

# 5. A leak is reported: a test file holding a training edge.
{ cat "$SLICE/test.tsv"; head -n 3 "$SLICE/train.tsv"; } >"$E2E_TMP/leaky.tsv"
# (--force: one epoch of dimension 8 is not meant to pass the gate; the leak report is.)
"$WEFT" train --store "$E2E_TMP/store2" --edges "$SLICE/train.tsv" --test "$E2E_TMP/leaky.tsv" \
    --dim 8 --epochs 1 --quiet --force >"$E2E_TMP/leak.out" 2>&1
check "leaky test file trains (exit 0)" test $? -eq 0
check "leak is reported" grep -q "3 test edges are also training edges" "$E2E_TMP/leak.out"
"$WEFT" train --store "$E2E_TMP/store2" --edges "$SLICE/train.tsv" --valid "$SLICE/valid.tsv" \
    >"$E2E_TMP/novalid.out" 2>&1
check "--valid without --test: exit 2" test $? -eq 2
"$WEFT" train --store "$E2E_TMP/store2" --edges "$SLICE/train.tsv" --test "$SLICE/test.tsv" \
    --holdout 0.1 >"$E2E_TMP/both.out" 2>&1
check "--holdout with --test: exit 2" test $? -eq 2

# 6. One relation, undirected (karate): AUC-ROC and AP beside the baseline, the same in eval.
/usr/bin/python3 - "$TOP/tests/data/karate/edges.tsv" "$E2E_TMP" <<'PY'
import sys
rows = [l for l in open(sys.argv[1]).read().splitlines() if l and not l.startswith("#")]
out = {k: open("%s/k_%s.tsv" % (sys.argv[2], k), "w") for k in ("train", "valid", "test")}
for i, l in enumerate(rows):   # every 10th edge for testing, every 10th + 5 for validation
    out["test" if i % 10 == 0 else "valid" if i % 10 == 5 else "train"].write(l + "\n")
PY
"$WEFT" train --store "$E2E_TMP/karate" --edges "$E2E_TMP/k_train.tsv" \
    --valid "$E2E_TMP/k_valid.tsv" --test "$E2E_TMP/k_test.tsv" --undirected --dim 16 \
    --epochs 20 --quiet --report "$E2E_TMP/k_report.json" >"$E2E_TMP/k_train.out" 2>&1
check "karate from files trains" test $? -eq 0
check "karate prints AUC-ROC beside the baseline" grep -q "AUC-ROC .*|" "$E2E_TMP/k_train.out"
check "report has auc and ap for model and baseline" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
for m in (r["test"], r["valid"], r["baselines"]["popularity"]):
    assert 0 <= m["auc"] <= 1 and 0 < m["ap"] <= 1, m
assert r["test"]["queries"] == 16 and r["test"]["negatives"] == 16, r["test"]' "$E2E_TMP/k_report.json"
"$WEFT" eval --store "$E2E_TMP/karate" --test "$E2E_TMP/k_test.tsv" --json \
    >"$E2E_TMP/k_eval.json" 2>&1
check "karate eval gives train's figures, AUC and AP included" same_figures \
    "$E2E_TMP/k_report.json" "$E2E_TMP/k_eval.json" test baselines
finish
