#!/bin/sh
# gcn-link: GCN layers mix node embeddings, a dot or DistMult decoder scores links, evaluated
# like the link models. On Cora with features (tests/data/cora; the graph auto-encoder setting
# of Kipf & Welling 2016, who report AUC 0.910 / AP 0.920 after 200 epochs of their full
# loss) a short run of 100 epochs must already clear AUC and AP 0.85 against sampled
# non-edges and beat popularity; the full bar (>= 0.90 with the defaults) is checked by make
# bench. On the typed WN18RR slice (Dettmers et al. 2018; tests/data/README.md) the DistMult
# decoder over a learned input must learn: filtered MRR far above a random ranking (about
# ln(n)/n < 0.003 here). It does not beat popularity there (measured: 0.10 after 100 epochs,
# 0.13 at best with wider layers and dropout, against 0.156), which DEVELOPERS.md records:
# for typed relations the plain DistMult and ComplEx models are the better choice.
. "$TOP/tests/e2e/lib.sh"
C="$TOP/tests/data/cora"
W="$TOP/tests/data/wn18rr-slice"

"$WEFT" train --store "$E2E_TMP/cora" --model gcn-link --undirected --edges "$C/edges.tsv" \
    --features "$C/features.tsv" --holdout 0.05,0.1 --epochs 100 --quiet \
    --report "$E2E_TMP/cora.json" >"$E2E_TMP/cora.out" 2>&1
check "gcn-link on Cora with features trains and stores" test $? -eq 0
check "gcn-link on Cora: test AUC and AP >= 0.85, above popularity" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
t, p = r["test"], r["baselines"]["popularity"]
print("AUC %.4f AP %.4f (popularity %.4f %.4f)" % (t["auc"], t["ap"], p["auc"], p["ap"]))
assert t["auc"] >= 0.85 and t["ap"] >= 0.85 and t["auc"] > p["auc"] + 0.2
assert r["model"]["kind"] == "gcn-link" and r["model"]["hyper"]["decoder"] == "dot"
assert r["model"]["input"] == "features" and len(r["curve"]) == 100
' "$E2E_TMP/cora.json"

# The stored decoder view serves like any link model.
start_server "$E2E_TMP/cora"
curl -fsS "$BASE/v1/links/predict?source=n0&k=5" >"$E2E_TMP/pred.json" 2>"$E2E_TMP/curl.err"
check "gcn-link snapshot answers /v1/links/predict with probabilities" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
items = d.get("results") or d.get("predictions") or d.get("links")
assert items and len(items) == 5, d
assert all(0.0 <= it["probability"] <= 1.0 for it in items), items
' "$E2E_TMP/pred.json"
stop_server

# --force: this model does not beat popularity here (see above), so the gate refuses it.
"$WEFT" train --store "$E2E_TMP/wn" --model gcn-link --decoder distmult --edges "$W/train.tsv" \
    --valid "$W/valid.tsv" --test "$W/test.tsv" --epochs 100 --quiet --force \
    --report "$E2E_TMP/wn.json" >"$E2E_TMP/wn.out" 2>&1
check "gcn-link with a DistMult decoder on typed relations trains (learned input)" test $? -eq 0
check "gcn-link DistMult: filtered test MRR far above a random ranking" /usr/bin/python3 -c '
import json, sys
r = json.load(open(sys.argv[1]))
m, p = r["test"]["mrr"], r["baselines"]["popularity"]["mrr"]
print("MRR %.4f popularity %.4f" % (m, p))
assert r["model"]["input"] == "embedding" and r["model"]["hyper"]["decoder"] == "distmult"
assert m >= 0.05, m
assert len(r["per_relation"]) > 1
' "$E2E_TMP/wn.json"
finish
