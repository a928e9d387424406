#!/bin/sh
# weft serve end to end on the karate club graph (tests/data/karate): starts on an empty store,
# picks up the first trained snapshot and a second one without a restart, answers
# /v1/links/predict with the right shape and without known links, and reports errors as JSON
# with the right status. Expected values come from the edges file, read here independently.
set -u
. "$TOP/tests/e2e/lib.sh"

EDGES="$TOP/tests/data/karate/edges.tsv"
STORE="$E2E_TMP/store"
mkdir "$STORE"

# get NAME PATH [curl options...]: body to $E2E_TMP/NAME.json, headers to NAME.headers,
# status code to $STATUS.
get() {
    name=$1
    path=$2
    shift 2
    STATUS=$(curl -sS -o "$E2E_TMP/$name.json" -D "$E2E_TMP/$name.headers" -w '%{http_code}' \
        "$@" "$BASE$path")
}

# is_error NAME STATUS CODE: the last response had STATUS and a JSON error with CODE, a
# non-empty message and hint, and a "version" member.
is_error() {
    answered "$1" "$2" 'd["error"]["code"] == "'"$3"'" and len(d["error"]["message"]) > 0
        and len(d["error"]["hint"]) > 0 and "version" in d'
}

# json_is NAME EXPR: EXPR (Python, over the parsed document d) is true for NAME's body.
json_is() {
    [ "$(json_get "$E2E_TMP/$1.json" "($2)")" = True ]
}

# answered NAME STATUS EXPR: the last response had STATUS and EXPR holds for its body.
answered() {
    [ "$STATUS" = "$2" ] && json_is "$1" "$3"
}

is_json_response() {
    grep -qi '^content-type: application/json' "$E2E_TMP/$1.headers"
}

# wait_version V: poll /healthz for up to 5 s until it reports version V.
wait_version() {
    i=0
    while [ $i -lt 50 ]; do
        v=$(curl -sS "$BASE/healthz" | /usr/bin/python3 -c 'import json,sys; print(json.load(sys.stdin)["version"])')
        [ "$v" = "$1" ] && return 0
        sleep 0.1
        i=$((i + 1))
    done
    return 1
}

# --force: karate's few held-out edges cannot show a model beating popularity reliably;
# this test is about serving, and the gate has its own (test_gate.sh).
train() {
    "$WEFT" train --quiet --force --store "$STORE" --edges "$EDGES" --model dot --undirected "$@" \
        >>"$E2E_TMP/train.log" 2>&1
}

# ---- an empty store: the server starts and answers 503 until a snapshot is live ----
start_server "$STORE" || finish
get health0 /healthz
check "healthz on an empty store: 200, ok, version null" \
    answered health0 200 'd == {"status": "ok", "version": None}'
get empty '/v1/links/predict?source=m0'
check "predict before any snapshot: 503 no_snapshot" is_error empty 503 no_snapshot
check "predict before any snapshot: version null" json_is empty 'd["version"] is None'
get model0 /v1/model
check "model before any snapshot: 503 no_snapshot" is_error model0 503 no_snapshot

# ---- the first snapshot is picked up without a restart ----
check "weft train (version 1)" train
check "server follows to version 1" wait_version 1

get p1 '/v1/links/predict?source=m0&k=5'
check "predict: 200 and its shape" answered p1 200 '
    d["version"] == 1 and d["source"] == "m0" and d["relation"] == "link"
    and d["direction"] == "out" and d["k"] == 5 and len(d["predictions"]) == 5
    and all(sorted(p) == ["probability", "score", "target"] and isinstance(p["target"], str)
            and isinstance(p["score"], float) and 0 < p["probability"] < 1
            for p in d["predictions"])'
check "predict: Content-Type application/json" is_json_response p1
check "predict: probability is the logistic of the score" json_is p1 '
    all(abs(p["probability"] - 1 / (1 + __import__("math").exp(-p["score"]))) < 1e-6
        for p in d["predictions"])'
check "predict: scores in descending order" json_is p1 '
    all(a["score"] >= b["score"] for a, b in zip(d["predictions"], d["predictions"][1:]))'
check "predict: relation given explicitly gives the same answer" \
    sh -c 'curl -sS "$1/v1/links/predict?source=m0&k=5&relation=link" | cmp -s - "$2"' \
    sh "$BASE" "$E2E_TMP/p1.json"
check "predict: k defaults to 10" [ "$(curl -sS "$BASE/v1/links/predict?source=m5" |
    /usr/bin/python3 -c 'import json,sys; d=json.load(sys.stdin); print(d["k"] == 10 and len(d["predictions"]) == 10)')" = True ]

# For every node, ask for all 34: the answer must hold exactly the nodes that are neither the
# node itself nor a neighbour in the edges file, best first, each with the logistic of its
# score as its probability.
check "predict: every node, k=34: no self, no known neighbour, all others" \
    /usr/bin/python3 - "$BASE" "$EDGES" <<'EOF'
import json, math, sys, urllib.request
base, edges = sys.argv[1], sys.argv[2]
nbr = {}
for line in open(edges):
    line = line.strip()
    if not line or line.startswith("#"):
        continue
    a, b = line.split("\t")
    nbr.setdefault(a, set()).add(b)
    nbr.setdefault(b, set()).add(a)
nodes = set(nbr)
assert len(nodes) == 34, len(nodes)
bad = 0
for s in sorted(nodes):
    d = json.load(urllib.request.urlopen(f"{base}/v1/links/predict?source={s}&k=34"))
    got = [p["target"] for p in d["predictions"]]
    want = nodes - nbr[s] - {s}
    scores = [p["score"] for p in d["predictions"]]
    probs = [p["probability"] for p in d["predictions"]]
    if any(abs(p - 1 / (1 + math.exp(-x))) > 1e-6 for p, x in zip(probs, scores)):
        print(f"{s}: a probability is not the logistic of its score")
        bad += 1
    if set(got) != want or len(got) != len(want) or scores != sorted(scores, reverse=True):
        print(f"{s}: got {len(got)} targets, want {len(want)}; "
              f"wrongly in: {sorted(set(got) - want)}; missing: {sorted(want - set(got))}")
        bad += 1
sys.exit(1 if bad else 0)
EOF

get pretty '/v1/links/predict?source=m0&k=5&pretty=1'
check "pretty=1 indents the same document" sh -c '
    [ "$(wc -l <"$1")" -gt 10 ] && /usr/bin/python3 -c "import json,sys; sys.exit(json.load(open(sys.argv[1])) != json.load(open(sys.argv[2])))" "$1" "$2"' \
    sh "$E2E_TMP/pretty.json" "$E2E_TMP/p1.json"

# ---- errors ----
get unknown '/v1/links/predict?source=M0'
check "unknown node: 404 not_found" is_error unknown 404 not_found
check "unknown node: the message names it" grep -q "'M0'" "$E2E_TMP/unknown.json"
check "unknown node: Content-Type application/json" is_json_response unknown
get nosource '/v1/links/predict?k=3'
check "missing source: 400 bad_request" is_error nosource 400 bad_request
for k in 0 -1 abc 100000 ''; do
    get badk "/v1/links/predict?source=m0&k=$k"
    check "k='$k': 400 bad_request" is_error badk 400 bad_request
done
get badutf8 '/v1/links/predict?source=%FF'
check "source not UTF-8: 400 bad_request" is_error badutf8 400 bad_request
get badrel '/v1/links/predict?source=m0&relation=friend'
check "unknown relation: 404 not_found" is_error badrel 404 not_found
get badparam '/v1/links/predict?source=m0&kk=3'
check "unknown query parameter: 400 bad_request" is_error badparam 400 bad_request
get noroute /v1/nothing-here
check "unknown route: 404 not_found" is_error noroute 404 not_found
get post /v1/links/predict -X POST -d 'source=m0'
check "POST predict with a form body: 400 bad_request (not JSON)" is_error post 400 bad_request
get delete /v1/links/predict -X DELETE
check "DELETE predict: 405 method_not_allowed" is_error delete 405 method_not_allowed
check "DELETE predict: Allow: GET, POST" grep -qi '^allow: GET, POST' "$E2E_TMP/delete.headers"

# ---- /healthz and /v1/model ----
get health1 /healthz
check "healthz: 200 ok, version 1" answered health1 200 'd == {"status": "ok", "version": 1}'
get model1 /v1/model
check "model: 200, version 1, lists its blobs" \
    answered model1 200 'd["version"] == 1 and len(d["blobs"]) > 0'
check "model: Content-Type application/json" is_json_response model1

# ---- a second snapshot while serving ----
check "weft train (version 2) while the server runs" train --seed 2
check "server follows to version 2 without a restart" wait_version 2
get p2 '/v1/links/predict?source=m0&k=5'
check "predict answers from version 2" answered p2 200 'd["version"] == 2'
get model2 /v1/model
check "model shows version 2" answered model2 200 'd["version"] == 2'

# ---- SIGTERM stops it cleanly ----
kill -TERM "$SERVER_PID"
wait "$SERVER_PID"
rc=$?
SERVER_PID=""
check "SIGTERM: exit status 0" [ "$rc" -eq 0 ]
check "SIGTERM: the log says it stopped" grep -q "stopped" "$E2E_TMP/server.log"

finish
