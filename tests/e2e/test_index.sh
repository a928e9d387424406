#!/bin/sh
# The link model's approximate indexes end to end (include/weft/link_index.h): built and
# measured by weft train --index, refused by the gate below their recall floor, served with
# the answer's path, and equal to the exact scan wherever the candidates cover every node:
# the known-link filter and candidate_type hold on every path. Data: Cora's citation links
# (tests/data/cora, provenance in tests/data/README.md); the node types are invented for
# the test (node number mod 3).
set -u
. "$TOP/tests/e2e/lib.sh"
D="$TOP/tests/data/cora"
awk -F '\t' '{ for (i = 1; i <= 2; i++) print $i }' "$D/edges.tsv" | sort -u \
    | awk '{ n = substr($1, 2) + 0; print $1 "\t" (n % 3 == 0 ? "red" : n % 3 == 1 ? "green" : "blue") }' \
    >"$E2E_TMP/types.tsv"
train() {   # train STORE ARG...: a quick dot model with types
    store=$1
    shift
    "$WEFT" train --store "$store" --edges "$D/edges.tsv" --undirected --types "$E2E_TMP/types.tsv" \
        --epochs 20 --seed 3 --threads 1 --quiet --force "$@" >"$E2E_TMP/train.out" 2>&1
}

# 1. int8 with room for every node among the candidates: the exact answers, filters included.
S1="$E2E_TMP/int8"
check "train --index int8 stores an int8 index" train "$S1" --index int8 --index-oversample 1000
"$WEFT" snapshots show 1 --store "$S1" --json >"$E2E_TMP/m1.json"
check "the manifest describes it, with its measured recall" \
    test "$(json_get "$E2E_TMP/m1.json" "(d['link']['index']['kind'], d['link']['index']['recall_at_10'] >= 0.99, d['link']['index']['probe_queries'])")" = "('int8', True, 200)"
check "train prints what it built" grep -q "^index: int8, oversample 1000: recall@10" "$E2E_TMP/train.out"
start_server "$S1" || finish
compare() {   # compare QUERY: the index path and exact=true give the same list
    curl -fsS "$BASE/v1/links/predict?$1" >"$E2E_TMP/a.json" &&
    curl -fsS "$BASE/v1/links/predict?$1&exact=true" >"$E2E_TMP/b.json" &&
    /usr/bin/python3 - "$E2E_TMP/a.json" "$E2E_TMP/b.json" "$2" <<'PY'
import json, sys
a, b = (json.load(open(p)) for p in sys.argv[1:3])
assert a["path"] == sys.argv[3] and b["path"] == "exact", (a["path"], b["path"])
assert a["predictions"] == b["predictions"], (a["predictions"], b["predictions"])
assert len(a["predictions"]) > 0
PY
}
ok=0
for n in n0 n7 n33 n150 n999 n2000; do
    compare "source=$n&k=10" int8 && compare "source=$n&k=25&candidate_type=green" int8 &&
        compare "source=$n&k=10&include_known=true" int8 && ok=$((ok + 1))
done
check "int8 answers equal the exact scan's (6 nodes, plain, typed, known links kept)" test "$ok" -eq 6
check "concurrent int8 queries (shared passes) answer as the exact scan, each its own" \
    /usr/bin/python3 - "$BASE" <<'PY'
import concurrent.futures, json, urllib.request, sys
base = sys.argv[1]
def get(q):
    with urllib.request.urlopen(base + "/v1/links/predict?" + q) as r:
        return json.load(r)
queries = ["source=n%d&k=%d%s" % (n, 5 + n % 20, ["", "&candidate_type=red", "&include_known=true"][n % 3])
           for n in range(0, 2400, 8)]
want = {q: get(q + "&exact=true")["predictions"] for q in queries}
with concurrent.futures.ThreadPoolExecutor(16) as pool:
    got = dict(zip(queries, pool.map(get, queries)))
bad = [q for q in queries if got[q]["path"] != "int8" or got[q]["predictions"] != want[q]]
assert not bad, bad[:3]
PY
curl -fsS "$BASE/v1/links/predict?source=n0&k=50&candidate_type=green" >"$E2E_TMP/t.json"
check "candidate_type holds on the index path" test "$(json_get "$E2E_TMP/t.json" \
    "all(int(p['target'][1:]) % 3 == 1 for p in d['predictions']) and len(d['predictions']) == 50")" = True
curl -fsS "$BASE/v1/links/predict?source=n0&k=100" >"$E2E_TMP/k.json"
check "known links are left out on the index path" /usr/bin/python3 - "$E2E_TMP/k.json" "$D/edges.tsv" <<'PY'
import json, sys
d = json.load(open(sys.argv[1]))
known = set()
for line in open(sys.argv[2]):
    s, t = line.split()[:2]
    if "n0" in (s, t):
        known.add(t if s == "n0" else s)
got = {p["target"] for p in d["predictions"]}
assert known and not (got & known) and "n0" not in got, got & known
PY
curl -fsS -X POST -H 'Content-Type: application/json' \
    -d '{"queries":[{"source":"n5","k":5},{"source":"n5","k":5,"exact":true}]}' \
    "$BASE/v1/links/predict" >"$E2E_TMP/batch.json"
check "POST: each answer says its path, and both agree" test "$(json_get "$E2E_TMP/batch.json" \
    "([r['path'] for r in d['results']], d['results'][0]['predictions'] == d['results'][1]['predictions'])")" = "(['int8', 'exact'], True)"
check "POST: 150 queries through the int8 index (in chunks of 64) answer as exact=true" \
    /usr/bin/python3 - "$BASE" <<'PY'
import json, urllib.request, sys
base = sys.argv[1]
qs = [dict({"source": "n%d" % n, "k": 3 + n % 17},
           **[{}, {"candidate_type": "blue"}, {"include_known": True}][n % 3]) for n in range(0, 1500, 10)]
def post(queries):
    r = urllib.request.Request(base + "/v1/links/predict", json.dumps({"queries": queries}).encode(),
                               {"Content-Type": "application/json"})
    with urllib.request.urlopen(r) as f:
        return json.load(f)["results"]
got, want = post(qs), post([dict(q, exact=True) for q in qs])
assert [r["path"] for r in got] == ["int8"] * len(qs)
bad = [i for i in range(len(qs)) if got[i]["predictions"] != want[i]["predictions"]]
assert not bad, [qs[i] for i in bad[:3]]
PY
check "exact=maybe is a 400 with a hint" sh -c \
    "test \"\$(curl -s -o /dev/null -w '%{http_code}' '$BASE/v1/links/predict?source=n0&exact=maybe')\" = 400"
stop_server

# 2. The clustered index: tuned nprobe, its recall, and answers close to the exact ones.
S2="$E2E_TMP/ivf"
check "train --index ivf stores a clustered index" train "$S2" --index ivf
"$WEFT" snapshots show 1 --store "$S2" --json >"$E2E_TMP/m2.json"
check "nprobe tuned to recall@10 >= 0.975 (halfway from the floor 0.95 to 1)" \
    test "$(json_get "$E2E_TMP/m2.json" "(d['link']['index']['kind'], d['link']['index']['recall_at_10'] >= 0.975, d['link']['index']['lists'])")" = "('ivf', True, 208)"
start_server "$S2" || finish
overlap() {   # overlap PATH: mean share of the exact top 10 the index path keeps, 60 nodes
    /usr/bin/python3 - "$BASE" "$1" <<'PY'
import json, sys, urllib.request
base, path, total = sys.argv[1], sys.argv[2], 0.0
nodes = ["n%d" % (37 * i) for i in range(60)]
for n in nodes:
    a = json.load(urllib.request.urlopen("%s/v1/links/predict?source=%s&k=10" % (base, n)))
    b = json.load(urllib.request.urlopen("%s/v1/links/predict?source=%s&k=10&exact=true" % (base, n)))
    assert a["path"] == path and b["path"] == "exact"
    exact = {p["target"]: p["score"] for p in b["predictions"]}
    for p in a["predictions"]:   # every score returned is the exact one
        assert p["target"] not in exact or p["score"] == exact[p["target"]]
    total += len(exact.keys() & {p["target"] for p in a["predictions"]}) / max(1, len(exact))
print("%.3f" % (total / len(nodes)))
PY
}
overlap ivf >"$E2E_TMP/overlap.txt"
check "ivf answers keep most of the exact top 10 over 60 nodes ($(cat "$E2E_TMP/overlap.txt"))" \
    awk -v r="$(cat "$E2E_TMP/overlap.txt")" 'BEGIN { exit !(r >= 0.9) }'
curl -sS "$BASE/v1/health" >"$E2E_TMP/health.json"
check "/v1/health reports the index's recall against its floor" test "$(json_get "$E2E_TMP/health.json" \
    "[(c['status'], c['value'] == d2['link']['index']['recall_at_10'], c['threshold']) for c in d['checks'] if c['name'] == 'index_recall'] if (d2 := json.load(open('$E2E_TMP/m2.json'))) else 0")" = "[('ok', True, 0.95)]"
stop_server

# 2b. The clustered index with product-quantised lists: its record, and with room for every
# node among the candidates (10 x 1000 > Cora's 2,708 nodes) the exact answers, filters
# included; with its defaults, answers close to the exact ones.
S4="$E2E_TMP/ivfpq"
check "train --index ivf-pq stores a clustered index of product codes" \
    train "$S4" --index ivf-pq --index-oversample 1000
"$WEFT" snapshots show 1 --store "$S4" --json >"$E2E_TMP/m4.json"
check "the manifest names its kind, layout, lists (sqrt(nodes) / 2) and subspaces (32 of 2 values for dim 64)" \
    test "$(json_get "$E2E_TMP/m4.json" "tuple(d['link']['index'][f] for f in ('kind', 'code_layout', 'lists', 'subspaces', 'subspace_dims', 'oversample'))")" = "('ivf-pq', 'pq4-blocks32x4', 26, 32, 2, 1000)"
start_server "$S4" || finish
ok=0
for n in n0 n7 n33 n150 n999 n2000; do
    compare "source=$n&k=10" ivf-pq && compare "source=$n&k=25&candidate_type=green" ivf-pq &&
        compare "source=$n&k=10&include_known=true" ivf-pq && ok=$((ok + 1))
done
check "ivf-pq answers equal the exact scan's when every node is a candidate (6 nodes, plain, typed, known links kept)" \
    test "$ok" -eq 6
stop_server
S5="$E2E_TMP/ivfpq-default"
check "train --index ivf-pq with its defaults (oversample 16)" train "$S5" --index ivf-pq
check "train prints what it built" grep -q "^index: ivf-pq, 26 lists, .* oversample 16: recall@10" "$E2E_TMP/train.out"
start_server "$S5" || finish
overlap ivf-pq >"$E2E_TMP/overlap-pq.txt"
check "ivf-pq answers keep most of the exact top 10 over 60 nodes ($(cat "$E2E_TMP/overlap-pq.txt"))" \
    awk -v r="$(cat "$E2E_TMP/overlap-pq.txt")" 'BEGIN { exit !(r >= 0.9) }'
stop_server

# 3. The gate: an index below its floor is refused; the live snapshot stays.
S3="$E2E_TMP/gate"
train "$S3"
"$WEFT" train --store "$S3" --edges "$D/edges.tsv" --undirected --epochs 20 --seed 3 \
    --threads 1 --quiet --index ivf --index-nprobe 1 --index-recall-floor 0.999 \
    >"$E2E_TMP/gate.out" 2>&1
check "a clustered index probing one list is refused below a 0.999 floor (exit 3)" test $? -eq 3
check "the reason names the recall and the floor" \
    grep -q "rejected: the ivf index's recall@10 .* is below its floor 0.999" "$E2E_TMP/gate.out"
"$WEFT" snapshots list --store "$S3" --json >"$E2E_TMP/list.json"
check "version 1 stays live" test "$(json_get "$E2E_TMP/list.json" \
    "[s['version'] for s in (d['snapshots'] if isinstance(d, dict) else d) if 'live' in str(s.get('state', ''))]")" = "[1]"
check "--index-lists without --index is a usage error (exit 2)" sh -c \
    "'$WEFT' train --store '$E2E_TMP/x' --edges '$D/edges.tsv' --index-lists 4 >/dev/null 2>&1; test \$? -eq 2"
check "an unknown --index is a usage error naming the kinds" sh -c \
    "'$WEFT' train --store '$E2E_TMP/x' --edges '$D/edges.tsv' --index fast 2>&1 | grep -q 'known: exact, int8, ivf, ivf-pq'"
finish
