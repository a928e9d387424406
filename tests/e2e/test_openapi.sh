#!/bin/sh
# openapi/openapi.yaml: valid against Debian's official OpenAPI 3.0 schema
# (/usr/share/openapi-specification/schemas/v3.0/schema.json, package openapi-specification),
# and true to the server: it lists exactly the server's routes, and the server's responses,
# errors included, have the statuses and shapes it documents.
set -u
. "$TOP/tests/e2e/lib.sh"

SPEC="$TOP/openapi/openapi.yaml"
OFFICIAL=/usr/share/openapi-specification/schemas/v3.0/schema.json

# The YAML goes through JSON first: PyYAML reads an unquoted 200: key as an int and a bare
# date as a date, which the schema check would crash on instead of reporting.
check "openapi.yaml is valid OpenAPI 3.0 (official schema)" /usr/bin/python3 -c '
import sys, json, yaml, jsonschema as J
s = json.load(open(sys.argv[2]))
d = json.loads(json.dumps(yaml.safe_load(open(sys.argv[1])), default=str))
e = J.exceptions.best_match(J.Draft4Validator(s).iter_errors(d))
print("OK" if e is None else "INVALID at /%s: %s" % ("/".join(map(str, e.absolute_path)), e.message[:160]))
sys.exit(e is not None)' "$SPEC" "$OFFICIAL"

# The official schema does not resolve $ref: check every reference points somewhere.
check "every \$ref in openapi.yaml resolves" /usr/bin/python3 -c '
import sys, yaml
d = yaml.safe_load(open(sys.argv[1]))
def refs(x):
    if isinstance(x, dict):
        for k, v in x.items():
            if k == "$ref":
                yield v
            else:
                yield from refs(v)
    elif isinstance(x, list):
        for v in x:
            yield from refs(v)
bad = 0
for r in refs(d):
    node = d
    for part in r.lstrip("#/").split("/"):
        node = node.get(part) if isinstance(node, dict) else None
    if not r.startswith("#/") or node is None:
        print("dangling", r)
        bad += 1
sys.exit(bad)' "$SPEC"

# contract.py SPEC BASE CASE...: each CASE is "METHOD PATH STATUS". The answer must have
# STATUS, be JSON, and match the schema the spec gives for that operation and status
# (OpenAPI's nullable turned into JSON Schema). A path the spec does not list must answer
# 404 with the Error schema. A POST sends the body "x" (not JSON: 400). Routes with bodies
# and path parameters are called with real bodies by tests/e2e/test_contract.sh.
cat >"$E2E_TMP/contract.py" <<'EOF'
import json, os, sys, urllib.error, urllib.request
import yaml, jsonschema

spec_path, base, cases = sys.argv[1], sys.argv[2], sys.argv[3:]
sys.path.insert(0, os.path.join(os.environ["TOP"], "tests", "e2e"))
import openapi_schema
doc, resolver = openapi_schema.load(spec_path)

def resolve(node):
    while "$ref" in node:
        node = resolver.resolve(node["$ref"])[1]
    return node

bad = 0
for case in cases:
    method, path, want = case.split()
    req = urllib.request.Request(base + path, method=method, data=b"x" if method == "POST" else None)
    try:
        resp = urllib.request.urlopen(req)
    except urllib.error.HTTPError as e:
        resp = e
    status, body, headers = resp.status, resp.read(), resp.headers
    route = path.split("?")[0]
    problems = []
    if str(status) != want:
        problems.append(f"status {status}")
    ctype = headers.get("Content-Type", "")
    is_text = False   # a documented text/plain answer: the Prometheus text format 0.0.4
    if route in doc["paths"]:
        op = doc["paths"][route].get(method.lower())
        if op is None:
            op = doc["paths"][route]["get"]   # a wrong method: the 405 of the path
        documented = op["responses"].get(str(status))
        if documented is None:
            problems.append(f"status {status} is not documented for {method} {route}")
            schema = None
        else:
            documented = resolve(documented)
            is_text = "text/plain" in documented["content"]
            schema = None if is_text else documented["content"]["application/json"]["schema"]
            if status == 405 and "Allow" not in headers:
                problems.append("405 without an Allow header")
    else:
        schema = {"$ref": "#/components/schemas/Error"}
    if is_text and not (ctype.startswith("text/plain; version=0.0.4")
                        and body.decode("utf-8").endswith("\n")):
        problems.append(f"not the Prometheus text format: Content-Type {ctype}")
    if not is_text and ctype != "application/json":
        problems.append(f"Content-Type {ctype}")
    if schema is not None:
        try:
            jsonschema.Draft4Validator(schema, resolver=resolver).validate(json.loads(body))
        except (ValueError, jsonschema.ValidationError, jsonschema.RefResolutionError) as e:
            problems.append(f"body does not match the spec: {str(e)[:300]}")
    print(("FAIL " if problems else "ok   ") + case + ("; ".join([""] + problems)))
    bad += bool(problems)
sys.exit(1 if bad else 0)
EOF

STORE="$E2E_TMP/store"
mkdir "$STORE"
start_server "$STORE" || finish

check "empty store: responses match the spec" /usr/bin/python3 "$E2E_TMP/contract.py" \
    "$SPEC" "$BASE" \
    "GET /healthz 200" \
    "GET /readyz 503" \
    "GET /v1/health 503" \
    "GET /metrics 200" \
    "GET /v1/model 503" \
    "GET /v1/links/predict?source=m0 503" \
    "GET /v1/labels/predict?node=m0 503" \
    "GET /v1/labels/explain?node=m0 503"

# A model that stays at its random start (--lr 1e-6) cannot beat popularity, so the gate
# refuses it (--force stores it anyway) and /v1/health fails: this test is about response
# shapes, the 503 of a failing health among them; the gate has its own (test_gate.sh).
"$WEFT" train --quiet --force --store "$STORE" --edges "$TOP/tests/data/karate/edges.tsv" \
    --model dot --undirected --lr 0.000001 >"$E2E_TMP/train.log" 2>&1
i=0
until curl -sS "$BASE/healthz" | grep -q '"version":1' || [ $i -ge 50 ]; do
    sleep 0.1
    i=$((i + 1))
done

check "live snapshot: responses match the spec" /usr/bin/python3 "$E2E_TMP/contract.py" \
    "$SPEC" "$BASE" \
    "GET /healthz 200" \
    "GET /healthz?pretty=1 200" \
    "GET /v1/model 200" \
    "GET /v1/model?pretty 200" \
    "GET /v1/model?verbose=1 400" \
    "GET /v1/links/predict?source=m0&k=3 200" \
    "GET /v1/links/predict?source=m0&relation=link&pretty=1 200" \
    "GET /v1/links/predict?source=m0&k=1000 200" \
    "GET /v1/links/predict?source=nobody 404" \
    "GET /v1/links/predict?source=m0&relation=nothing 404" \
    "GET /v1/links/predict?k=3 400" \
    "GET /v1/links/predict?source=m0&k=0 400" \
    "GET /v1/links/predict?source=m0&k=1001 400" \
    "GET /v1/links/predict?source=m0&top=3 400" \
    "POST /v1/links/predict 400" \
    "PUT /v1/links/predict 405" \
    "DELETE /v1/model 405" \
    "POST /healthz 405" \
    "GET /readyz 200" \
    "GET /readyz?pretty=1 200" \
    "POST /readyz 405" \
    "GET /v1/health 503" \
    "GET /v1/health?pretty=1 503" \
    "GET /v1/health?verbose=1 400" \
    "DELETE /v1/health 405" \
    "GET /metrics 200" \
    "POST /metrics 405" \
    "GET /v1 404" \
    "GET /v1/links/predict/ 404" \
    "GET /v1/labels/predict?node=m0 404" \
    "GET /v1/labels/explain?node=m0 404"

# The 404 for an unknown path lists every route as "METHOD /path, ..." in its hint.
check "the spec lists exactly the server's routes" /usr/bin/python3 -c '
import json, sys, urllib.error, urllib.request, yaml
spec = yaml.safe_load(open(sys.argv[1]))
documented = {f"{m.upper()} {p}" for p, ops in spec["paths"].items() for m in ops
              if m in ("get", "put", "post", "delete", "patch", "head", "options")}
try:
    urllib.request.urlopen(sys.argv[2] + "/no/such/route")
    sys.exit(1)
except urllib.error.HTTPError as e:
    served = set(json.load(e)["error"]["hint"].split(", "))
if served != documented:
    print("served only:", sorted(served - documented), "documented only:", sorted(documented - served))
sys.exit(served != documented)' "$SPEC" "$BASE"

# A label model only, in a store of its own (a run in the store above would carry its link
# model over): GCN on karate's two factions (tests/data/karate/labels.tsv).
stop_server
LSTORE="$E2E_TMP/labels-store"
"$WEFT" train --quiet --force --store "$LSTORE" --edges "$TOP/tests/data/karate/edges.tsv" \
    --labels "$TOP/tests/data/karate/labels.tsv" --model gcn --epochs 20 \
    >>"$E2E_TMP/train.log" 2>&1
start_server "$LSTORE" || finish

check "label model: responses match the spec" /usr/bin/python3 "$E2E_TMP/contract.py" \
    "$SPEC" "$BASE" \
    "GET /v1/model 200" \
    "GET /v1/health 503" \
    "GET /metrics 200" \
    "GET /v1/labels/predict?node=m0 200" \
    "GET /v1/labels/predict?node=m33&pretty=1 200" \
    "GET /v1/labels/predict?node=nobody 404" \
    "GET /v1/labels/predict 400" \
    "GET /v1/labels/predict?node= 400" \
    "GET /v1/labels/predict?node=m0&k=3 400" \
    "POST /v1/labels/predict 400" \
    "PUT /v1/labels/predict 405" \
    "GET /v1/labels/explain?node=m0 200" \
    "GET /v1/labels/explain?node=m33&k=1 200" \
    "GET /v1/labels/explain?node=m0&k=1000 200" \
    "GET /v1/labels/explain?node=nobody 404" \
    "GET /v1/labels/explain?k=3 400" \
    "GET /v1/labels/explain?node=m0&k=0 400" \
    "GET /v1/labels/explain?node=m0&k=1001 400" \
    "GET /v1/labels/explain?node=m0&top=3 400" \
    "DELETE /v1/labels/explain 405" \
    "GET /v1/links/predict?source=m0 404"

finish
