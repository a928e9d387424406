#!/bin/sh
# The label model served end to end: a GCN trained on Cora (tests/data/cora: features, labels
# and the Planetoid split; provenance in tests/data/README.md) in a store of its own, then
# /v1/labels/predict and /v1/labels/explain checked against what is worked out here from the
# data files with /usr/bin/python3: the neighbours and the weights of the normalised adjacency
# D^-1/2 (A + I) D^-1/2 from edges.tsv, the observed label and its part from labels.tsv and
# split.tsv, softmax(logits) against the returned probabilities, and the explanation's terms
# adding up to the logit. Errors: unknown node, missing node, bad k, and the link routes on a
# snapshot without a link model.
set -u
. "$TOP/tests/e2e/lib.sh"

D="$TOP/tests/data/cora"
STORE="$E2E_TMP/store"

# get NAME PATH: body to $E2E_TMP/NAME.json, status code to $STATUS.
get() {
    STATUS=$(curl -sS -o "$E2E_TMP/$1.json" -w '%{http_code}' "$BASE$2")
}

# answered NAME STATUS EXPR: the last response had STATUS and EXPR (Python over the parsed
# body d) holds.
answered() {
    [ "$STATUS" = "$2" ] && [ "$(json_get "$E2E_TMP/$1.json" "($3)")" = True ]
}

# is_error NAME STATUS CODE [TEXT]: a JSON error with CODE, message and hint, TEXT in the hint.
is_error() {
    answered "$1" "$2" 'd["error"]["code"] == "'"$3"'" and len(d["error"]["message"]) > 0
        and "'"${4:-}"'" in d["error"]["hint"] and d["version"] == 1'
}

# With --bias, so that the bias is one of the terms (tests/e2e/test_openapi.sh serves a
# model without one).
check "weft train --model gcn on Cora (features, labels, split, bias; 50 epochs)" \
    "$WEFT" train --quiet --store "$STORE" --model gcn --edges "$D/edges.tsv" \
    --features "$D/features.tsv" --labels "$D/labels.tsv" --split "$D/split.tsv" \
    --bias --epochs 50 --seed 3 --threads 1
start_server "$STORE" || finish
check "the server log says it serves a label model only" \
    grep -q "serving version 1 (label model only)" "$E2E_TMP/server.log"

# ---- predictions and explanations against the data files ----
check "predict and explain agree with the data files, softmax and the sum of terms" \
    /usr/bin/python3 - "$BASE" "$D" <<'EOF'
import json, math, sys, urllib.request

base, d = sys.argv[1], sys.argv[2]

def rows(name):
    with open(f"{d}/{name}") as f:
        return [l.rstrip("\n").split("\t") for l in f if l.strip() and not l.startswith("#")]

nbr = {}
for a, b in rows("edges.tsv"):
    nbr.setdefault(a, set()).add(b)
    nbr.setdefault(b, set()).add(a)
label = dict(rows("labels.tsv"))
part = dict(rows("split.tsv"))
# A + I: every node joined to itself; the degree counts the node itself once.
deg = {v: len(nbr[v] | {v}) for v in nbr}
classes = set(label.values())

def fetch(path):
    return json.load(urllib.request.urlopen(base + path))

CAUTION = ("Probabilistic output of a model trained on past labels: it can be wrong and can "
           "encode bias in those labels. Have a person review it before acting on it; local "
           "law and data-protection rules decide what it may be used for.")
hub = max(sorted(nbr), key=lambda v: deg[v])
nodes = sorted(nbr)[::97] + [hub]
bad = []
for v in nodes:
    p = fetch(f"/v1/labels/predict?node={v}")
    e = fetch(f"/v1/labels/explain?node={v}&k=1000")
    probs = {c["class"]: c["probability"] for c in p["classes"]}
    def need(ok, what):
        if not ok:
            bad.append(f"{v}: {what}")
    need(p["node"] == v and e["node"] == v, "node echoed")
    need(p["caution"] == CAUTION and e["caution"] == CAUTION, "caution")
    need(p["snapshot"] == 1 and e["snapshot"] == 1 and p["version"] == 1, "snapshot version")
    need(set(probs) == classes and len(p["classes"]) == len(classes), "every class once")
    need(abs(sum(probs.values()) - 1) < 1e-5, "probabilities sum to 1")
    ps = [c["probability"] for c in p["classes"]]
    need(ps == sorted(ps, reverse=True), "classes sorted by probability")
    need(p["predicted"] == p["classes"][0]["class"] and p["probability"] == ps[0],
         "predicted is the most probable")
    want_obs = {"class": label[v], "part": part.get(v, "none")} if v in label else None
    need(p["observed"] == want_obs, f"observed {p['observed']} != {want_obs}")
    # softmax(logits) is the predicted distribution (within 1e-5)
    lg = e["logits"]
    m = max(lg.values())
    z = sum(math.exp(x - m) for x in lg.values())
    need(all(abs(math.exp(lg[c] - m) / z - probs[c]) < 1e-5 for c in classes),
         "softmax(logits) != probabilities")
    need(e["probabilities"] == probs and e["predicted"] == p["predicted"],
         "explain and predict agree")
    # the row of A': the node itself and its neighbours in edges.tsv, with the weights of
    # D^-1/2 (A + I) D^-1/2
    listed = {n["node"]: n for n in e["neighbours"]}
    need(set(listed) == nbr[v] - {v} and e["others"]["count"] == 0, "neighbours are the row")
    need(abs(e["self"]["weight"] - 1 / deg[v]) < 1e-6, "self weight 1/deg")
    need(all(abs(n["weight"] - 1 / math.sqrt(deg[v] * deg[u])) < 1e-6
             for u, n in listed.items()), "neighbour weights")
    # every class: self + neighbours + bias == logit (1e-4)
    bias = e["bias"]
    need(bias is not None and set(bias) == classes and any(x != 0 for x in bias.values()),
         "the bias of every class")
    bias = bias or {}
    for c in classes:
        total = (e["self"]["contribution"][c] + sum(n["contribution"][c] for n in listed.values())
                 + bias.get(c, 0.0))
        need(abs(total - lg[c]) < 1e-4, f"terms of {c} sum to {total}, logit {lg[c]}")
    pred = e["predicted"]
    pushes = [n["contribution_to_predicted"] for n in e["neighbours"]]
    need(pushes == sorted(pushes, reverse=True), "neighbours by contribution, largest first")
    need(all(n["contribution_to_predicted"] == n["contribution"][pred] for n in e["neighbours"]),
         "contribution_to_predicted is the predicted class's")
    need(abs(e["check"]["logit"] - lg[pred]) < 1e-6
         and abs(e["check"]["sum_of_terms"] - e["check"]["logit"]) < 1e-4, "check adds up")
    # a short list: the first k, the rest summed in others
    k = 2
    s = fetch(f"/v1/labels/explain?node={v}&k={k}")
    n_nb = len(nbr[v] - {v})
    need(s["k"] == k and s["neighbours"] == e["neighbours"][:k], "k=2 lists the first two")
    need(s["others"]["count"] == max(n_nb - k, 0)
         and abs(s["others"]["contribution_to_predicted"] - sum(pushes[k:])) < 1e-4,
         "others sums the rest")
    need(abs(s["self"]["contribution"][pred] + sum(pushes[:k])
             + s["others"]["contribution_to_predicted"] + bias.get(pred, 0.0)
             - s["logits"][pred]) < 1e-4, "k=2: self + listed + others + bias == logit")
print(f"{len(nodes)} nodes checked (hub {hub}, {deg[hub] - 1} neighbours); {len(bad)} problems")
for b in bad[:20]:
    print("  ", b)
sys.exit(1 if bad else 0)
EOF

get model /v1/model
check "model: parts has the label model (Cora's 7 classes) and no link model" answered model 200 '
    d["parts"]["links"] is None and d["parts"]["labels"]["nodes"] == 2708
    and sorted(d["parts"]["labels"]["classes"]) == ["c%d" % i for i in range(7)]
    and d["parts"]["labels"]["labelled"] == 2708
    and d["labels"]["kind"] == "gcn" and d["labels"]["classes"] == 7
    and d["labels"]["input"] == "features" and d["labels"]["dims"][0] == 1433
    and d["labels"]["dims"][-1] == 7 and d["labels"]["normalisation"] == "sym"
    and d["labels"]["bias"] is True'

# ---- errors ----
get unknown '/v1/labels/predict?node=N0'
check "predict, unknown node: 404 not_found naming it" is_error unknown 404 not_found case-sensitive
check "predict, unknown node: the message names it" grep -q "'N0'" "$E2E_TMP/unknown.json"
get unknown2 '/v1/labels/explain?node=nobody'
check "explain, unknown node: 404 not_found" is_error unknown2 404 not_found case-sensitive
get missing /v1/labels/predict
check "predict without node: 400 bad_request" is_error missing 400 bad_request node=
get missing2 '/v1/labels/explain?k=3'
check "explain without node: 400 bad_request" is_error missing2 400 bad_request node=
for k in 0 1001 -1 abc ''; do
    get badk "/v1/labels/explain?node=n0&k=$k"
    check "explain k='$k': 400 bad_request" is_error badk 400 bad_request "1 to 1000"
done
get k1000 '/v1/labels/explain?node=n0&k=1000'
check "explain k=1000: 200" answered k1000 200 'd["k"] == 1000'
get links '/v1/links/predict?source=n0'
check "links on a label-only snapshot: 404 with a hint to train a link model" \
    is_error links 404 not_found "--model dot|distmult|complex|gcn-link"

finish
