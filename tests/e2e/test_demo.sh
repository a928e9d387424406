#!/bin/sh
# The demo end to end, as `make demo` runs it: `weft demo` writes the same bytes for the same
# seed and other bytes for another; its files load (weft inspect, and training reads types,
# labels, split and features); deploy/demo.sh generates, trains with the demo's full settings
# (not shortened) and serves; the snapshot's link model beats the popularity baseline on test
# and its label model beats the majority class and label propagation; the planted ring's sellers
# get a higher suspicious probability than the legit sellers on average (planted.tsv is the
# truth; training never reads it); and every curl example that `deploy/demo.sh --examples`
# prints, run exactly as printed, answers 200 with a non-empty result.
set -u
. "$TOP/tests/e2e/lib.sh"

A="$E2E_TMP/a"
B="$E2E_TMP/b"
VAR="$E2E_TMP/var"
DATA="$VAR/demo-data"

# ---- the generator ----
"$WEFT" demo --help >"$E2E_TMP/help.txt"
check "weft demo --help exits 0" test $? -eq 0
check "--help lists every flag with its default" /usr/bin/python3 -c '
import re, sys
text = open(sys.argv[1]).read()
flags = ["--seed", "--buyers", "--sellers", "--ring", "--ring-buyers", "--labelled"]
for f in flags:
    line = next((l for l in text.splitlines() if l.strip().startswith(f + " ")), "")
    assert re.search(r"\(default [0-9.]+\)", line), (f, line)
assert "--out DIR" in text and "--help" in text' "$E2E_TMP/help.txt"
check "--help carries the caution" grep -q "reviewed by a person" "$E2E_TMP/help.txt"

"$WEFT" demo >/dev/null 2>&1
check "no --out: usage error (2)" test $? -eq 2
"$WEFT" demo --out "$E2E_TMP/x" --sellers 10 --ring 10 >/dev/null 2>&1
check "--ring not below --sellers: usage error (2)" test $? -eq 2
"$WEFT" demo --out "$E2E_TMP/x" --labelled 1.5 >/dev/null 2>&1
check "--labelled above 1: usage error (2)" test $? -eq 2

check "weft demo --out A" sh -c "'$WEFT' demo --out '$A' >'$E2E_TMP/gen.log'"
check "weft demo --out B (the same options, a nested new directory)" \
    sh -c "'$WEFT' demo --out '$B/nested' --seed 1 >/dev/null"
for f in edges.tsv types.tsv labels.tsv split.tsv features.tsv planted.tsv examples.tsv \
    README.txt; do
    check "same seed, same bytes: $f" cmp -s "$A/$f" "$B/nested/$f"
done
"$WEFT" demo --out "$E2E_TMP/c" --seed 2 >/dev/null
check "another seed, other edges" sh -c "! cmp -s '$A/edges.tsv' '$E2E_TMP/c/edges.tsv'"
check "another seed, other labels" sh -c "! cmp -s '$A/labels.tsv' '$E2E_TMP/c/labels.tsv'"

"$WEFT" inspect --json "$A/edges.tsv" >"$E2E_TMP/inspect.json"
check "weft inspect reads edges.tsv" test $? -eq 0
check "a few thousand nodes, tens of thousands of edges, 5 relations, one component" \
    /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert 2000 <= d["nodes"] <= 10000 and 20000 <= d["edges"] <= 100000, d
assert d["relations"] == 5 and d["duplicates"] == 0 and d["self_loops"] == 0, d
assert d["components"]["count"] == 1, d' "$E2E_TMP/inspect.json"

check "the files agree with each other and with the scenario" /usr/bin/python3 - "$A" <<'EOF'
import sys
d = sys.argv[1]
def rows(name):
    with open(f"{d}/{name}") as f:
        return [l.rstrip("\n").split("\t") for l in f if l.strip() and not l.startswith("#")]
edges = rows("edges.tsv")
types = dict(rows("types.tsv"))
planted = dict(rows("planted.tsv"))
labels = dict(rows("labels.tsv"))
split = dict(rows("split.tsv"))
ends = {"bought": ("buyer", "part"), "bought_from": ("buyer", "seller"),
        "sells": ("seller", "part"), "fits": ("part", "part"), "in_category": ("part", "category")}
nodes = set()
for s, r, t in edges:
    assert (types[s], types[t]) == ends[r], (s, r, t)
    nodes |= {s, t}
assert nodes == set(types), "types.tsv names exactly the graph's nodes"
assert all(n.split(":")[0] == {"category": "cat"}.get(ty, ty) for n, ty in types.items())
sellers = {n for n, ty in types.items() if ty == "seller"}
assert set(labels) <= sellers and 0 < len(labels) < len(sellers), "some sellers, not all, labelled"
assert all(labels[s] == planted[s] for s in labels), "observed labels are the planted ones"
assert set(split) == set(labels) and set(split.values()) == {"train", "valid", "test"}
for part in ("train", "valid", "test"):
    assert {labels[s] for s in split if split[s] == part} == {"legit", "suspicious"}, part
ring = {s for s in sellers if planted[s] == "suspicious"}
assert 0 < len(ring) < len(sellers) / 5, "a small ring"
accounts = {n for n, g in planted.items() if g == "ring-account"}
for s, r, t in edges:
    if r == "bought_from" and s in accounts:
        assert t in ring, f"ring account {s} bought from {t}"
ex = dict(rows("examples.tsv"))
assert planted[ex["buyer"]] == "drones" and ex["seller"] in ring and ex["seller"] not in labels
bought = {t for s, r, t in edges if r == "bought" and s == ex["buyer"]}
fits = {a for a, r, b in edges if r == "fits" and b == ex["part"]} | \
       {b for a, r, b in edges if r == "fits" and a == ex["part"]}
assert ex["part"] not in bought and fits & bought, "the example part fits a part they bought"
EOF
check "README.txt describes the scenario, invented, with the caution" sh -c "
    grep -q 'hobby electronics parts' '$A/README.txt' && grep -q 'invented' '$A/README.txt' &&
    grep -q 'data-protection rules' '$A/README.txt'"

# ---- make demo's script: generate, train (the demo's own settings), serve ----
PORT=$(free_port)
BASE="http://127.0.0.1:$PORT"
VAR="$VAR" PORT=$PORT BUILD="$BUILD" sh "$TOP/deploy/demo.sh" >"$E2E_TMP/demo.log" 2>&1 &
SERVER_PID=$!
i=0   # training comes first: up to 10 minutes on a loaded machine (a minute or less idle)
until curl -fsS "$BASE/healthz" >/dev/null 2>&1 || [ $i -ge 6000 ]; do
    kill -0 "$SERVER_PID" 2>/dev/null || break
    sleep 0.1
    i=$((i + 1))
done
check "deploy/demo.sh generates, trains and serves" curl -fsS "$BASE/healthz" -o /dev/null
if ! curl -fsS "$BASE/healthz" -o /dev/null 2>&1; then
    tail -n 30 "$E2E_TMP/demo.log"
    finish
fi
check "the demo wrote the same data as weft demo --out A" cmp -s "$A/edges.tsv" "$DATA/edges.tsv"
check "the demo printed the evaluation, the training time and the caution" sh -c "
    grep -q 'MRR' '$E2E_TMP/demo.log' && grep -q '^training took [0-9.]* s' '$E2E_TMP/demo.log' &&
    grep -q 'data-protection rules' '$E2E_TMP/demo.log'"
grep '^training took' "$E2E_TMP/demo.log"

curl -fsS "$BASE/v1/model" -o "$E2E_TMP/model.json"
check "the live snapshot holds a ComplEx link model and a GCN trained in one run" \
    /usr/bin/python3 -c '
import json, sys
m = json.load(open(sys.argv[1]))["models"]
assert m["link"]["model"]["kind"] == "complex" and m["labels"]["model"]["kind"] == "gcn", m' \
    "$E2E_TMP/model.json"
check "links: test filtered MRR and Hits@10 above the popularity baseline's, by half at least" \
    /usr/bin/python3 -c '
import json, sys
x = json.load(open(sys.argv[1]))["models"]["link"]["metrics"]
t, p = x["test"], x["baselines"]["popularity"]
print("links: test MRR %.4f Hits@10 %.4f | popularity %.4f %.4f"
      % (t["mrr"], t["hits@10"], p["mrr"], p["hits@10"]))
assert t["mrr"] > 1.5 * p["mrr"] and t["hits@10"] > 1.5 * p["hits@10"]' "$E2E_TMP/model.json"
check "labels: test accuracy above majority and label propagation, macro-F1 above majority" \
    /usr/bin/python3 -c '
import json, sys
x = json.load(open(sys.argv[1]))["models"]["labels"]["metrics"]
t, b = x["test"], x["baselines"]
maj, lp = b["majority"], b["label_propagation"]
print("labels: test accuracy %.4f macro-F1 %.4f | majority %.4f %.4f | label prop. %.4f %.4f"
      % (t["accuracy"], t["macro_f1"], maj["accuracy"], maj["macro_f1"], lp["accuracy"],
         lp["macro_f1"]))
assert t["accuracy"] > maj["accuracy"] and t["accuracy"] > lp["accuracy"]
assert t["macro_f1"] > maj["macro_f1"] + 0.2' "$E2E_TMP/model.json"

check "the ring's sellers are more suspicious than the legit ones, on average and unlabelled" \
    /usr/bin/python3 - "$BASE" "$DATA" <<'EOF'
import json, sys, urllib.request
base, d = sys.argv[1], sys.argv[2]
def rows(name):
    with open(f"{d}/{name}") as f:
        return [l.rstrip("\n").split("\t") for l in f if l.strip() and not l.startswith("#")]
planted = {n: g for n, g in rows("planted.tsv") if n.startswith("seller:")}
labelled = dict(rows("labels.tsv"))
sellers = sorted(planted)
p = {}
for i in range(0, len(sellers), 500):
    body = json.dumps({"nodes": sellers[i:i + 500]}).encode()
    rq = urllib.request.Request(base + "/v1/labels/predict", data=body,
                                headers={"Content-Type": "application/json"})
    for r in json.load(urllib.request.urlopen(rq))["results"]:
        p[r["node"]] = {c["class"]: c["probability"] for c in r["classes"]}["suspicious"]
def mean(xs):
    return sum(xs) / len(xs)
for name, keep in (("all sellers", lambda s: True),
                   ("unlabelled sellers", lambda s: s not in labelled)):
    ring = [p[s] for s in sellers if keep(s) and planted[s] == "suspicious"]
    legit = [p[s] for s in sellers if keep(s) and planted[s] == "legit"]
    print(f"{name}: mean P(suspicious) ring {mean(ring):.3f} ({len(ring)}), "
          f"legit {mean(legit):.3f} ({len(legit)})")
    assert mean(ring) > mean(legit) + 0.2
EOF

# ---- the printed examples, exactly as a user would copy them ----
HOST=127.0.0.1 PORT=$PORT VAR="$VAR" BUILD="$BUILD" sh "$TOP/deploy/demo.sh" --examples \
    >"$E2E_TMP/examples.txt"
check "deploy/demo.sh --examples prints them" test $? -eq 0
check "--examples prints what the demo printed" sh -c "
    grep '^curl ' '$E2E_TMP/examples.txt' >'$E2E_TMP/cmds' &&
    grep '^curl ' '$E2E_TMP/demo.log' | cmp -s - '$E2E_TMP/cmds'"
check "six curl examples" test "$(wc -l <"$E2E_TMP/cmds")" -eq 6
n=0
while IFS= read -r cmd; do
    n=$((n + 1))
    sh -c "$cmd" >"$E2E_TMP/ex$n.out" 2>&1
    code=$(sh -c "$cmd -o /dev/null -w '%{http_code}'")
    check "example $n answers 200: $cmd" test "$code" = 200
    check "example $n answers a non-empty result" /usr/bin/python3 - "$E2E_TMP/ex$n.out" "$cmd" \
        <<'EOF'
import json, sys
text, cmd = open(sys.argv[1]).read(), sys.argv[2]
if "/metrics" in cmd:
    assert "weft_http_requests_total" in text and "weft_snapshot" in text, text[:300]
    sys.exit(0)
d = json.loads(text)
if "/v1/links/predict" in cmd:
    assert len(d["predictions"]) == 5, d
    assert all(x["target"].startswith("part:") for x in d["predictions"]), d
elif "/v1/links/explain" in cmd:
    assert d["similar_sources"] and d["paths"] and not d["known"], d
elif "/v1/labels/predict" in cmd:
    assert d["predicted"] == "suspicious" and d["observed"] is None and d["caution"], d
elif "/v1/labels/explain" in cmd:
    assert len(d["neighbours"]) == 5 and d["caution"], d
elif "/v1/health" in cmd:
    assert d["status"] == "ok" and d["checks"], d
else:
    raise SystemExit(f"unexpected example {cmd}")
EOF
done <"$E2E_TMP/cmds"

finish
