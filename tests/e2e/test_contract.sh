#!/bin/sh
# The API contract, route by route, on live servers: every operation openapi/openapi.yaml
# documents is called (with real bodies, path parameters and the admin token) and every
# answer, errors included, must have a status the spec documents for that operation and a
# body that validates against the schema it gives (python3-jsonschema; OpenAPI's nullable
# turned into JSON Schema). A call that comes back 2xx must exist for every documented
# operation, so a route added to the spec without a case here fails. The spec itself is
# checked against the official OpenAPI 3.0 schema, and against the server's route list, in
# tests/e2e/test_openapi.sh.
# Data: Cora (tests/data/cora, provenance in tests/data/README.md) with a link model and a
# label model (--model dot,gcn) and node types derived from the labels (class cN -> type tN),
# so that every route has something to answer from.
set -u
. "$TOP/tests/e2e/lib.sh"

D="$TOP/tests/data/cora"
SPEC="$TOP/openapi/openapi.yaml"
STORE="$E2E_TMP/store"
TOKEN="contract-test-token-$$-0123456789"
printf '%s\n' "$TOKEN" >"$E2E_TMP/token"
chmod 600 "$E2E_TMP/token"
sed 's/\tc/\tt/' "$D/labels.tsv" >"$E2E_TMP/types.tsv"
LIMITS="--max-k 50 --max-batch 20 --max-body 16384"

# contract.py SPEC BASE TOKEN CASES_FILE [--coverage]: CASES_FILE holds a Python list of
# cases (method, path, status[, body[, headers]]); body is a JSON value or bytes; headers
# "admin" sends the token, "wrong" a wrong one. With --coverage, every documented operation
# must have answered 2xx in this run or an earlier one recorded in $E2E_TMP/covered.
cat >"$E2E_TMP/contract.py" <<'EOF'
import json, os, re, sys, urllib.error, urllib.request
import yaml, jsonschema

spec_path, base, token, cases_path = sys.argv[1:5]
want_coverage = "--coverage" in sys.argv
sys.path.insert(0, os.path.join(os.environ["TOP"], "tests", "e2e"))
import openapi_schema
doc, resolver = openapi_schema.load(spec_path)
METHODS = ("get", "put", "post", "delete", "patch", "head", "options")

def resolve(node):
    while "$ref" in node:
        node = resolver.resolve(node["$ref"])[1]
    return node

# A path template matches as the server matches it: "{x}" stands for one or more characters,
# slashes included; the template with the most literal characters wins.
def template_of(path):
    best = None
    for t in doc["paths"]:
        rx = "^" + re.sub(r"\\\{[^}]*\\\}", ".+", re.escape(t)) + "$"
        if re.match(rx, path):
            literal = len(re.sub(r"\{[^}]*\}", "", t))
            if best is None or literal > best[0]:
                best = (literal, t)
    return best[1] if best else None

covered_path = os.path.join(os.path.dirname(cases_path), "covered")
covered = set(open(covered_path).read().split("\n")) if os.path.exists(covered_path) else set()
bad = 0
for case in eval(open(cases_path).read()):
    method, path, want = case[0], case[1], case[2]
    body = case[3] if len(case) > 3 else None
    who = case[4] if len(case) > 4 else None
    headers = {}
    data = None
    if body is not None:
        data = body if isinstance(body, bytes) else json.dumps(body).encode()
        headers["Content-Type"] = "application/json"
    if who == "admin":
        headers["Authorization"] = "Bearer " + token
    elif who == "wrong":
        headers["Authorization"] = "Bearer not-" + token
    req = urllib.request.Request(base + path, method=method, data=data, headers=headers)
    try:
        resp = urllib.request.urlopen(req)
    except urllib.error.HTTPError as e:
        resp = e
    status, raw, hdrs = resp.status, resp.read(), resp.headers
    route = template_of(path.split("?")[0])
    problems = []
    if status != want:
        problems.append(f"status {status}: {raw[:300]!r}")
    op = doc["paths"][route].get(method.lower()) if route else None
    if route and op is None:   # a wrong method: any operation of the path documents its 405
        op = next(doc["paths"][route][m] for m in METHODS if m in doc["paths"][route])
    documented = op["responses"].get(str(status)) if op else {
        "content": {"application/json": {"schema": {"$ref": "#/components/schemas/Error"}}}}
    if documented is None:
        problems.append(f"status {status} is not documented for {method} {route}")
    else:
        content = resolve(documented).get("content", {})
        ctype = (hdrs.get("Content-Type") or "").split(";")[0].strip()
        if ctype not in content:
            problems.append(f"Content-Type {ctype}, documented {sorted(content)}")
        elif ctype == "application/json":
            try:
                jsonschema.Draft4Validator(content[ctype]["schema"], resolver=resolver).validate(
                    json.loads(raw))
            except (ValueError, jsonschema.ValidationError, jsonschema.RefResolutionError) as e:
                problems.append(f"body does not match the spec: {str(e)[:400]}")
        if status == 405 and "Allow" not in hdrs:
            problems.append("405 without an Allow header")
        if status == 401 and not (hdrs.get("WWW-Authenticate") or "").startswith("Bearer"):
            problems.append("401 without WWW-Authenticate: Bearer")
    if not problems and 200 <= status < 300 and route and method.lower() in doc["paths"][route]:
        covered.add(f"{method} {route}")
    label = f"{method} {path[:90]} {want}"
    print(("FAIL " if problems else "ok   ") + label + ("; ".join([""] + problems)))
    bad += bool(problems)
open(covered_path, "w").write("\n".join(sorted(covered)))
if want_coverage:
    ops = {f"{m.upper()} {p}" for p, o in doc["paths"].items() for m in o if m in METHODS}
    missing = sorted(ops - covered)
    if missing:
        print("FAIL documented operations never answered 2xx here:", ", ".join(missing))
        bad += 1
    else:
        print(f"ok   all {len(ops)} documented operations answered 2xx and matched the spec")
sys.exit(1 if bad else 0)
EOF

contract() {
    /usr/bin/python3 "$E2E_TMP/contract.py" "$SPEC" "$BASE" "$TOKEN" "$@"
}

# quiet COMMAND...: run it with its output in $E2E_TMP/train.log.
quiet() {
    "$@" >>"$E2E_TMP/train.log" 2>&1
}

# ---- an empty directory: no store, nothing live (read-only: the server creates nothing) ----
mkdir "$STORE"
start_server "$STORE" $LIMITS || finish
cat >"$E2E_TMP/cases-empty" <<'EOF'
[
    ("GET", "/v1/links/predict?source=n0", 503),
    ("POST", "/v1/links/predict", 503, {"queries": [{"source": "n0"}]}),
    ("POST", "/v1/links/score", 503, {"triples": [{"source": "n0", "target": "n1"}]}),
    ("GET", "/v1/links/explain?source=n0&target=n1", 503),
    ("POST", "/v1/labels/predict", 503, {"nodes": ["n0"]}),
    ("GET", "/v1/nodes/n0", 503),
    ("GET", "/v1/nodes/n0/similar", 503),
    ("GET", "/v1/snapshots", 503),
    ("GET", "/v1/map", 503),
    ("GET", "/", 200),
]
EOF
check "empty store: responses match the spec" contract "$E2E_TMP/cases-empty"
stop_server

# ---- three versions: 1 live (dot + gcn, types), 2 staged, 3 rejected by the gate ----
check "weft train --model dot,gcn --types on Cora (version 1)" \
    quiet "$WEFT" train --quiet --force --store "$STORE" --model dot,gcn --edges "$D/edges.tsv" \
    --undirected --features "$D/features.tsv" --labels "$D/labels.tsv" --split "$D/split.tsv" \
    --types "$E2E_TMP/types.tsv" --epochs 30 --threads 1
quiet "$WEFT" train --quiet --force --no-promote --store "$STORE" --model dot \
    --edges "$D/edges.tsv" --undirected --types "$E2E_TMP/types.tsv" --epochs 3 --threads 1
quiet "$WEFT" train --quiet --store "$STORE" --model dot --edges "$D/edges.tsv" --undirected \
    --epochs 1 --dim 2 --threads 1
check "version 3 was rejected by the gate (the 422 case below needs it)" \
    sh -c "'$WEFT' snapshots list --store '$STORE' | grep -q '^ *3  rejected'"

start_server "$STORE" --admin-token-file "$E2E_TMP/token" $LIMITS || finish
cat >"$E2E_TMP/cases-live" <<'EOF'
[
    # links: GET
    ("GET", "/v1/links/predict?source=n0&k=3", 200),
    ("GET", "/v1/links/predict?target=n0&direction=in&k=3&pretty=1", 200),
    ("GET", "/v1/links/predict?source=n0&candidate_type=t3&include_known=true", 200),
    ("GET", "/v1/links/predict?source=n0&k=50", 200),
    ("GET", "/v1/links/predict?source=n0&k=51", 400),
    ("GET", "/v1/links/predict?source=n0&direction=sideways", 400),
    ("GET", "/v1/links/predict?source=n0&include_known=maybe", 400),
    ("GET", "/v1/links/predict?source=n0&target=n1", 400),
    ("GET", "/v1/links/predict?k=3", 400),
    ("GET", "/v1/links/predict?source=nobody", 404),
    ("GET", "/v1/links/predict?source=n0&candidate_type=t99", 404),
    ("GET", "/v1/links/predict?source=n0&relation=cites", 404),
    ("DELETE", "/v1/links/predict", 405),
    # links: POST predict
    ("POST", "/v1/links/predict", 200, {"queries": [
        {"source": "n0", "k": 2}, {"target": "n1", "direction": "in"},
        {"source": "n2", "candidate_type": "t4", "include_known": True, "relation": "link"},
        {"source": "nobody"}, {"source": "n0", "candidate_type": "t99"}]}),
    ("POST", "/v1/links/predict", 400, b'{"queries": [}'),
    ("POST", "/v1/links/predict", 400, b'{"queries": [], "queries": []}'),
    ("POST", "/v1/links/predict", 400),
    ("POST", "/v1/links/predict", 422, [1, 2]),
    ("POST", "/v1/links/predict", 422, {"queries": []}),
    ("POST", "/v1/links/predict", 422, {"querys": [{"source": "n0"}]}),
    ("POST", "/v1/links/predict", 422, {"queries": [{"source": 7}]}),
    ("POST", "/v1/links/predict", 422, {"queries": [{"source": "n0", "k": 51}]}),
    ("POST", "/v1/links/predict", 422, {"queries": [{"source": "n0", "top": 3}]}),
    ("POST", "/v1/links/predict", 422, {"queries": [{"relation": "link"}]}),
    ("POST", "/v1/links/predict", 413, {"queries": [{"source": "n0"}] * 21}),
    ("POST", "/v1/links/predict", 413, {"queries": [{"source": "n" + "0" * 20000}]}),
    # links: score and explain
    ("POST", "/v1/links/score", 200, {"triples": [
        {"source": "n0", "target": "n633"}, {"source": "n0", "relation": "link", "target": "n1"},
        {"source": "n0", "target": "nobody"}, {"source": "n0", "relation": "cites", "target": "n1"}]}),
    ("POST", "/v1/links/score", 422, {"triples": [{"source": "n0"}]}),
    ("POST", "/v1/links/score", 413, {"triples": [{"source": "n0", "target": "n1"}] * 21}),
    ("POST", "/v1/links/score", 400, b"not json"),
    ("GET", "/v1/links/score", 405),
    ("GET", "/v1/links/explain?source=n0&target=n1&k=3", 200),
    ("GET", "/v1/links/explain?source=n0&target=n633&relation=link", 200),
    ("GET", "/v1/links/explain?source=n0", 400),
    ("GET", "/v1/links/explain?source=n0&target=n1&k=1001", 400),
    ("GET", "/v1/links/explain?source=n0&target=nobody", 404),
    ("POST", "/v1/links/explain", 405, {}),
    # labels
    ("POST", "/v1/labels/predict", 200, {"nodes": ["n0", "n1", "nobody", ""]}),
    ("POST", "/v1/labels/predict", 422, {"nodes": "n0"}),
    ("POST", "/v1/labels/predict", 422, {"nodes": [1]}),
    ("POST", "/v1/labels/predict", 413, {"nodes": ["n0"] * 21}),
    ("GET", "/v1/labels/predict?node=n0", 200),
    ("GET", "/v1/labels/explain?node=n0", 200),
    # nodes
    ("GET", "/v1/nodes/n0", 200),
    ("GET", "/v1/nodes/n0?neighbours=2&pretty", 200),
    ("GET", "/v1/nodes/n0?neighbours=0", 400),
    ("GET", "/v1/nodes/n0?k=3", 400),
    ("GET", "/v1/nodes/nobody", 404),
    ("POST", "/v1/nodes/n0", 405, {}),
    ("GET", "/v1/nodes/n0/similar?k=5", 200),
    ("GET", "/v1/nodes/n0/similar?k=5&candidate_type=t3", 200),
    ("GET", "/v1/nodes/n0/similar?k=51", 400),
    ("GET", "/v1/nodes/nobody/similar", 404),
    ("GET", "/v1/nodes/n0/similar?candidate_type=t99", 404),
    # the map and the analyst page
    ("GET", "/v1/map", 200),
    ("GET", "/v1/map?max_points=20&pretty=1", 200),
    ("GET", "/v1/map?max_points=0", 400),
    ("GET", "/v1/map?max_points=20001", 400),
    ("GET", "/v1/map?points=3", 400),
    ("POST", "/v1/map", 405, {}),
    ("GET", "/", 200),
    ("GET", "/assets/app.js", 200),
    ("GET", "/assets/app.css", 200),
    ("GET", "/assets/nothing.js", 404),
    ("POST", "/", 405, {}),
    # snapshots and the admin routes
    ("GET", "/v1/snapshots", 200),
    ("GET", "/v1/snapshots?all=1", 400),
    ("POST", "/v1/snapshots", 405, {}),
    ("POST", "/v1/snapshots/2/promote", 401),
    ("POST", "/v1/snapshots/2/promote", 401, None, "wrong"),
    ("POST", "/v1/snapshots/rollback", 401),
    ("POST", "/v1/snapshots/abc/promote", 400, None, "admin"),
    ("POST", "/v1/snapshots/2/promote", 400, b"{", "admin"),
    ("POST", "/v1/snapshots/2/promote", 422, {"force": "yes"}, "admin"),
    ("POST", "/v1/snapshots/2/promote", 422, {"forse": True}, "admin"),
    ("POST", "/v1/snapshots/99/promote", 404, None, "admin"),
    ("POST", "/v1/snapshots/3/promote", 422, {"reason": "try"}, "admin"),
    ("GET", "/v1/snapshots/2/promote", 405),
    ("POST", "/v1/snapshots/2/promote", 200, {"reason": "contract test"}, "admin"),
    ("POST", "/v1/snapshots/rollback", 200, {"reason": "contract test"}, "admin"),
    ("POST", "/v1/snapshots/rollback", 404, None, "admin"),   # 1 had no previous version
    ("POST", "/v1/snapshots/rollback", 422, {"force": True}, "admin"),
    ("POST", "/v1/snapshots/1/promote", 200, None, "admin"),   # already live: no change
    ("GET", "/v1/snapshots", 200),
]
EOF
check "live snapshot: responses match the spec" contract "$E2E_TMP/cases-live"
stop_server

# ---- admin routes off; a label model only ----
start_server "$STORE" || finish
cat >"$E2E_TMP/cases-off" <<'EOF'
[
    ("POST", "/v1/snapshots/2/promote", 404, None, "admin"),
    ("POST", "/v1/snapshots/rollback", 404, None, "admin"),
]
EOF
check "admin routes off: 404 with the spec's Error" contract "$E2E_TMP/cases-off"
stop_server

LSTORE="$E2E_TMP/labels-store"
quiet "$WEFT" train --quiet --force --store "$LSTORE" --model gcn --edges "$D/edges.tsv" \
    --features "$D/features.tsv" --labels "$D/labels.tsv" --split "$D/split.tsv" --epochs 5 \
    --threads 1
start_server "$LSTORE" || finish
cat >"$E2E_TMP/cases-labels" <<'EOF'
[
    ("GET", "/v1/nodes/n0?neighbours=3", 200),
    ("GET", "/v1/nodes/n0/similar", 404),
    ("POST", "/v1/links/predict", 404, {"queries": [{"source": "n0"}]}),
    ("POST", "/v1/links/score", 404, {"triples": [{"source": "n0", "target": "n1"}]}),
    ("GET", "/v1/links/explain?source=n0&target=n1", 404),
    ("POST", "/v1/labels/predict", 200, {"nodes": ["n0"]}),
    ("GET", "/v1/map?max_points=50", 200),
]
EOF
check "label model only: responses match the spec" contract "$E2E_TMP/cases-labels"
stop_server

# ---- the server's other routes (liveness, readiness, health, metrics) ----
start_server "$STORE" || finish
cat >"$E2E_TMP/cases-ops" <<'EOF'
[
    ("GET", "/healthz", 200),
    ("GET", "/readyz", 200),
    ("GET", "/v1/health", 200),
    ("GET", "/metrics", 200),
    ("GET", "/v1/model", 200),
]
EOF
check "every documented operation answered 2xx, every answer as documented" \
    contract "$E2E_TMP/cases-ops" --coverage

finish
