#!/bin/sh
# GCN node classification on Cora (tests/data/cora: Sen et al. 2008, with the standard
# semi-supervised split of Yang, Cohen & Salakhutdinov 2016; provenance in
# tests/data/README.md), trained with the defaults, which follow Kipf & Welling 2017 (2 layers,
# 16 hidden, dropout 0.5, L2 5e-4 on the first layer, Adam 0.01, 200 epochs, window 10).
# The paper reports 81.5% test accuracy; the bar is a mean of at least 81.0% over 10
# seeds. Label propagation is reported beside it (paper: 68.0%). Also: the report's shape,
# bad labels and splits are refused with file and line and leave the store as it was.
. "$TOP/tests/e2e/lib.sh"
D="$TOP/tests/data/cora"
S="$E2E_TMP/store"

# --force: ten seeds into one store; the gate would refuse a seed that falls 0.01 below the
# live one, and this test measures every seed (the gate has its own test, test_gate.sh).
gcn() {   # gcn SEED [extra options]
    seed=$1
    shift
    "$WEFT" train --store "$S" --force --model gcn --edges "$D/edges.tsv" --features "$D/features.tsv" \
        --labels "$D/labels.tsv" --split "$D/split.tsv" --seed "$seed" --quiet \
        --report "$E2E_TMP/report.$seed.json" "$@" >"$E2E_TMP/out.$seed" 2>&1
}

ok=0
for seed in 1 2 3 4 5 6 7 8 9 10; do
    gcn $seed && ok=$((ok + 1))
done
check "gcn: 10 seeds train and store" test $ok -eq 10
check "gcn: mean test accuracy over 10 seeds >= 81.0% (Kipf & Welling 2017: 81.5%)" \
    /usr/bin/python3 -c '
import json, statistics, sys
reps = [json.load(open(f)) for f in sys.argv[1:]]
acc = [r["test"]["accuracy"] for r in reps]
lp = [r["baselines"]["label_propagation"]["accuracy"] for r in reps]
maj = reps[0]["baselines"]["majority"]["accuracy"]
print("gcn %.4f +- %.4f over %d seeds; label propagation %.4f; majority %.4f"
      % (statistics.mean(acc), statistics.pstdev(acc), len(acc), lp[0], maj))
assert statistics.mean(acc) >= 0.810, acc
# Label propagation uses no seed: the same figure every run. Sanity band around the
# 68.0% the paper reports for it (their implementation differs; ours matches scikit-learn,
# tests/reference/test_gcn_reference.c).
assert len(set(lp)) == 1 and 0.60 <= lp[0] <= 0.80, lp
assert all(r["beats_baselines"] for r in reps)
' "$E2E_TMP"/report.*.json

check "gcn: report has model, test, valid, baselines, curve; metrics per class and ECE" \
    /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
for k in ("model", "test", "valid", "baselines", "curve"):
    assert k in r, k
assert r["model"]["kind"] == "gcn" and r["model"]["input"] == "features"
t = r["test"]
assert t["nodes"] == 1000 and r["valid"]["nodes"] == 500, (t["nodes"], r["valid"]["nodes"])
for k in ("accuracy", "macro_f1", "ece", "log_loss", "per_class", "confusion"):
    assert k in t, k
assert set(r["baselines"]) == {"majority", "label_propagation"}
m = t["confusion"]["matrix"]
assert sum(map(sum, m)) == 1000 and len(m) == 7
assert abs(sum(m[i][i] for i in range(7)) / 1000 - t["accuracy"]) < 1e-9
assert len(r["curve"]) == r["model"]["epochs_run"] and "valid_loss" in r["curve"][0]
assert r["split"]["train"] == 140 and r["split"]["method"] == "file"
' "$E2E_TMP/report.1.json"

# Learned input instead of features, and the other normalisation and activation: trains and
# still beats the majority class (without features, accuracy rests on the graph alone:
# measured 66%, below label propagation's 75%, so the gate refuses it: --force).
gcn 1 --dim 32 --norm row --activation sigmoid --layers 3 --bias --epochs 50 \
    && "$WEFT" train --store "$E2E_TMP/emb" --model gcn --edges "$D/edges.tsv" \
        --labels "$D/labels.tsv" --split "$D/split.tsv" --quiet --force \
        --report "$E2E_TMP/emb.json" >"$E2E_TMP/emb.out" 2>&1
check "gcn: learned input embedding, row norm, sigmoid, 3 layers, bias all train" test $? -eq 0
check "gcn without features beats the majority class" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
assert r["model"]["input"] == "embedding"
print("embedding input: %.4f, majority %.4f" % (r["test"]["accuracy"],
      r["baselines"]["majority"]["accuracy"]))
assert r["test"]["accuracy"] > r["baselines"]["majority"]["accuracy"] + 0.2
' "$E2E_TMP/emb.json"

# Bad input: a label for an unknown node, a split naming an unlabelled node. Each error names
# file and line; the store keeps its versions.
before=$(ls -l "$S"/data.mdb | awk '{print $5}')
printf 'n0\tc3\nnobody\tc1\n' >"$E2E_TMP/bad_labels.tsv"
"$WEFT" train --store "$S" --model gcn --edges "$D/edges.tsv" --labels "$E2E_TMP/bad_labels.tsv" \
    --quiet >"$E2E_TMP/bad1.out" 2>&1
rc=$?
check "unknown node in labels: exit 1" test $rc -eq 1
check "unknown node in labels: file, line and field named" \
    grep -q "bad_labels.tsv:2: field 1 (node): unknown node 'nobody'" "$E2E_TMP/bad1.out"
printf 'n0\tc3\nn1\tc4\n' >"$E2E_TMP/few_labels.tsv"
printf 'n0\ttrain\nn1\ttest\nn2\tvalid\n' >"$E2E_TMP/bad_split.tsv"
"$WEFT" train --store "$S" --model gcn --edges "$D/edges.tsv" --labels "$E2E_TMP/few_labels.tsv" \
    --split "$E2E_TMP/bad_split.tsv" --quiet >"$E2E_TMP/bad2.out" 2>&1
check "split names an unlabelled node: error with file and line" \
    grep -q "bad_split.tsv:3: field 1 (node): node 'n2' has no label" "$E2E_TMP/bad2.out"
"$WEFT" train --store "$S" --model gcn --edges "$D/edges.tsv" --quiet >"$E2E_TMP/bad3.out" 2>&1
check "gcn without --labels: usage error" test $? -eq 2
"$WEFT" train --store "$S" --model distmult --edges "$D/edges.tsv" --labels "$D/labels.tsv" \
    --quiet >"$E2E_TMP/bad4.out" 2>&1
check "--labels with a link model: usage error" test $? -eq 2
check "store unchanged by the refused runs: 11 versions, the 11th live" /usr/bin/python3 -c '
import subprocess, sys
def dump(db):
    out = subprocess.run(["mdb_dump", "-s", db, sys.argv[1]], capture_output=True, text=True,
                         check=True).stdout.split("HEADER=END")[1].split("DATA=END")[0].split()
    return dict(zip(out[0::2], out[1::2]))
head, catalog = dump("head"), dump("catalog")
live = int(head["6c697665"], 16)   # key "live", value a big-endian u64
print("versions", len(catalog), "live", live)
assert len(catalog) == 11 and live == 11
' "$S"
finish
