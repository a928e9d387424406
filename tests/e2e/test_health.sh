#!/bin/sh
# GET /v1/health, GET /readyz and a graceful stop. Each figure is checked against a value
# computed here independently: the row-norm percentiles and the top-10 overlap of two
# versions with numpy over the exported snapshots (the files `weft snapshots export`
# writes, format in DEVELOPERS.md), the coverage with a Python set over the input file, the
# age from the manifest's "created". Data: karate (34 nodes, so every node is a drift probe)
# and Cora with 3 epochs (passes the gate); provenance in tests/data/README.md.
set -u
. "$TOP/tests/e2e/lib.sh"

KARATE="$TOP/tests/data/karate/edges.tsv"
CORA="$TOP/tests/data/cora/edges.tsv"
PY=/usr/bin/python3

# get NAME PATH: body to $E2E_TMP/NAME.json, status to $STATUS.
get() {
    STATUS=$(curl -sS -o "$E2E_TMP/$1.json" -w '%{http_code}' "$BASE$2")
}
# json_is NAME EXPR: EXPR (Python over the parsed body d; check(name) is that check) holds.
json_is() {
    $PY -c 'import json,sys
d = json.load(open(sys.argv[1]))
def check(name):
    return next(c for c in d["checks"] if c["name"] == name)
ok = eval(sys.argv[2])
if ok is not True:
    print("not true: " + sys.argv[2] + "\n" + json.dumps(d, indent=1)[:3000])
sys.exit(ok is not True)' "$E2E_TMP/$1.json" "$2"
}
wait_version() {
    i=0
    until curl -sS "$BASE/healthz" 2>/dev/null | grep -q "\"version\":$1[,}]"; do
        i=$((i + 1))
        [ $i -ge 100 ] && return 1
        sleep 0.1
    done
}
# start_serving STORE [options...]: weft serve on a free port, wait for /healthz.
start_serving() {
    store=$1
    shift
    PORT=$(free_port)
    BASE="http://127.0.0.1:$PORT"
    "$WEFT" serve --store "$store" --listen "127.0.0.1:$PORT" "$@" >>"$E2E_TMP/server.log" 2>&1 &
    SERVER_PID=$!
    i=0
    until curl -fsS "$BASE/healthz" >/dev/null 2>&1; do
        i=$((i + 1))
        [ $i -ge 100 ] && { cat "$E2E_TMP/server.log"; return 1; }
        sleep 0.1
    done
}

# A snapshot file's manifest and blobs, and a writer for a changed copy (DEVELOPERS.md:
# magic, format, blob count, manifest length, manifest, blobs as stored with their 48-byte
# header, SHA-256 of all before it).
cat >"$E2E_TMP/snap.py" <<'EOF'
import hashlib, json, struct
import numpy as np

def read(path):
    b = open(path, "rb").read()
    assert b[:8] == b"WEFTSNAP"
    _fmt, nb, ml = struct.unpack_from("<IIQ", b, 8)
    off = 24
    manifest = json.loads(b[off:off + ml])
    off += ml
    blobs = {}
    for _ in range(nb):
        (nl,) = struct.unpack_from("<I", b, off)
        name = b[off + 4:off + 4 + nl].decode()
        off += 4 + nl
        (vl,) = struct.unpack_from("<Q", b, off)
        blobs[name] = bytearray(b[off + 8:off + 8 + vl])
        off += 8 + vl
    return manifest, blobs

def entity(manifest, blobs):
    shape = manifest["blobs"]["entity"]["shape"]
    return np.frombuffer(bytes(blobs["entity"][48:]), dtype="<f4").reshape(shape)

def nodes(blobs):
    off = np.frombuffer(bytes(blobs["nodes.off"][48:]), dtype="<u8")
    raw = bytes(blobs["nodes.bytes"][48:])
    return [raw[int(off[i]):int(off[i + 1]) - 1].decode() for i in range(len(off) - 1)]

def write(path, manifest, blobs):
    m = json.dumps(manifest, separators=(",", ":")).encode()
    out = bytearray(b"WEFTSNAP" + struct.pack("<IIQ", 1, len(blobs), len(m)) + m)
    for name in manifest["blobs"]:
        v = blobs[name]
        out += struct.pack("<I", len(name)) + name.encode() + struct.pack("<Q", len(v)) + v
    out += hashlib.sha256(bytes(out)).digest()
    open(path, "wb").write(bytes(out))
EOF

# ---- before any snapshot: not ready, health fails, liveness holds ----
EMPTY="$E2E_TMP/empty"
mkdir "$EMPTY"
start_serving "$EMPTY" || finish
get ready0 /readyz
check "empty store: /readyz 503, ready false" [ "$STATUS" = 503 ]
check "empty store: /readyz says why" json_is ready0 'd["ready"] is False and "snapshot" in d["reason"]'
get health0 /v1/health
check "empty store: /v1/health 503, one failing check" [ "$STATUS" = 503 ]
check "empty store: status fail" json_is health0 \
    'd["status"] == "fail" and [c["name"] for c in d["checks"]] == ["snapshot"]'
check "empty store: /healthz still 200" curl -fsS -o /dev/null "$BASE/healthz"
stop_server

# ---- Cora, 3 epochs: passes the gate, every check ok ----
CSTORE="$E2E_TMP/cora"
"$WEFT" train --quiet --store "$CSTORE" --edges "$CORA" --undirected --epochs 3 --threads 1 \
    >>"$E2E_TMP/train.log" 2>&1
check "Cora trained and promoted" test $? -eq 0
start_serving "$CSTORE" || finish
get ready1 /readyz
check "live snapshot: /readyz 200, ready true" [ "$STATUS" = 200 ]
check "live snapshot: /readyz body" json_is ready1 'd == {"version": 1, "ready": True, "reason": None}'
curl -sS "$BASE/v1/model" >"$E2E_TMP/cora-manifest.json"
i=0
until get health1 /v1/health && json_is health1 'check("input_coverage")["value"] is not None' \
    >/dev/null || [ $i -ge 50 ]; do
    sleep 0.1
    i=$((i + 1))
done
check "Cora: /v1/health 200, status ok" [ "$STATUS" = 200 ]
check "Cora: every check ok" json_is health1 \
    'd["status"] == "ok" and all(c["status"] == "ok" for c in d["checks"])'
check "Cora: the checks of a link snapshot, each with its fields" json_is health1 \
    '[c["name"] for c in d["checks"]] == ["snapshot_age", "gate", "baselines_links", "nonfinite_values", "embedding_norm_spread", "drift_links", "input_coverage"] and all(set(c) == {"name", "status", "value", "threshold", "message"} for c in d["checks"])'
check "Cora: age = answer time - manifest created (within 2 s), limit 7 days" $PY -c '
import calendar, json, os, sys, time
h = json.load(open(sys.argv[1])); m = json.load(open(sys.argv[2]))
created = calendar.timegm(time.strptime(m["created"], "%Y-%m-%dT%H:%M:%SZ"))
answered = os.path.getmtime(sys.argv[1])
age = next(c for c in h["checks"] if c["name"] == "snapshot_age")
assert abs(age["value"] - (answered - created)) < 2 and age["threshold"] == 7 * 86400, age' \
    "$E2E_TMP/health1.json" "$E2E_TMP/cora-manifest.json"
check "Cora: baselines value and threshold are the manifest's test MRRs" $PY -c '
import json, sys
h = json.load(open(sys.argv[1])); m = json.load(open(sys.argv[2]))
b = next(c for c in h["checks"] if c["name"] == "baselines_links")
t = m["models"]["link"]["metrics"]
assert abs(b["value"] - t["test"]["mrr"]) < 1e-9, b
assert abs(b["threshold"] - t["baselines"]["popularity"]["mrr"]) < 1e-9, b' \
    "$E2E_TMP/health1.json" "$E2E_TMP/cora-manifest.json"
check "Cora: coverage 1 of the manifest's own edge file" json_is health1 \
    'check("input_coverage")["value"] == 1 and "2708 of the 2708" in check("input_coverage")["message"]'
check "Cora: no drift without a previous version" json_is health1 \
    'check("drift_links")["value"] is None and check("drift_links")["status"] == "ok"'
stop_server

# --max-age: older than the limit warns, older than twice it fails. The limit is set from
# the snapshot's age A (at least 3 s): A - 0.5 s puts it in the warning band for the next
# A - 1 s; 1 s puts it past twice the limit.
age_now() {
    $PY -c 'import calendar, json, sys, time
m = json.load(open(sys.argv[1]))
print("%.1f" % (time.time() - calendar.timegm(time.strptime(m["created"], "%Y-%m-%dT%H:%M:%SZ"))))' \
        "$E2E_TMP/cora-manifest.json"
}
age=$(age_now)
sleep "$(awk -v a="$age" 'BEGIN { print (a < 3 ? 3 - a : 0) }')"
limit=$(awk -v a="$(age_now)" 'BEGIN { printf "%.1f", a - 0.5 }')
start_serving "$CSTORE" --max-age "$limit" || finish
get age1 /v1/health
check "--max-age $limit at about $limit + 0.5 s old: warns" json_is age1 \
    "check('snapshot_age')['status'] == 'warn' and check('snapshot_age')['threshold'] == $limit and $limit < check('snapshot_age')['value'] < 2 * $limit"
stop_server

# Coverage of other input files (--inputs): karate's nodes are m0..m33, Cora's n0..n2707, so
# an input of 5 Cora edges, 2 new nodes and one karate edge has a known share we count here.
INPUT="$E2E_TMP/input.tsv"
head -n 5 "$CORA" >"$INPUT"
printf 'n0\tnew-a\nnew-b\tnew-a\nm0\tm1\n' >>"$INPUT"
start_serving "$CSTORE" --inputs "$INPUT" --max-age 1 || finish
get age2 /v1/health
check "--max-age 1 at 3 s or more: fails" json_is age2 \
    'check("snapshot_age")["status"] == "fail" and check("snapshot_age")["value"] > 2'
want=$($PY -c '
import sys
names = set()
for line in open(sys.argv[1]):
    f = line.rstrip("\n").split("\t")
    names.update((f[0], f[-1]))
known = {f"n{i}" for i in range(2708)}
print("%d %d" % (len(names & known), len(names)))' "$INPUT")
i=0
until get health2 /v1/health && json_is health2 'check("input_coverage")["value"] is not None' \
    >/dev/null || [ $i -ge 50 ]; do
    sleep 0.1
    i=$((i + 1))
done
check "--inputs: coverage = known / distinct names, counted here ($want), below 0.95 warns" \
    json_is health2 "abs(check('input_coverage')['value'] - $(echo "$want" | awk '{print $1 "/" $2}')) < 1e-8 and check('input_coverage')['status'] == 'warn' and '$(echo "$want" | awk '{print $1 " of the " $2}')' in check('input_coverage')['message']"
# The file grows by 20 new nodes: the loader looks at it every 5 s and measures again.
i=0
while [ $i -lt 10 ]; do printf 'x%d\ty%d\n' $i $i >>"$INPUT"; i=$((i + 1)); done
i=0
until get health3 /v1/health && json_is health3 "check('input_coverage')['message'].find(' of the $(echo "$want" | awk '{print $2 + 20}') ') > 0" \
    >/dev/null || [ $i -ge 80 ]; do
    sleep 0.1
    i=$((i + 1))
done
check "--inputs: a changed file is measured again; below 0.5 fails" json_is health3 \
    "abs(check('input_coverage')['value'] - $(echo "$want" | awk '{print $1 "/" ($2 + 20)}')) < 1e-8 and check('input_coverage')['status'] == 'fail' and d['status'] == 'fail'"
check "--inputs: a failing check makes /v1/health 503" [ "$STATUS" = 503 ]
stop_server

# ---- karate: drift between two versions, NaN and norm spread ----
KSTORE="$E2E_TMP/karate"
# A model that stays at its random start (--lr 1e-6) cannot beat popularity; --force stores
# it anyway, and that the health then fails is itself checked below.
"$WEFT" train --quiet --force --store "$KSTORE" --edges "$KARATE" --model dot --undirected \
    --threads 1 --seed 1 --lr 0.000001 >>"$E2E_TMP/train.log" 2>&1
start_serving "$KSTORE" || finish
get k1 /v1/health
check "karate v1: /v1/health 503" [ "$STATUS" = 503 ]
check "karate v1: forced past the gate warns, not beating baselines fails" \
    json_is k1 'check("gate")["status"] == "warn" and check("baselines_links")["status"] == "fail" and d["status"] == "fail"'
"$WEFT" train --quiet --force --store "$KSTORE" --edges "$KARATE" --model dot --undirected \
    --threads 1 --seed 2 >>"$E2E_TMP/train.log" 2>&1
check "karate v2 served" wait_version 2
get k2 /v1/health
"$WEFT" snapshots export 1 "$E2E_TMP/k1.snap" --store "$KSTORE" >/dev/null 2>&1
"$WEFT" snapshots export 2 "$E2E_TMP/k2.snap" --store "$KSTORE" >/dev/null 2>&1
# numpy: every node is a probe (34 < 100); top 10 targets by e_s . e_t leaving out the
# source and its known links (every edge of the file, both directions), as predictions are.
check "drift: mean top-10 overlap of v2 with v1 = numpy over both exports" $PY -c '
import json, sys
import numpy as np
sys.path.insert(0, sys.argv[4])
import snap
known = set()
for line in open(sys.argv[3]):
    a, b = line.split()
    known |= {(a, b), (b, a)}
def tops(path):
    m, blobs = snap.read(path)
    e = snap.entity(m, blobs).astype(np.float64)
    names = snap.nodes(blobs)
    s = e @ e.T
    out = {}
    for i, a in enumerate(names):
        cand = [j for j in range(len(names)) if j != i and (a, names[j]) not in known]
        cand.sort(key=lambda j: (-s[i, j], j))
        out[a] = {names[j] for j in cand[:10]}
    return out
t1, t2 = tops(sys.argv[1]), tops(sys.argv[2])
want = np.mean([len(t1[a] & t2[a]) / max(len(t1[a]), len(t2[a])) for a in t2])
h = json.load(open(sys.argv[5]))
got = next(c for c in h["checks"] if c["name"] == "drift_links")
print("server", got["value"], "numpy", want, got["message"])
assert abs(got["value"] - want) < 1e-6 and "34 probe nodes" in got["message"]
assert "version 1" in got["message"]' "$E2E_TMP/k1.snap" "$E2E_TMP/k2.snap" "$KARATE" "$E2E_TMP" \
    "$E2E_TMP/k2.json"
check "norm spread: p99/p1 of the row norms = numpy.percentile over the export" $PY -c '
import json, sys
import numpy as np
sys.path.insert(0, sys.argv[2])
import snap
m, blobs = snap.read(sys.argv[1])
n = np.linalg.norm(snap.entity(m, blobs).astype(np.float64), axis=1)
want = np.percentile(n, 99) / np.percentile(n, 1)
h = json.load(open(sys.argv[3]))
got = next(c for c in h["checks"] if c["name"] == "embedding_norm_spread")
print("server", got["value"], "numpy", want)
assert abs(got["value"] - want) <= 1e-6 * want and got["status"] == "ok"' \
    "$E2E_TMP/k2.snap" "$E2E_TMP" "$E2E_TMP/k2.json"

# A copy of v2 with one NaN (row 0) and one row scaled by 1e6, checksums redone, imported as
# version 3 and promoted: the server serves it and says what is wrong with it.
$PY -c '
import sys, zlib
import numpy as np
sys.path.insert(0, sys.argv[3])
import snap
m, blobs = snap.read(sys.argv[1])
e = snap.entity(m, blobs).copy()
e[0, 0] = np.nan
e[5] *= 1e6
blobs["entity"][48:] = e.astype("<f4").tobytes()
m["blobs"]["entity"]["crc32"] = zlib.crc32(bytes(blobs["entity"][48:]))
snap.write(sys.argv[2], m, blobs)
n = np.linalg.norm(e.astype(np.float64), axis=1)
n = n[np.isfinite(n)]
print(np.percentile(n, 99) / np.percentile(n, 1))' "$E2E_TMP/k2.snap" "$E2E_TMP/bad.snap" \
    "$E2E_TMP" >"$E2E_TMP/bad-ratio.txt"
"$WEFT" snapshots import "$E2E_TMP/bad.snap" --store "$KSTORE" >>"$E2E_TMP/train.log" 2>&1
check "the changed copy imports (its checksums are right)" test $? -eq 0
"$WEFT" snapshots promote 3 --store "$KSTORE" >>"$E2E_TMP/train.log" 2>&1
check "version 3 served" wait_version 3
get k3 /v1/health
check "NaN: exactly 1 non-finite value, in blob entity: fail, 503" json_is k3 \
    'check("nonfinite_values")["value"] == 1 and check("nonfinite_values")["status"] == "fail" and "entity" in check("nonfinite_values")["message"] and d["status"] == "fail"'
check "a row 1e6 times longer: p99/p1 (finite rows) = numpy's, above 10000 fails" json_is k3 \
    "abs(check('embedding_norm_spread')['value'] - $(cat "$E2E_TMP/bad-ratio.txt")) <= 1e-6 * $(cat "$E2E_TMP/bad-ratio.txt") and check('embedding_norm_spread')['status'] == 'fail'"

# ---- graceful stop: an in-flight request finishes, /readyz fails while draining ----
# Connection A has sent half its headers when SIGTERM arrives; connection B is an open
# keep-alive connection. After the signal B's /readyz answers 503, A's request completes
# with 200, and new connections are refused.
$PY - "$PORT" "$SERVER_PID" >"$E2E_TMP/drain.txt" 2>&1 <<'EOF'
import os, signal, socket, sys, time
port, pid = int(sys.argv[1]), int(sys.argv[2])
def response(s):
    data = b""
    while b"\r\n\r\n" not in data:
        data += s.recv(65536)
    head, body = data.split(b"\r\n\r\n", 1)
    length = int([l.split(b":")[1] for l in head.split(b"\r\n") if l.lower().startswith(b"content-length")][0])
    while len(body) < length:
        body += s.recv(65536)
    return head.split(b"\r\n")[0].decode(), body.decode()
a = socket.create_connection(("127.0.0.1", port))
b = socket.create_connection(("127.0.0.1", port))
b.sendall(b"GET /readyz HTTP/1.1\r\nHost: x\r\n\r\n")
print("B before:", response(b)[0])
a.sendall(b"GET /v1/model HTTP/1.1\r\nHost: x\r\n")
time.sleep(0.2)
os.kill(pid, signal.SIGTERM)
time.sleep(0.3)
b.sendall(b"GET /readyz HTTP/1.1\r\nHost: x\r\n\r\n")
status, body = response(b)
print("B draining:", status, body.strip())
a.sendall(b"\r\n")
status, body = response(a)
print("A in flight:", status, '"version":3' in body)
try:
    c = socket.create_connection(("127.0.0.1", port), timeout=2)
    c.sendall(b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
    print("C new:", "served" if c.recv(100) else "not served")
except OSError:
    print("C new:", "not served")
EOF
cat "$E2E_TMP/drain.txt"
wait "$SERVER_PID"
rc=$?
SERVER_PID=""
check "SIGTERM: /readyz answered 200 before" grep -q "^B before: HTTP/1.1 200" "$E2E_TMP/drain.txt"
check "SIGTERM: /readyz answers 503 while draining" \
    grep -q '^B draining: HTTP/1.1 503 .*"ready":false,"reason":"the server is shutting down"' "$E2E_TMP/drain.txt"
check "SIGTERM: the request in flight finishes with 200 and its body" \
    grep -q "^A in flight: HTTP/1.1 200 OK True" "$E2E_TMP/drain.txt"
check "SIGTERM: new connections are not served" grep -q "^C new: not served" "$E2E_TMP/drain.txt"
check "SIGTERM: exit status 0" [ "$rc" -eq 0 ]
check "SIGTERM: the access log has the finished request" \
    grep -q '"method":"GET","route":"/v1/model","path":"/v1/model","status":200' "$E2E_TMP/server.log"
finish
