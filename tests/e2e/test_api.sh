#!/bin/sh
# What the prediction routes answer, checked against answers worked out here independently:
# the stored embeddings are read straight from the LMDB store with mdb_dump (lmdb-utils),
# and every ranking, score and cosine is recomputed with numpy (/usr/bin/python3) from them
# and from the data files: direction out and in, candidate_type, include_known, POST batches
# against GET one by one, POST /v1/links/score, GET /v1/links/explain (paths and similar
# sources against the edge file), GET /v1/nodes/{name} and /similar, POST /v1/labels/predict,
# the admin routes (401, promote, rollback, the served version switching at once), and the
# limits (k, batch size, body size).
# Data: Cora (tests/data/cora, provenance in tests/data/README.md) read as a directed graph,
# so that direction in and out differ; ComplEx (Trouillon et al. 2016), whose scores are not
# symmetric, trained with the logistic loss (scores are log-odds: probability present); node
# types derived from the labels (class cN -> type tN).
set -u
. "$TOP/tests/e2e/lib.sh"

D="$TOP/tests/data/cora"
STORE="$E2E_TMP/store"
TOKEN="api-test-token-$$-abcdefghijkl"
printf '%s\n' "$TOKEN" >"$E2E_TMP/token"
chmod 600 "$E2E_TMP/token"
sed 's/\tc/\tt/' "$D/labels.tsv" >"$E2E_TMP/types.tsv"

check "weft train --model complex,gcn --types on directed Cora (version 1)" \
    sh -c "'$WEFT' train --quiet --force --store '$STORE' --model complex,gcn --loss logistic \
        --dim 32 --epochs 20 --edges '$D/edges.tsv' --features '$D/features.tsv' \
        --labels '$D/labels.tsv' --split '$D/split.tsv' --types '$E2E_TMP/types.tsv' \
        --threads 1 >'$E2E_TMP/train.log' 2>&1"
check "a second version, staged (--no-promote)" \
    sh -c "'$WEFT' train --quiet --force --no-promote --store '$STORE' --model complex \
        --loss logistic --dim 32 --epochs 2 --seed 9 --edges '$D/edges.tsv' \
        --types '$E2E_TMP/types.tsv' --threads 1 >>'$E2E_TMP/train.log' 2>&1"
printf 'n0\tt1\nnot-a-node\tt2\n' >"$E2E_TMP/bad-types.tsv"
check "types given with a node the graph lacks: an error naming file and line" \
    sh -c "! '$WEFT' train --quiet --store '$E2E_TMP/other' --model dot \
        --edges '$D/edges.tsv' --types '$E2E_TMP/bad-types.tsv' >'$E2E_TMP/bad.log' 2>&1 && \
        grep -q 'bad-types.tsv:2: field 1 (node): unknown node .not-a-node.' '$E2E_TMP/bad.log'"

# The store's blobs as numpy arrays: mdb_dump prints each key and value in hex; a key is the
# version (8 bytes, big-endian) and the blob name, a value a 48-byte header and the data.
mdb_dump -s blobs "$STORE" >"$E2E_TMP/blobs.dump" 2>"$E2E_TMP/mdb_dump.err"
check "mdb_dump reads the store's blobs" test -s "$E2E_TMP/blobs.dump"

start_server "$STORE" --admin-token-file "$E2E_TMP/token" --max-k 100 --max-batch 50 \
    --max-body 20000 || finish

cat >"$E2E_TMP/api.py" <<'EOF'
import json, math, sys, urllib.error, urllib.request
import numpy as np

base, data, dump, types_path, token = sys.argv[1:6]
blobs, lines, i = {}, open(dump).read().split("\n"), 0
while lines[i] != "HEADER=END":
    i += 1
i += 1
while lines[i] != "DATA=END":
    key, value = bytes.fromhex(lines[i].strip()), bytes.fromhex(lines[i + 1].strip())
    blobs[(int.from_bytes(key[:8], "big"), key[8:].decode())] = value[48:]
    i += 2

def blob(version, name, dtype):
    return np.frombuffer(blobs[(version, name)], dtype=dtype)

off = blob(1, "nodes.off", np.uint64)
raw = blobs[(1, "nodes.bytes")]
names = [raw[off[j]:off[j + 1]].split(b"\0")[0].decode() for j in range(len(off) - 1)]
ids = {n: j for j, n in enumerate(names)}
n = len(names)
E = blob(1, "entity", np.float32).reshape(n, -1).astype(np.float64)
R = blob(1, "relation", np.float32).reshape(-1, E.shape[1]).astype(np.float64)
h = E.shape[1] // 2

def complex_scores(s=None, t=None):
    """Re(sum e_s r conj(e_t)), rows [real | imaginary] (Trouillon et al. 2016): the scores
    of every target for source s, or of every source for target t."""
    a, b = E[:, :h], E[:, h:]
    c, d = R[0, :h], R[0, h:]
    if s is not None:
        return (a[s] * c - b[s] * d) @ a.T + (a[s] * d + b[s] * c) @ b.T
    return (a * c - b * d) @ a[t] + (a * d + b * c) @ b[t]

edges = [l.rstrip("\n").split("\t") for l in open(f"{data}/edges.tsv") if l.strip()]
out, into = {}, {}
for x, y in edges:
    out.setdefault(x, set()).add(y)
    into.setdefault(y, set()).add(x)
types = dict(l.rstrip("\n").split("\t") for l in open(types_path) if l.strip())
bad = []
n_checked = 0

def need(ok, what):
    global n_checked
    n_checked += 1
    if not ok:
        bad.append(what)

def call(path, body=None, headers=None):
    data = json.dumps(body).encode() if body is not None else None
    req = urllib.request.Request(base + path, data=data, headers=headers or {},
                                 method="POST" if body is not None else "GET")
    try:
        r = urllib.request.urlopen(req)
    except urllib.error.HTTPError as e:
        r = e
    return r.status, json.loads(r.read()), r.headers

def ranked(scores, eligible, k):
    """The brute-force top k: highest score first, then the lower node id."""
    order = sorted((j for j in range(n) if eligible(j)), key=lambda j: (-scores[j], j))
    return order, order[:k]

def same_ranking(got, scores, eligible, k, what):
    """The answer's nodes and scores against the brute force. Scores agree to float32
    rounding; where two scores are that close their order may differ, so the check is:
    every listed score is right, the list is sorted, nothing eligible scores above its
    last, nothing listed is ineligible, and the count is right."""
    order, best = ranked(scores, eligible, k)
    key = "target" if what.startswith("out") else "source"
    listed = [ids[p[key]] for p in got]
    tol = 1e-4 * max(1.0, float(np.abs(scores).max()))
    need(len(listed) == len(best), f"{what}: {len(listed)} listed, {len(best)} expected")
    need(all(eligible(j) for j in listed), f"{what}: an ineligible node listed")
    for p, j in zip(got, listed):
        need(abs(p["score"] - scores[j]) <= tol, f"{what}: {names[j]} score {p['score']} vs {scores[j]}")
        need(abs(p["probability"] - 1 / (1 + math.exp(-p["score"]))) < 1e-6, f"{what}: probability")
    need(all(got[i]["score"] >= got[i + 1]["score"] for i in range(len(got) - 1)), f"{what}: not sorted")
    rest = [j for j in order if j not in set(listed)]
    if listed and rest:
        need(max(scores[j] for j in rest) <= min(scores[j] for j in listed) + tol,
             f"{what}: an unlisted node scores higher")
    return listed

probe = ["n0", "n1", "n10", "n100", "n1358", "n2000", "n2707"]
asymmetric = 0
for s in probe:
    j = ids[s]
    st, body, _ = call(f"/v1/links/predict?source={s}&k=20")
    need(st == 200 and body["direction"] == "out" and body["source"] == s, f"out {s}: {st}")
    sc = complex_scores(s=j)
    listed_out = same_ranking(body["predictions"], sc,
                              lambda c: c != j and names[c] not in out.get(s, ()), 20, f"out {s}")
    need(not any(names[c] in out.get(s, ()) for c in listed_out), f"out {s}: a known link listed")
    st, body, _ = call(f"/v1/links/predict?target={s}&direction=in&k=20")
    need(st == 200 and body["direction"] == "in" and body["target"] == s, f"in {s}: {st}")
    sc_in = complex_scores(t=j)
    listed_in = same_ranking(body["predictions"], sc_in,
                             lambda c: c != j and names[c] not in into.get(s, ()), 20, f"in {s}")
    asymmetric += listed_in != listed_out
    t = types[s]
    st, body, _ = call(f"/v1/links/predict?source={s}&k=15&candidate_type={t}")
    need(body.get("candidate_type") == t, f"typed {s}: candidate_type echoed")
    same_ranking(body["predictions"], sc,
                 lambda c: c != j and types[names[c]] == t and names[c] not in out.get(s, ()),
                 15, f"out typed {s}")
    st, body, _ = call(f"/v1/links/predict?source={s}&k=15&include_known=true")
    same_ranking(body["predictions"], sc, lambda c: c != j, 15, f"out known {s}")
need(asymmetric > 0, "direction in and out gave the same lists for every probe: the test is blind")

# include_known=true lists a known link where it scores among the best (a trained model
# scores most of its training links high), and false never does.
hits = 0
for s in probe:
    st, body, _ = call(f"/v1/links/predict?source={s}&k=100&include_known=true")
    hits += any(p["target"] in out.get(s, ()) for p in body["predictions"])
need(hits > 0, "include_known=true never listed a known link in the top 100")

# POST batch: each answer equals GET's for the same query, in order.
queries = [{"source": "n0", "k": 5}, {"target": "n1", "direction": "in", "k": 7},
           {"source": "n2", "candidate_type": types["n2"], "k": 4},
           {"source": "n3", "include_known": True}, {"source": "nobody"},
           {"target": "n10"}, {"source": "n0", "k": 5, "relation": "link"}]
st, body, _ = call("/v1/links/predict", {"queries": queries})
need(st == 200 and len(body["results"]) == len(queries), f"batch: {st}")
for q, got in zip(queries, body["results"]):
    params = "&".join(f"{k}={str(v).lower() if isinstance(v, bool) else v}" for k, v in q.items())
    gst, want, _ = call(f"/v1/links/predict?{params}")
    want.pop("version", None)
    if gst != 200:
        need(got.get("status") == gst and got["error"] == want["error"], f"batch {q}: error")
    else:
        need(got == want, f"batch {q}: differs from GET")

# POST /v1/links/score against numpy; known against the edge file.
rng = np.random.default_rng(5)
pairs = [(names[a], names[b]) for a, b in rng.integers(0, n, size=(30, 2))] + edges[:10]
st, body, _ = call("/v1/links/score", {"triples": [{"source": a, "target": b} for a, b in pairs]})
need(st == 200 and len(body["scores"]) == len(pairs), f"score: {st}")
for (a, b), got in zip(pairs, body["scores"]):
    want = complex_scores(s=ids[a])[ids[b]]
    need(abs(got["score"] - want) <= 1e-4 * max(1, abs(want)), f"score {a} {b}: {got['score']} vs {want}")
    need(got["known"] == (b in out.get(a, ())), f"score {a} {b}: known")
    need(abs(got["probability"] - 1 / (1 + math.exp(-want))) < 1e-5, f"score {a} {b}: probability")

# GET /v1/links/explain: every path is two edges of the edge file; all of them are counted;
# strengths are the sums of the hops' scores, highest first; similar sources are exactly
# the nodes linking to the target, with numpy's cosine.
def cos(a, b):
    return float(E[a] @ E[b] / math.sqrt((E[a] @ E[a]) * (E[b] @ E[b])))

with_paths = 0
for s, t in [("n0", "n1862"), ("n1", "n2"), ("n100", "n1358"), ("n10", "n2582")] + edges[20:26]:
    st, body, _ = call(f"/v1/links/explain?source={s}&target={t}&k=1000")
    need(st == 200, f"explain {s} {t}: {st}")
    need(abs(body["score"] - complex_scores(s=ids[s])[ids[t]]) < 1e-4 * max(1, abs(body["score"])), f"explain {s} {t}: score")
    need(body["known"] == (t in out.get(s, ())), f"explain {s} {t}: known")
    vias = sorted(x for x in out.get(s, ()) if x in into.get(t, ()) and x not in (s, t))
    need(body["paths_total"] == len(vias) == len(body["paths"]), f"explain {s} {t}: {body['paths_total']} paths, {len(vias)} in the edge file")
    with_paths += bool(vias)
    for p in body["paths"]:
        h1, h2 = p["hops"]
        need(h1["source"] == s and h1["target"] == p["via"] and h2["source"] == p["via"] and h2["target"] == t, f"explain {s} {t}: path shape")
        need(p["via"] in out.get(s, ()) and t in out.get(p["via"], ()), f"explain {s} {t}: path via {p['via']} not in the edge file")
        need(abs(p["strength"] - (h1["score"] + h2["score"])) < 1e-4, f"explain {s} {t}: strength")
    st_ = [p["strength"] for p in body["paths"]]
    need(st_ == sorted(st_, reverse=True), f"explain {s} {t}: paths not sorted")
    linkers = sorted(u for u in into.get(t, ()) if u != s)
    need(sorted(x["source"] for x in body["similar_sources"]) == linkers and body["similar_sources_total"] == len(linkers), f"explain {s} {t}: similar sources")
    for x in body["similar_sources"]:
        need(abs(x["similarity"] - cos(ids[s], ids[x["source"]])) < 1e-5, f"explain {s} {t}: cosine of {x['source']}")
    sims = [x["similarity"] for x in body["similar_sources"]]
    need(sims == sorted(sims, reverse=True), f"explain {s} {t}: similar sources not sorted")
need(with_paths > 0, "no explained pair had a two-step path: the path checks are blind")

# GET /v1/nodes/{name}: type and degrees from the files; /similar against numpy's cosine.
for s in probe:
    st, body, _ = call(f"/v1/nodes/{s}?neighbours=1000")
    need(st == 200 and body["type"] == types[s], f"node {s}: type")
    d = body["degree"]
    need(d["out"] == len(out.get(s, ())) and d["in"] == len(into.get(s, ())) and d["total"] == d["out"] + d["in"] and not d["undirected"], f"node {s}: degree {d}")
    outs = [x["node"] for x in body["neighbours"] if x["direction"] == "out"]
    ins = [x["node"] for x in body["neighbours"] if x["direction"] == "in"]
    need(set(outs) == out.get(s, set()) and set(ins) == into.get(s, set()), f"node {s}: neighbours")
    need(body["parts"] == {"links": True, "labels": True}, f"node {s}: parts")
    st, body, _ = call(f"/v1/nodes/{s}/similar?k=10")
    j = ids[s]
    norms = np.sqrt((E * E).sum(axis=1))
    cs = (E @ E[j]) / (norms * norms[j])
    got = [ids[x["node"]] for x in body["similar"]]
    order = sorted((c for c in range(n) if c != j), key=lambda c: (-cs[c], c))
    need(len(got) == 10 and j not in got, f"similar {s}: count or itself")
    need(all(abs(x["similarity"] - cs[ids[x["node"]]]) < 1e-5 for x in body["similar"]), f"similar {s}: cosine")
    need(min(cs[c] for c in got) >= cs[order[9]] - 1e-5, f"similar {s}: not the 10 nearest")

# POST /v1/labels/predict: each answer equals GET's.
nodes = ["n0", "n5", "nobody", "n2707"]
st, body, _ = call("/v1/labels/predict", {"nodes": nodes})
need(st == 200 and body["snapshot"] == 1 and "caution" in body, f"labels batch: {st}")
for v, got in zip(nodes, body["results"]):
    gst, want, _ = call(f"/v1/labels/predict?node={v}")
    if gst == 200:
        need(got == {k: want[k] for k in ("node", "predicted", "probability", "classes", "observed")}, f"labels batch {v}")
    else:
        need(got["status"] == gst and got["error"] == want["error"], f"labels batch {v}: error")

# Limits (this server: --max-k 100 --max-batch 50 --max-body 20000).
st, body, _ = call("/v1/links/predict?source=n0&k=101")
need(st == 400 and "100" in body["error"]["message"], f"k over the limit: {st}")
st, body, _ = call("/v1/links/predict", {"queries": [{"source": "n0", "k": 101}]})
need(st == 422, f"POST k over the limit: {st}")
st, body, _ = call("/v1/links/predict", {"queries": [{"source": "n0"}] * 51})
need(st == 413 and body["error"]["code"] == "too_large", f"batch over the limit: {st}")
st, body, _ = call("/v1/links/score", {"triples": [{"source": "n0", "target": "n1"}] * 51})
need(st == 413, f"score batch over the limit: {st}")
st, body, _ = call("/v1/labels/predict", {"nodes": ["n0"] * 51})
need(st == 413, f"labels batch over the limit: {st}")
st, body, _ = call("/v1/links/predict", {"queries": [{"source": "n0"}] * 50})
need(st == 200 and len(body["results"]) == 50, f"a batch at the limit: {st}")
st, body, _ = call("/v1/links/predict", {"queries": [{"source": "x" * 25000}]})
need(st == 413 and "--max-body" in body["error"]["hint"], f"body over the limit: {st}")

# The admin routes: 401 without or with a wrong token (WWW-Authenticate: Bearer), then a
# promotion whose version is served by the very next request, and a rollback.
for hdr in ({}, {"Authorization": "Bearer wrong"}, {"Authorization": "Basic " + token}):
    st, body, headers = call("/v1/snapshots/2/promote", {}, hdr)
    need(st == 401 and headers.get("WWW-Authenticate", "").startswith("Bearer"), f"admin {hdr}: {st}")
admin = {"Authorization": "Bearer " + token}
st, body, _ = call("/v1/snapshots", None)
need(st == 200 and body["live"] == 1 and [x["state"] for x in body["snapshots"]] == ["live", "staged"], f"snapshots: {body}")
st, body, _ = call("/v1/snapshots/2/promote", {"reason": "test_api"}, admin)
need(st == 200 and body["version"] == 2 and body["live"] == 2 and body["previous"] == 1 and body["serving"] == 2, f"promote: {st} {body}")
st, body, _ = call("/v1/links/predict?source=n0&k=1")
need(body["version"] == 2, f"after promote, served version {body['version']}")
st, body, _ = call("/v1/snapshots")
need(body["live"] == 2 and body["previous"] == 1 and [x["state"] for x in body["snapshots"]] == ["retired", "live"], f"snapshots after promote: {body}")
st, body, _ = call("/v1/snapshots/rollback", {"reason": "test_api"}, admin)
need(st == 200 and body["version"] == 1 and body["live"] == 1, f"rollback: {st} {body}")
st, body, _ = call("/v1/links/predict?source=n0&k=1")
need(body["version"] == 1, f"after rollback, served version {body['version']}")

for b in bad[:40]:
    print("  ", b)
print(f"{n_checked} comparisons, {len(bad)} problems")
sys.exit(1 if bad else 0)
EOF

check "predictions, scores, explanations, nodes, batches, limits and admin against numpy" \
    /usr/bin/python3 "$E2E_TMP/api.py" "$BASE" "$D" "$E2E_TMP/blobs.dump" "$E2E_TMP/types.tsv" \
    "$TOKEN"
check "the server logged the promotion and the rollback" \
    sh -c "grep -q 'admin: promoted version 2: test_api' '$E2E_TMP/server.log' && \
        grep -q 'admin: rolled back: test_api' '$E2E_TMP/server.log'"

finish
