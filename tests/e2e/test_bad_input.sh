#!/bin/sh
# The bad-input catalogue (docs/bad-input.md): what weft answers to input that is wrong, on
# the command line and over HTTP, case by case. Each case checks the exit status (CLI) or
# the HTTP status, the message (file, line and field for a file; for HTTP the JSON error of
# the spec's Error schema: code, message, hint), and that nothing changed: the store (the
# SHA-256 of data.mdb after each case, which any commit changes; `weft snapshots list --json`
# after each part) and the running server (the same version and the same answers to a link
# and a label query as before the case). The slow clients run in threads beside the HTTP
# cases, which therefore also show that other requests are answered meanwhile.
# Every case id here must have its row in docs/bad-input.md and every row its case; the last
# check compares the two.
# Data: Zachary's karate club (tests/data/karate, provenance in tests/data/README.md); the
# bad files are written below, each a small edit of a good one. The store: version 1 live
# (dot + GCN, node types), 2 staged, 3 rejected by the gate; no previous version.
# Run alone: BUILD=build sh tests/e2e/test_bad_input.sh (tests/e2e/run.sh sets the same).
set -u
TOP=${TOP:-$(cd "$(dirname "$0")/../.." && pwd)}
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
WEFT=${WEFT:-$BUILD/weft}
if [ -z "${E2E_TMP:-}" ]; then
    E2E_TMP=$(mktemp -d "${TMPDIR:-/tmp}/weft-e2e.XXXXXX")
    trap 'rm -rf "$E2E_TMP"' EXIT
fi
export TOP BUILD WEFT E2E_TMP
. "$TOP/tests/e2e/lib.sh"

K="$TOP/tests/data/karate"
S="$E2E_TMP/store"
B="$E2E_TMP/bad"          # the bad files; CLI cases run here, so messages name them plainly
mkdir -p "$B"
TOKEN="bad-input-token-$$-0123456789"
printf '%s\n' "$TOKEN" >"$E2E_TMP/token"
chmod 600 "$E2E_TMP/token"
TIMEOUT=$(sed -n 's/^#define HTTP_TIMEOUT_SECONDS \([0-9]*\).*/\1/p' "$TOP/server/http.h")

# ---- the store and the server every case must leave as they were ----

sed 's/\tfaction/\tkind/' "$K/labels.tsv" >"$B/types.tsv"
train() { "$WEFT" train --store "$S" --quiet --threads 1 --edges "$K/edges.tsv" --undirected \
    --types "$B/types.tsv" "$@" >>"$E2E_TMP/train.log" 2>&1; }
train --model dot,gcn --labels "$K/labels.tsv" --holdout 0.1,0.2 --force
check "setup: version 1, dot + GCN, live" test $? -eq 0
train --model dot --seed 5 --force --no-promote
check "setup: version 2 staged" test $? -eq 0
train --model dot --seed 7 --epochs 1
check "setup: version 3, one epoch, rejected by the gate (exit 3)" test $? -eq 3
start_server "$S" --admin-token-file "$E2E_TMP/token" --max-batch 5 --max-body 100000 \
    --access-log off || finish

# state: what must not change, checked after every case: the store's data file (any commit
# changes it) and the served answers. listed: the store's versions, checked after each part.
state() {
    sha256sum <"$S/data.mdb"
    curl -sS "$BASE/v1/links/predict?source=m0&k=5" "$BASE/v1/labels/predict?node=m0"
}
listed() { "$WEFT" snapshots list --json --store "$S" 2>&1; }
BEFORE=$(state)
LISTED=$(listed)
case "$BEFORE" in *'{"version":1,"source":"m0"'*) serving=1 ;; *) serving=0 ;; esac
check "setup: the server answers from version 1" test "$serving" -eq 1
: >"$E2E_TMP/ids"

# cli_case ID EXIT PATTERN ARG...: `weft ARG...`, run in $B, must exit with EXIT and print a
# line matching PATTERN (grep -E) on stderr, and leave the store and the server as they were.
cli_case() {
    id=$1 want=$2 pattern=$3
    shift 3
    echo "$id" >>"$E2E_TMP/ids"
    (cd "$B" && "$WEFT" "$@") >"$E2E_TMP/out" 2>"$E2E_TMP/err"
    got=$?
    why=""
    [ "$got" -eq "$want" ] || why="exit status $got, not $want;"
    grep -qE -- "$pattern" "$E2E_TMP/err" || why="$why stderr does not match /$pattern/;"
    now=$(state)
    if [ "$now" != "$BEFORE" ]; then
        why="$why the store or the served answers changed;"
        BEFORE=$now   # report it once, not in every later case
    fi
    if [ -n "$why" ]; then
        echo "  $id: $why"
        sed 's/^/    stderr: /' "$E2E_TMP/err" | head -n 4
    fi
    check "$id weft $1: exit $want, /$pattern/, nothing changed" test -z "$why"
}

# ---- the bad files: each a small edit of a good one ----

cd "$B" || finish
head -n 20 "$K/edges.tsv" >good.tsv
: >empty.tsv
printf '# edges to come\n\n   \n' >comments.tsv
printf 'm0\tm1\nm2\n' >onecol.tsv
printf 'm0\tlink\tm1\tm2\n' >fourcol.tsv
printf 'm0\tm1\nm0\tlink\tm2\n' >mixed.tsv
printf 'm0\tm1\nm1\tm\351t\351\n' >latin1.tsv
printf 'm0\tm1\nm1\tm2\000x\n' >nul.tsv
printf 'm0\tm1\rm1\tm2\rm2\tm3\r' >cr.tsv
printf 'm0\t\tm1\n' >emptyfield.tsv
/usr/bin/python3 -c 'print("m0\t" + "x" * 1025)' >longname.tsv
/usr/bin/python3 -c 'print("m0\t" + "x" * 3000000)' >hugeline.tsv
printf '"m0,m1\n' >quote.csv
gzip -c "$TOP/tests/data/cora/edges.tsv" | head -c 4000 >truncated.tsv.gz
printf 'm0 m1\nm1 m2\n' >spaces.tsv
mkdir -p adir
cp good.tsv unreadable.tsv
chmod 000 unreadable.tsv
sed 's/$/\r/' good.tsv >crlf.tsv
printf '\357\273\277' | cat - good.tsv >bom.tsv
{ cat good.tsv; head -n 3 good.tsv; printf 'm5\tm5\n'; } >dups.tsv
sed -n 1,60p "$K/edges.tsv" >train.tsv
sed -n 61,70p "$K/edges.tsv" >valid.tsv
sed -n 71,78p "$K/edges.tsv" >test.tsv
{ cat test.tsv; head -n 2 valid.tsv; } >test-in-valid.tsv

for i in $(seq 0 33); do printf 'm%d\t%d:1 %d\n' "$i" $((i % 5)) $((5 + i % 3)); done >features.tsv
feature() { sed "3s/.*/m2\t$2/" features.tsv >"$1"; }
feature f-nan.tsv '1:nan'
feature f-inf.tsv '1:inf'
feature f-negative.tsv '-1:1'
feature f-huge.tsv '99999999999:1'
feature f-fraction.tsv '1.5:1'
feature f-value.tsv '1:abc'
feature f-overflow.tsv '1:1e39'
feature f-twice.tsv '1 4 1'
{ cat features.tsv; printf 'ghost\t1\n'; } >f-unknown.tsv
{ cat features.tsv; printf 'm2\t4\n'; } >f-node-twice.tsv
printf '# no features yet\n' >f-none.tsv

{ cat "$K/labels.tsv"; printf 'ghost\tfaction0\n'; } >l-unknown.tsv
{ cat "$K/labels.tsv"; printf 'm0\tfaction1\n'; } >l-contradict.tsv
sed '2s/$/\textra/' "$K/labels.tsv" >l-extra.tsv
sed 's/\tfaction./\tsame/' "$K/labels.tsv" >l-one-class.tsv
sed '2s/\t.*/\t/' "$K/labels.tsv" >l-empty-class.tsv
sed '2s/\t/ /' "$K/labels.tsv" >l-spaces.tsv

awk '{ print $1 "\t" (NR <= 20 ? "train" : NR <= 27 ? "valid" : "test") }' \
    "$K/labels.tsv" >split.tsv
{ cat split.tsv; printf 'm3\ttest\n'; } >s-two-parts.tsv
sed '1s/train$/training/' split.tsv >s-part.tsv
{ cat split.tsv; printf 'ghost\ttrain\n'; } >s-unknown.tsv
sed 's/\ttrain$/\tvalid/' split.tsv >s-no-train.tsv
sed 's/\ttest$/\tvalid/' split.tsv >s-no-test.tsv
head -n 20 "$K/labels.tsv" >l-first-20.tsv
{ cat types.tsv; printf 'ghost\tkind0\n'; } >t-unknown.tsv

printf 'hello\n' >a-file
mkdir -p garbage no-store
head -c 65536 /dev/urandom >garbage/data.mdb
GARBAGE_SUM=$(sha256sum <garbage/data.mdb)
printf 'notes\n' >no-store/notes.txt
"$WEFT" snapshots export 1 good.snap --store "$S" >/dev/null
/usr/bin/python3 - <<'EOF'
good = open("good.snap", "rb").read()
open("truncated.snap", "wb").write(good[: len(good) // 2])
flipped = bytearray(good)
flipped[len(good) // 2] ^= 0xFF          # inside a blob's data: its CRC-32 finds it
open("flipped.snap", "wb").write(flipped)
trailer = bytearray(good)
trailer[-1] ^= 0x01                      # the SHA-256 at the end
open("trailer.snap", "wb").write(trailer)
fmt = bytearray(good)
fmt[8] = 9                               # format 9 (little-endian u32 after the magic)
open("format9.snap", "wb").write(fmt)
EOF
printf 'm0\tghost\n' >eval-unknown.tsv
cd "$TOP" || finish
check "setup: the bad files are written" test -s "$B/hugeline.tsv" -a -s "$B/good.snap"

# ---- the catalogue: HTTP ----

# bad_http.py BASE SPEC STORE TOKEN TIMEOUT RESULTS: runs every HTTP case (raw sockets, so
# that any byte can be sent), and the slow clients in threads beside them; writes one line
# per case to RESULTS: "ok|ID what" or "FAIL|ID what|why".
cat >"$E2E_TMP/bad_http.py" <<'EOF'
import hashlib, json, os, re, socket, sys, threading, time
sys.path.insert(0, os.path.join(os.environ["TOP"], "tests", "e2e"))
import jsonschema
import openapi_schema

base, spec, store, token, timeout, results_path = sys.argv[1:7]
timeout = int(timeout)
host, port = base.split("//")[1].split(":")
port = int(port)
doc, resolver = openapi_schema.load(spec)
schemas = doc["components"]["schemas"]

def validate(value, name):
    jsonschema.validate(value, schemas[name], resolver=resolver)

def raw(data, wait=10):
    """Send bytes, read until the server closes. Returns (status, headers, body bytes)."""
    s = socket.create_connection((host, port), timeout=wait)
    s.sendall(data)
    out = b""
    try:
        while True:
            b = s.recv(65536)
            if not b:
                break
            out += b
    except (socket.timeout, ConnectionResetError):
        pass
    s.close()
    head, _, body = out.partition(b"\r\n\r\n")
    lines = head.split(b"\r\n")
    m = re.match(rb"HTTP/1\.1 (\d+)", lines[0]) if lines[0] else None
    headers = {}
    for line in lines[1:]:
        k, _, v = line.partition(b":")
        headers[k.decode("latin-1").strip().lower()] = v.decode("latin-1").strip()
    return (int(m.group(1)) if m else None), headers, body

def request(method, target, body=None, headers=(), chunked=None):
    h = [method.encode() + b" " + target + b" HTTP/1.1", b"Host: weft", b"Connection: close"]
    h += [x.encode() if isinstance(x, str) else x for x in headers]
    data = b""
    if chunked is not None:
        h.append(b"Transfer-Encoding: chunked")
        data = b"".join(b"%x\r\n" % len(c) + c + b"\r\n" for c in chunked) + b"0\r\n\r\n"
    elif body is not None:
        h.append(b"Content-Length: %d" % len(body))
        data = body
    return raw(b"\r\n".join(h) + b"\r\n\r\n" + data)

def state():
    return hashlib.sha256(open(os.path.join(store, "data.mdb"), "rb").read()).hexdigest()

def served():
    return (request("GET", b"/v1/links/predict?source=m0&k=5")[2],
            request("GET", b"/v1/labels/predict?node=m0")[2])

STATE, SERVED = state(), served()
ADMIN = ["Authorization: Bearer " + token]
WRONG = ["Authorization: Bearer " + token + "x"]
J = lambda v: json.dumps(v).encode()
P = b"/v1/links/predict"
Q = lambda **kw: J({"queries": [kw]})

# (id, what, request, status, code or None for libmicrohttpd's own answer, message pattern,
#  checks: {"allow": ..., "auth": True, "item": (key, index, status, code)})
CASES = [
    ("H01", "unknown source", ("GET", P + b"?source=ghost"), 404, "not_found", r"^source node 'ghost' is not in snapshot 1$", {}),
    ("H02", "source empty", ("GET", P + b"?source="), 400, "bad_request", r"^'source' is empty$", {}),
    ("H03", "no source", ("GET", P), 400, "bad_request", r"'source' \(or 'target' with direction=in\) is missing", {}),
    ("H04", "k=abc", ("GET", P + b"?source=m0&k=abc"), 400, "bad_request", r"^k must be a whole number from 1 to 1000, not 'abc'$", {}),
    ("H05", "k=0", ("GET", P + b"?source=m0&k=0"), 400, "bad_request", r"^k must be a whole number from 1 to 1000, not '0'$", {}),
    ("H06", "k=-1", ("GET", P + b"?source=m0&k=-1"), 400, "bad_request", r"not '-1'$", {}),
    ("H07", "k=1e9", ("GET", P + b"?source=m0&k=1e9"), 400, "bad_request", r"not '1e9'$", {}),
    ("H08", "k=1000000000", ("GET", P + b"?source=m0&k=1000000000"), 400, "bad_request", r"^k=1000000000 is above this server's limit of 1000$", {}),
    ("H09", "k of 40 digits", ("GET", P + b"?source=m0&k=" + b"9" * 40), 400, "bad_request", r"is above this server's limit of 1000$", {}),
    ("H10", "k given twice", ("GET", P + b"?source=m0&k=1&k=2"), 400, "bad_request", r"^query parameter 'k' is given more than once$", {}),
    ("H11", "unknown relation", ("GET", P + b"?source=m0&relation=nope"), 404, "not_found", r"^relation 'nope' is not in snapshot 1$", {}),
    ("H12", "unknown candidate_type", ("GET", P + b"?source=m0&candidate_type=nope"), 404, "not_found", r"^node type 'nope' is not in snapshot 1$", {}),
    ("H13", "direction=up", ("GET", P + b"?source=m0&direction=up"), 400, "bad_request", r"^direction must be out or in, not 'up'$", {}),
    ("H14", "include_known=maybe", ("GET", P + b"?source=m0&include_known=maybe"), 400, "bad_request", r"^include_known must be true or false", {}),
    ("H15", "a misspelt parameter", ("GET", P + b"?sourc=m0"), 400, "bad_request", r"^unknown query parameter 'sourc'$", {}),
    ("H16", "invalid UTF-8 in a value", ("GET", P + b"?source=m%FF"), 400, "bad_request", r"^query parameter 'source' is not valid UTF-8$", {}),
    ("H17", "raw invalid UTF-8 in the query", ("GET", P + b"?source=m\xff"), 400, "bad_request", r"is not valid UTF-8$", {}),
    ("H18", "a NUL byte in a value", ("GET", P + b"?source=m0%00x"), 400, "bad_request", r"^query parameter 'source' contains a NUL byte$", {}),
    ("H19", "invalid UTF-8 in a parameter name", ("GET", P + b"?%FF=1"), 400, "bad_request", r"^a query parameter name is not valid UTF-8$", {}),
    ("H20", "a NUL byte in the path", ("GET", b"/v1/nodes/m0%00x"), 400, "bad_request", r"NUL", {}),
    ("H21", "invalid UTF-8 in the path", ("GET", b"/v1/nodes/m%FF"), 400, "bad_request", r"^the path segment after '/v1/nodes/' is not valid UTF-8$", {}),
    ("H22", "path traversal in a node name", ("GET", b"/v1/nodes/..%2F..%2Fetc%2Fpasswd"), 404, "not_found", r"^node '\.\./\.\./etc/passwd' is not in snapshot 1$", {}),
    ("H70", "path traversal in an asset name", ("GET", b"/assets/..%2F..%2Fetc%2Fpasswd"), 404, "not_found", r"/assets/\.\./\.\./etc/passwd$", {}),
    ("H23", "path traversal in the path", ("GET", b"/../../etc/passwd"), 404, "not_found", r"^no route GET /\.\./\.\./etc/passwd$", {}),
    ("H24", "unknown route", ("GET", b"/v2/links/predict?source=m0"), 404, "not_found", r"^no route GET /v2/links/predict$", {}),
    ("H25", "DELETE on a GET and POST route", ("DELETE", P), 405, "method_not_allowed", r"^DELETE /v1/links/predict is not supported; use GET, POST$", {"allow": "GET, POST"}),
    ("H26", "GET on a POST route", ("GET", b"/v1/links/score"), 405, "method_not_allowed", r"use POST$", {"allow": "POST"}),
    ("H27", "unknown label node", ("GET", b"/v1/labels/predict?node=ghost"), 404, "not_found", r"^node 'ghost' is not in snapshot 1$", {}),
    ("H28", "labels explain k=0", ("GET", b"/v1/labels/explain?node=m0&k=0"), 400, "bad_request", r"^k must be a whole number from 1 to", {}),
    ("H29", "similar k=abc", ("GET", b"/v1/nodes/m0/similar?k=abc"), 400, "bad_request", r"^k must be a whole number", {}),
    ("H30", "explain without target", ("GET", b"/v1/links/explain?source=m0"), 400, "bad_request", r"^'target' is missing$", {}),
    # Bodies.
    ("H31", "POST without a body", ("POST", P, b""), 400, "bad_request", r"^this route needs a JSON body$", {}),
    ("H32", "a form instead of JSON", ("POST", P, b"source=m0", ["Content-Type: application/x-www-form-urlencoded"]), 400, "bad_request", r"^the body is not valid JSON: .* at line 1, column \d+ \(byte \d+\)$", {}),
    ("H33", "truncated JSON", ("POST", P, b'{"queries": [{"source": "m0"}'), 400, "bad_request", r"^the body is not valid JSON: .*line 1", {}),
    ("H34", "a JSON array", ("POST", P, b"[]"), 422, "unprocessable", r"^the body must be a JSON object$", {}),
    ("H35", "a JSON string", ("POST", P, b'"m0"'), 422, "unprocessable", r"^the body must be a JSON object$", {}),
    ("H36", "a key given twice", ("POST", P, b'{"queries": [{"source": "m0"}], "queries": []}'), 400, "bad_request", r"^the body is not valid JSON: duplicate object key", {}),
    ("H37", "a key given twice in an item", ("POST", P, b'{"queries": [{"source": "m0", "source": "m1"}]}'), 400, "bad_request", r"duplicate object key", {}),
    ("H38", "nesting 10,000 deep", ("POST", P, b"[" * 10000 + b"]" * 10000), 400, "bad_request", r"maximum parsing depth reached", {}),
    ("H39", "nesting 10,000 deep in an object", ("POST", P, b'{"queries": ' + b'{"a": ' * 10000 + b"1" + b"}" * 10001), 400, "bad_request", r"maximum parsing depth reached", {}),
    ("H40", "invalid UTF-8 in the body", ("POST", P, b'{"queries": [{"source": "m\xff"}]}'), 400, "bad_request", r"unable to decode byte 0xff", {}),
    ("H41", "an escaped NUL in a string", ("POST", P, b'{"queries": [{"source": "m0\\u0000x"}]}'), 400, "bad_request", r"\\u0000 is not allowed", {}),
    ("H42", "a raw NUL byte in the body", ("POST", P, b'{"queries": [{"source": "m0\x00"}]}'), 400, "bad_request", r"control character 0x0", {}),
    ("H43", "a byte order mark before the JSON", ("POST", P, b"\xef\xbb\xbf" + Q(source="m0")), 400, "bad_request", r"^the body is not valid JSON", {}),
    ("H44", "queries not an array", ("POST", P, J({"queries": {"source": "m0"}})), 422, "unprocessable", r"^'queries' must be a non-empty array$", {}),
    ("H45", "queries empty", ("POST", P, J({"queries": []})), 422, "unprocessable", r"^'queries' must be a non-empty array$", {}),
    ("H46", "queries over --max-batch", ("POST", P, J({"queries": [{"source": "m0"}] * 6})), 413, "too_large", r"^'queries' holds 6 items$", {}),
    ("H47", "an unknown field", ("POST", P, J({"queries": [{"source": "m0"}], "limit": 1})), 422, "unprocessable", r"^the body: unknown field 'limit'$", {}),
    ("H48", "an item's unknown field", ("POST", P, Q(source="m0", top=3)), 422, "unprocessable", r"^queries\[0\]: unknown field 'top'$", {}),
    ("H49", "an item's k a string", ("POST", P, Q(source="m0", k="5")), 422, "unprocessable", r"^queries\[0\]\.k must be a whole number from 1 to 1000$", {}),
    ("H50", "an item's k 0", ("POST", P, Q(source="m0", k=0)), 422, "unprocessable", r"^queries\[0\]\.k must be", {}),
    ("H51", "an item's k -1", ("POST", P, Q(source="m0", k=-1)), 422, "unprocessable", r"^queries\[0\]\.k must be", {}),
    ("H52", "an item's k 1e9", ("POST", P, Q(source="m0", k=1e9)), 422, "unprocessable", r"^queries\[0\]\.k must be", {}),
    ("H53", "an item's k past 64 bits", ("POST", P, b'{"queries": [{"source": "m0", "k": 99999999999999999999999}]}'), 400, "bad_request", r"too big integer", {}),
    ("H54", "an item's source a number", ("POST", P, Q(source=7)), 422, "unprocessable", r"^queries\[0\]\.source must be a string$", {}),
    ("H55", "an item naming an unknown node", ("POST", P, Q(source="ghost")), 200, None, None, {"item": ("results", 0, 404, "not_found")}),
    ("H56", "an item naming an unknown relation", ("POST", P, Q(source="m0", relation="nope")), 200, None, None, {"item": ("results", 0, 404, "not_found")}),
    ("H57", "a triple with an unknown relation", ("POST", b"/v1/links/score", J({"triples": [{"source": "m0", "target": "m1", "relation": "nope"}]})), 200, None, None, {"item": ("scores", 0, 404, "not_found")}),
    ("H58", "label nodes not strings", ("POST", b"/v1/labels/predict", J({"nodes": [1]})), 422, "unprocessable", r"^nodes\[0\] must be a string$", {}),
    ("H59", "a body over --max-body", ("POST", P, Q(source="x" * 200000)), 413, "too_large", r"^the request body is larger than 100000 bytes$", {}),
    ("H60", "a chunked body over --max-body", ("CHUNKED", P, [b" " * 10000] * 15), 413, "too_large", r"^the request body is larger than 100000 bytes$", {}),
    # Admin routes.
    ("H61", "promote without a token", ("POST", b"/v1/snapshots/2/promote", b"{}"), 401, "unauthorized", r"^this admin route needs a bearer token$", {"auth": True}),
    ("H62", "promote with a wrong token", ("POST", b"/v1/snapshots/2/promote", b"{}", WRONG), 401, "unauthorized", r"^the bearer token is wrong$", {"auth": True}),
    ("H63", "promote with Basic instead of Bearer", ("POST", b"/v1/snapshots/2/promote", b"{}", ["Authorization: Basic " + token]), 401, "unauthorized", r"bearer", {"auth": True}),
    ("H64", "rollback with a wrong token", ("POST", b"/v1/snapshots/rollback", b"{}", WRONG), 401, "unauthorized", r"^the bearer token is wrong$", {"auth": True}),
    ("H65", "promote of a nonexistent version", ("POST", b"/v1/snapshots/99/promote", b"{}", ADMIN), 404, "not_found", r"^no snapshot version 99$", {}),
    ("H66", "promote of version abc", ("POST", b"/v1/snapshots/abc/promote", b"{}", ADMIN), 400, "bad_request", r"^'abc' is not a version number$", {}),
    ("H67", "promote of a rejected version", ("POST", b"/v1/snapshots/3/promote", b"{}", ADMIN), 422, "unprocessable", r"^version 3 was rejected", {}),
    ("H68", "rollback with nothing to roll back to", ("POST", b"/v1/snapshots/rollback", b"{}", ADMIN), 404, "not_found", r"no previous version to roll back to$", {}),
    ("H69", "promote with force a string", ("POST", b"/v1/snapshots/2/promote", J({"force": "yes"}), ADMIN), 422, "unprocessable", r"^'force' must be true or false$", {}),
    # Requests libmicrohttpd answers itself (HTML, neither logged nor counted).
    ("C01", "a header over 32 KiB", ("GET", b"/v1/model", None, ["X-Big: " + "a" * 40000]), 431, None, None, {}),
    ("C02", "a URL over 32 KiB", ("GET", b"/" + b"a" * 40000), 414, None, None, {}),
    ("C03", "Content-Length: abc", ("RAW", b"POST /v1/links/predict HTTP/1.1\r\nHost: weft\r\nConnection: close\r\nContent-Length: abc\r\n\r\n{}"), 400, None, None, {}),
    ("C04", "Content-Length over --max-body, no body sent", ("RAW", b"POST /v1/links/predict HTTP/1.1\r\nHost: weft\r\nConnection: close\r\nContent-Length: 200000\r\n\r\n"), 413, "too_large", r"^the request body is larger than 100000 bytes$", {}),
    ("C05", "HTTP/9.9", ("RAW", b"GET /v1/model HTTP/9.9\r\nHost: weft\r\n\r\n"), 505, None, None, {}),
    ("C06", "a request line of garbage", ("RAW", b"GARBAGE\r\n\r\n"), None, None, None, {}),
]

results = []

def record(case_id, what, why):
    results.append(f"ok|{case_id} {what}" if not why else f"FAIL|{case_id} {what}|{why}")

def send(req):
    kind = req[0]
    if kind == "RAW":
        return raw(req[1])
    if kind == "CHUNKED":
        return request("POST", req[1], chunked=req[2])
    method, target = req[0], req[1]
    body = req[2] if len(req) > 2 else None
    headers = req[3] if len(req) > 3 else ()
    return request(method, target, body, headers)

def run_case(case):
    case_id, what, req, want, code, pattern, extra = case
    why = []
    try:
        status, headers, body = send(req)
    except OSError as e:
        return record(case_id, what, f"request failed: {e}")
    if status != want:
        why.append(f"status {status}, not {want}: {body[:200]!r}")
    elif code is not None:
        try:
            d = json.loads(body)
            validate(d, "Error")
            err = d["error"]
            if err["code"] != code:
                why.append(f"code {err['code']}, not {code}")
            if not re.search(pattern, err["message"]):
                why.append(f"message {err['message']!r} does not match /{pattern}/")
            if not err["hint"]:
                why.append("no hint")
            if d["version"] != 1:
                why.append(f"version {d['version']}")
        except (ValueError, jsonschema.ValidationError) as e:
            why.append(f"not the Error schema: {e}: {body[:200]!r}")
    if "allow" in extra and headers.get("allow") != extra["allow"]:
        why.append(f"Allow: {headers.get('allow')!r}, not {extra['allow']!r}")
    if extra.get("auth") and not headers.get("www-authenticate", "").startswith("Bearer"):
        why.append("no WWW-Authenticate: Bearer")
    if "item" in extra and status == 200:
        key, i, item_status, item_code = extra["item"]
        try:
            item = json.loads(body)[key][i]
            validate(item, "ItemError")
            if item["status"] != item_status or item["error"]["code"] != item_code:
                why.append(f"item {item}")
        except (ValueError, KeyError, IndexError, jsonschema.ValidationError) as e:
            why.append(f"item not an ItemError: {e}")
    if not served_as_before():
        why.append("the served answers changed")
    if state() != STATE:
        why.append("the store changed")
    record(case_id, what, "; ".join(why))

# The slow clients, in threads beside the cases: each must be disconnected by the
# connection timeout, the trickling ones too (a byte a second is never idle). Meanwhile
# every other request must be answered: answered_meanwhile counts the probes answered as
# before while all of them were still connected.
slow = {}
threads = []
answered_meanwhile = 0

def served_as_before():
    global answered_meanwhile
    same = served() == SERVED
    if same and threads and all(t.is_alive() for t in threads):
        answered_meanwhile += 1
    return same

def slow_client(case_id, what, first, trickle):
    s = socket.create_connection((host, port))
    t0 = time.time()
    s.sendall(first)
    s.settimeout(1.0)
    got, closed_at = b"", None
    limit = timeout + 15
    i = 0
    while time.time() - t0 < limit:
        try:
            if i < len(trickle):
                s.sendall(trickle[i:i + 1])
                i += 1
            b = s.recv(4096)
            if not b:
                closed_at = time.time() - t0
                break
            got += b
        except socket.timeout:
            continue
        except OSError:
            closed_at = time.time() - t0
            break
    s.close()
    slow[case_id] = (what, closed_at, got)

SLOW = [
    ("C07", "headers sent one byte a second", b"", b"GET /v1/model HTTP/1.1\r\nHost: weft\r\nX-Slow: " + b"a" * 200),
    ("C08", "a body sent one byte a second", b"POST /v1/links/predict HTTP/1.1\r\nHost: weft\r\nContent-Length: 200\r\n\r\n", b"{" * 200),
    ("C09", "a connection that sends nothing", b"", b""),
    ("C10", "binary bytes, then nothing", b"\x00\x01\x02\x03\r\n\r\n", b""),
]
threads += [threading.Thread(target=slow_client, args=c) for c in SLOW]
for t in threads:
    t.start()
for case in CASES:
    run_case(case)
while any(t.is_alive() for t in threads):
    served_as_before()
    time.sleep(0.5)
for t in threads:
    t.join()
for case_id, what, _, _ in SLOW:
    _, closed_at, got = slow[case_id]
    why = ""
    if closed_at is None:
        why = f"still open after {timeout + 15} s"
    elif closed_at < timeout - 1:
        why = f"closed after {closed_at:.1f} s, before the timeout"
    elif got:
        why = f"answered {got[:60]!r}"
    record(case_id, what + f": closed by the {timeout} s timeout", why)
record("C11", "requests answered as before while the slow clients were connected",
       "" if answered_meanwhile > 0 and served() == SERVED
       else f"{answered_meanwhile} probes answered as before meanwhile")
with open(results_path, "w") as f:
    f.write("\n".join(results) + "\n")
EOF

# It runs beside the command-line cases: every case of either kind is read-only, so each
# checks the other's too, and the slow clients' wait overlaps the rest.
/usr/bin/python3 "$E2E_TMP/bad_http.py" "$BASE" "$TOP/openapi/openapi.yaml" "$S" "$TOKEN" \
    "$TIMEOUT" "$E2E_TMP/http-results" >"$E2E_TMP/http.log" 2>&1 &
HTTP_PID=$!

# ---- the catalogue: the command line ----
LINK="train --store $S --threads 1 --quiet"
GCN="train --store $S --threads 1 --quiet --model gcn --edges $K/edges.tsv"
LABELS="$K/labels.tsv"

#        id    exit  stderr (grep -E)                                                     weft ...
# Edge files.
cli_case E01   1  '^weft: missing\.tsv: No such file or directory$'                         $LINK --edges missing.tsv
cli_case E02   1  '^weft: adir: Is a directory$'                                             $LINK --edges adir
cli_case E04   1  '^weft: empty\.tsv: empty graph: no edges, only blank lines and comments$'              $LINK --edges empty.tsv
cli_case E05   1  '^weft: comments\.tsv: empty graph: no edges, only blank lines and comments$'           $LINK --edges comments.tsv
cli_case E06   1  '^weft: onecol\.tsv:2: expected 2 fields like line 1, found 1$'            $LINK --edges onecol.tsv
cli_case E07   1  '^weft: fourcol\.tsv:1: expected 2 fields .* found 4$'                     $LINK --edges fourcol.tsv
cli_case E08   1  '^weft: mixed\.tsv:2: expected 2 fields like line 1, found 3$'             $LINK --edges mixed.tsv
cli_case E09   1  '^weft: latin1\.tsv:2: invalid UTF-8 at byte 5$'                           $LINK --edges latin1.tsv
cli_case E10   1  '^weft: nul\.tsv:2: NUL byte at byte 6$'                                   $LINK --edges nul.tsv
cli_case E11   1  '^weft: cr\.tsv:1: carriage return at byte 6: lines must end with'         $LINK --edges cr.tsv
cli_case E12   1  '^weft: emptyfield\.tsv:1: field 2 \(relation\): empty$'                   $LINK --edges emptyfield.tsv
cli_case E13   1  '^weft: longname\.tsv:1: field 2 \(target\): name is 1025 bytes, limit 1024$' $LINK --edges longname.tsv
cli_case E14   1  '^weft: hugeline\.tsv:1: field 2 \(target\): name is 3000000 bytes'        $LINK --edges hugeline.tsv
cli_case E15   1  '^weft: quote\.csv:1: field 1: unbalanced quote$'                          $LINK --edges quote.csv
cli_case E16   1  '^weft: truncated\.tsv\.gz: corrupt or truncated gzip data$'               $LINK --edges truncated.tsv.gz
cli_case E17   1  '^weft: spaces\.tsv:1: .*found 1 \(fields are separated by tabs; this line has spaces and no tab\)$' $LINK --edges spaces.tsv
# Train / valid / test files that contradict each other or hold nothing.
cli_case E18   1  '^weft: empty\.tsv: no validation edges$'                                  $LINK --edges train.tsv --valid empty.tsv --test test.tsv
cli_case E19   1  '^weft: empty\.tsv: no test edges$'                                        $LINK --edges train.tsv --valid valid.tsv --test empty.tsv
cli_case E20   1  '^weft: empty\.tsv: no training edges$'                                    $LINK --edges empty.tsv --test test.tsv
# Node features.
cli_case F01   1  "^weft: f-nan\.tsv:3: field 2 \(feature\): value 'nan' of index 1 is not a finite number$"  $GCN --labels $LABELS --features f-nan.tsv
cli_case F02   1  "^weft: f-inf\.tsv:3: field 2 \(feature\): value 'inf' of index 1 is not a finite number$"  $GCN --labels $LABELS --features f-inf.tsv
cli_case F03   1  "^weft: f-negative\.tsv:3: field 2 \(feature\): '-1' is not an index$"    $GCN --labels $LABELS --features f-negative.tsv
cli_case F04   1  '^weft: f-huge\.tsv:3: field 2 \(feature\): index 99999999999 is over the limit 16777215$' $GCN --labels $LABELS --features f-huge.tsv
cli_case F05   1  "^weft: f-fraction\.tsv:3: field 2 \(feature\): '1\.5' is not an index$" $GCN --labels $LABELS --features f-fraction.tsv
cli_case F06   1  "^weft: f-value\.tsv:3: field 2 \(feature\): value 'abc' of index 1 is not a finite number$" $GCN --labels $LABELS --features f-value.tsv
cli_case F07   1  "^weft: f-overflow\.tsv:3: field 2 \(feature\): value '1e39' of index 1 is not a finite number$" $GCN --labels $LABELS --features f-overflow.tsv
cli_case F08   1  '^weft: f-twice\.tsv:3: field 2 \(feature\): index 1 appears twice$'     $GCN --labels $LABELS --features f-twice.tsv
cli_case F09   1  "^weft: f-unknown\.tsv:35: field 1 \(node\): unknown node 'ghost'$"      $GCN --labels $LABELS --features f-unknown.tsv
cli_case F10   1  "^weft: f-node-twice\.tsv:35: field 1 \(node\): 'm2' already has features on line 3$" $GCN --labels $LABELS --features f-node-twice.tsv
cli_case F11   1  '^weft: f-none\.tsv: no feature line$'                                     $GCN --labels $LABELS --features f-none.tsv
# Labels.
cli_case L01   1  "^weft: l-unknown\.tsv:35: field 1 \(node\): unknown node 'ghost'$"      $GCN --labels l-unknown.tsv
cli_case L02   1  "^weft: l-contradict\.tsv:35: field 2 \(class\): 'm0' was labelled 'faction0' on line 1$" $GCN --labels l-contradict.tsv
cli_case L03   1  '^weft: l-extra\.tsv:2: expected 2 fields \(node, class\), found 3$'      $GCN --labels l-extra.tsv
cli_case L04   1  '^weft: l-one-class\.tsv: every label is the same class: there is nothing to learn$' $GCN --labels l-one-class.tsv
cli_case L05   1  '^weft: l-empty-class\.tsv:2: field 2 \(class\): empty$'                  $GCN --labels l-empty-class.tsv
cli_case L06   1  '^weft: empty\.tsv: no label$'                                             $GCN --labels empty.tsv
cli_case L07   1  '^weft: l-spaces\.tsv:2: expected 2 fields \(node, class\), found 1 \(fields are separated by tabs' $GCN --labels l-spaces.tsv
# Split files.
cli_case P01   1  "^weft: s-two-parts\.tsv:35: field 1 \(node\): 'm3' is already in the split on line 4$" $GCN --labels $LABELS --split s-two-parts.tsv
cli_case P02   1  "^weft: s-part\.tsv:1: field 2 \(part\): 'training' is not train, valid or test$" $GCN --labels $LABELS --split s-part.tsv
cli_case P03   1  "^weft: s-unknown\.tsv:35: field 1 \(node\): unknown node 'ghost'$"      $GCN --labels $LABELS --split s-unknown.tsv
cli_case P04   1  "^weft: split\.tsv:21: field 1 \(node\): node 'm20' has no label$"       $GCN --labels l-first-20.tsv --split split.tsv
cli_case P05   1  '^weft: s-no-train\.tsv: no training node$'                                $GCN --labels $LABELS --split s-no-train.tsv
cli_case P06   1  '^weft: s-no-test\.tsv: no labelled node is in test: nothing to measure'  $GCN --labels $LABELS --split s-no-test.tsv
# Node types.
cli_case T01   1  "^weft: t-unknown\.tsv:35: field 1 \(node\): unknown node 'ghost'$"      $LINK --edges $K/edges.tsv --types t-unknown.tsv
# Stores that are not stores.
cli_case S01   1  '^weft: a-file: not a directory$'                                          train --store a-file --quiet --edges $K/edges.tsv
cli_case S02   1  '^weft: garbage: cannot open store: MDB_INVALID'                           train --store garbage --quiet --edges $K/edges.tsv
cli_case S03   1  '^weft: no-store: no store here yet$'                                      snapshots list --store no-store
cli_case S04   1  '^weft: garbage: cannot open store: MDB_INVALID'                           snapshots list --store garbage
# Snapshot commands on the store.
cli_case S05   1  '^weft: no snapshot version 99$'                                           snapshots promote 99 --store $S
cli_case S06   1  '^weft: version 3 was rejected .*: promote it with force'                  snapshots promote 3 --store $S
cli_case S07   2  "^weft snapshots: version: 'abc' is not a whole number from 1 to"         snapshots promote abc --store $S
cli_case S08   2  "^weft snapshots: version: '0' is not a whole number from 1 to"           snapshots promote 0 --store $S
cli_case S09   1  ': no previous version to roll back to$'                                   snapshots rollback --store $S
cli_case S10   1  '^weft: no snapshot version 99$'                                           snapshots show 99 --store $S
cli_case S11   1  '^weft: no snapshot version 99$'                                           snapshots export 99 out.snap --store $S
cli_case S12   1  '^weft: /nonexistent/dir/x\.snap\.tmp: No such file or directory$'        snapshots export 1 /nonexistent/dir/x.snap --store $S
cli_case S13   1  '^weft: truncated\.snap: truncated: the file ends inside '                snapshots import truncated.snap --store $S
cli_case S14   1  "^weft: flipped\.snap: blob '.*': CRC-32 of the data is .*: the data is damaged$" snapshots import flipped.snap --store $S
cli_case S15   1  '^weft: trailer\.snap: SHA-256 mismatch'                                   snapshots import trailer.snap --store $S
cli_case S16   1  '^weft: format9\.snap: snapshot file format 9; this weft reads format 1$' snapshots import format9.snap --store $S
cli_case S17   1  '^weft: good\.tsv: not a weft snapshot file$'                              snapshots import good.tsv --store $S
cli_case S18   1  '^weft: adir: '                                                            snapshots import adir --store $S
cli_case S19   1  '^weft: truncated\.snap: truncated'                                        snapshots import truncated.snap --store no-store
cli_case S20   2  "^weft snapshots: --keep: '-1' is not a whole number from 0 to"           snapshots prune --keep -1 --store $S
cli_case S21   2  "^weft snapshots: unknown action 'delete'"                                 snapshots delete 1 --store $S
# Options.
cli_case O01   2  "^weft train: --dim: '0' is not a whole number from 1 to"                 $LINK --edges $K/edges.tsv --dim 0
cli_case O02   2  "^weft train: --model: unknown value 'nomodel'"                            $LINK --edges $K/edges.tsv --model nomodel
cli_case O03   2  "^weft train: --holdout \(validation share\): '0\.6' is not a number from 0 to 0\.5$" $LINK --edges $K/edges.tsv --holdout 0.6,0.6
cli_case O04   2  "^weft train: --lr: 'nan' is not a number from"                           $LINK --edges $K/edges.tsv --lr nan
cli_case O05   2  "^weft train: unknown option '--egdes'"                                    $LINK --egdes $K/edges.tsv
cli_case O06   2  '^weft train: --edges FILE is required$'                                   $LINK
cli_case O07   2  "^weft train: --epochs: '99999999999999999999' is not a whole number"     $LINK --edges $K/edges.tsv --epochs 99999999999999999999
# Evaluation of a stored snapshot.
cli_case V01   1  "^weft: eval-unknown\.tsv:1: field 2 \(target\): unknown node 'ghost'$"  eval --store $S --test eval-unknown.tsv
cli_case V02   1  '^weft: no snapshot version 99$'                                           eval --store $S --version 99 --test $K/edges.tsv

# What the cases above must not have touched besides the store.
check "S02 garbage/data.mdb is unchanged" test "$(sha256sum <"$B/garbage/data.mdb")" = "$GARBAGE_SUM"
check "S03, S19 no-store/ holds only notes.txt (no store was left behind)" \
    test "$(ls "$B/no-store")" = notes.txt
check "S11, S12 no snapshot file was left behind" \
    test ! -e "$B/out.snap" -a ! -e "$B/out.snap.tmp" -a ! -e /nonexistent/dir

# E03: an unreadable file. As root every file is readable, so the case runs as nobody.
echo E03 >>"$E2E_TMP/ids"
if [ "$(id -u)" -eq 0 ]; then
    setpriv --reuid=65534 --regid=65534 --clear-groups "$WEFT" inspect "$B/unreadable.tsv" \
        >"$E2E_TMP/out" 2>"$E2E_TMP/err"
else
    "$WEFT" inspect "$B/unreadable.tsv" >"$E2E_TMP/out" 2>"$E2E_TMP/err"
fi
rc=$?
check "E03 weft inspect of an unreadable file: exit 1, 'FILE: Permission denied'" \
    sh -c "test $rc -eq 1 && grep -q 'unreadable.tsv: Permission denied$' '$E2E_TMP/err'"

# Input that is accepted: the same graph as the plain file, or counted and said.
inspect() { (cd "$B" && "$WEFT" inspect --json "$@") 2>&1; }
for id in A01 A02 A03 A04; do echo "$id" >>"$E2E_TMP/ids"; done
check "A01 CRLF line ends: the same graph as LF" test "$(inspect crlf.tsv)" = "$(inspect good.tsv)"
check "A02 a UTF-8 byte order mark: dropped, the same graph" \
    test "$(inspect bom.tsv)" = "$(inspect good.tsv)"
inspect dups.tsv >"$E2E_TMP/dups.json"
check "A03 repeated edges and a self-loop: counted (3 duplicates, 1 self-loop), not refused" \
    test "$(json_get "$E2E_TMP/dups.json" '(d["duplicates"], d["self_loops"])')" = "(3, 1)"
(cd "$B" && "$WEFT" train --store "$E2E_TMP/scratch" --threads 1 --quiet --force --edges train.tsv \
    --valid valid.tsv --test test-in-valid.tsv) >"$E2E_TMP/out" 2>"$E2E_TMP/err"
rc=$?
check "A04 test edges that are also validation edges: trained (exit 0), with a warning" \
    sh -c "test $rc -eq 0 && grep -q '^weft: warning: 2 test edges are also validation edges' \
        '$E2E_TMP/err'"
check "after the command-line cases: the same versions listed, the same answers served" \
    test "$(listed)" = "$LISTED" -a "$(state)" = "$BEFORE"

# ---- the HTTP results ----
wait "$HTTP_PID"
check "the HTTP catalogue ran" test -s "$E2E_TMP/http-results"
[ -s "$E2E_TMP/http-results" ] || sed 's/^/  /' "$E2E_TMP/http.log"
while IFS='|' read -r verdict what why; do
    echo "${what%% *}" >>"$E2E_TMP/ids"
    [ "$verdict" = ok ] || echo "  $why"
    check "$what" test "$verdict" = ok
done <"$E2E_TMP/http-results"

check "after the HTTP cases: the same versions listed, the server up and answering the same" \
    test "$(listed)" = "$LISTED" -a "$(state)" = "$BEFORE"
"$WEFT" snapshots verify --store "$S" >"$E2E_TMP/verify.out" 2>&1
check "weft snapshots verify: every version is sound" test $? -eq 0

# The catalogue and docs/bad-input.md list the same cases.
sed -n 's/^| \([A-Z][0-9][0-9]\) |.*/\1/p' "$TOP/docs/bad-input.md" | sort >"$E2E_TMP/doc-ids"
sort -u "$E2E_TMP/ids" >"$E2E_TMP/run-ids"
check "docs/bad-input.md has a row for each of the $(wc -l <"$E2E_TMP/run-ids") cases, and no other" \
    cmp "$E2E_TMP/doc-ids" "$E2E_TMP/run-ids"
diff "$E2E_TMP/doc-ids" "$E2E_TMP/run-ids" | sed 's/^/  docs vs run: /' | head -n 10
finish
