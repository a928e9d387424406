#!/bin/sh
# weft snapshots end to end, on a store trained on Cora (tests/data/cora): list as a table
# and as JSON, show, promote (a rejected version only with --force), rollback, prune,
# verify, export and import byte for byte (cmp), a damaged blob (verify fails, promote and
# export refuse), bad arguments (exit 2 with a usage message). Expected heads and states are
# worked out by hand from the sequence of commands below; manifests, sizes and metrics are
# checked against the catalog read with mdb_dump (lmdb-utils), the file checksum against
# Python's hashlib.
set -u
. "$TOP/tests/e2e/lib.sh"
C="$TOP/tests/data/cora"
S="$E2E_TMP/store"
T="$E2E_TMP/other"

snap() { "$WEFT" snapshots "$@"; }
dot() {
    "$WEFT" train --store "$S" --edges "$C/edges.tsv" --undirected --quiet "$@" \
        >>"$E2E_TMP/train.log" 2>&1
}
# catalog STORE EXPR: evaluates EXPR over `cat` (version -> manifest, from mdb_dump).
catalog() {
    /usr/bin/python3 - "$@" <<'PY'
import json, subprocess, sys
out = subprocess.run(["mdb_dump", "-s", "catalog", sys.argv[1]], capture_output=True,
                     text=True, check=True).stdout
rows = out.split("HEADER=END")[1].split("DATA=END")[0].split()
cat = {int(k, 16): json.loads(bytes.fromhex(v)) for k, v in zip(rows[0::2], rows[1::2])}
print(eval(sys.argv[2]))
PY
}
# states: "version:state ..." from `weft snapshots list --json`.
states() {
    snap list --store "$1" --json | /usr/bin/python3 -c '
import json, sys
d = json.load(sys.stdin)
rows = ["%d:%s" % (s["version"], s["state"]) for s in d["snapshots"]]
print(" ".join(rows + ["live=%d" % d["live"], "previous=%d" % d["previous"]]))'
}

dot                          # 1: live
dot --seed 2 --force         # 2: live (forced if the gate refused it), 1 previous
dot --epochs 1               # 3: one epoch, far below the live one: rejected (exit 3)
dot --seed 3 --no-promote --gate-tolerance 1   # 4: passes the gate, staged
check "four snapshots: 1 retired, 2 live, 3 rejected, 4 staged; previous 1" \
    test "$(states "$S")" = "1:retired 2:live 3:rejected 4:staged live=2 previous=1"

# ---- list ----
snap list --store "$S" >"$E2E_TMP/list.txt"
check "list: exit 0 and a header row" grep -q "^version  state .* key metric (test) .* size" \
    "$E2E_TMP/list.txt"
check "list: one row per version with its state, previous marked" test "$(grep '^ *[0-9]' \
    "$E2E_TMP/list.txt" | cut -c1-26 | awk '{$1 = $1; print}' | tr '\n' '|')" = \
    "1 retired, previous|2 live|3 rejected|4 staged|"
check "list: the model kind and test MRR of each row" \
    test "$(grep -c ' dot  .*MRR 0\.[0-9]\{4\}' "$E2E_TMP/list.txt")" -eq 4
snap list --store "$S" --json >"$E2E_TMP/list.json"
check "list --json: metrics, sizes and states as the catalog holds them (mdb_dump)" \
    /usr/bin/python3 - "$E2E_TMP/list.json" "$S" <<'PY'
import json, subprocess, sys
d = json.load(open(sys.argv[1]))
out = subprocess.run(["mdb_dump", "-s", "catalog", sys.argv[2]], capture_output=True,
                     text=True, check=True).stdout
rows = out.split("HEADER=END")[1].split("DATA=END")[0].split()
cat = {int(k, 16): json.loads(bytes.fromhex(v)) for k, v in zip(rows[0::2], rows[1::2])}
bad = 0
for s in d["snapshots"]:
    m = cat[s["version"]]
    want_bytes = sum(b["bytes"] + 48 for b in m["blobs"].values())
    want = (m["state"], m["models"]["link"]["metrics"]["test"]["mrr"], want_bytes, "dot")
    got = (s["state"], s["link"]["test_mrr"], s["bytes"], s["link"]["kind"])
    if got != want:
        print(s["version"], got, want)
        bad += 1
sys.exit(bad or d["live"] != 2 or d["previous"] != 1 or len(d["snapshots"]) != 4)
PY

# ---- show ----
snap show 2 --store "$S" >"$E2E_TMP/show.txt"
check "show: state, history and the blob table" sh -c 'grep -q "^version 2: live" "$1" &&
    grep -q "^history:" "$1" && grep -q "^  entity  *f32  *2708 x " "$1"' sh "$E2E_TMP/show.txt"
snap show live --store "$S" --json >"$E2E_TMP/show.json"
check "show live --json: the catalog's manifest of version 2, field for field" \
    test "$(catalog "$S" "cat[2] == json.load(open('$E2E_TMP/show.json'))")" = True
check "show 99: exit 1, no such version" sh -c '"$1" snapshots show 99 --store "$2" \
    >/dev/null 2>"$3"; [ $? -eq 1 ] && grep -q "no snapshot version 99" "$3"' \
    sh "$WEFT" "$S" "$E2E_TMP/err"

# ---- promote, rollback ----
snap promote 3 --store "$S" >/dev/null 2>"$E2E_TMP/err"
check "promote of the rejected 3: exit 1 saying so" sh -c '[ $1 -eq 1 ] &&
    grep -q "version 3 was rejected" "$2"' sh $? "$E2E_TMP/err"
check "promote refused: the head is unchanged" \
    test "$(states "$S")" = "1:retired 2:live 3:rejected 4:staged live=2 previous=1"
check "promote 3 --force --reason: exit 0" \
    snap promote 3 --force --reason "e2e override" --store "$S"
check "forced: live 3, previous 2, recorded with the time, the reason in its history" \
    test "$(catalog "$S" "(cat[3]['state'], cat[3]['forced'], 'forced_at' in cat[3],
        cat[3]['history'][-1]['forced'], 'e2e override' in cat[3]['history'][-1]['reason'],
        cat[2]['state'])")" = "('live', True, True, True, True, 'retired')"
check "rollback: 2 live again, 3 retired; previous 1 (what 2 was made live over)" sh -c \
    '"$1" snapshots rollback --store "$2" >/dev/null' sh "$WEFT" "$S"
check "after the rollback" \
    test "$(states "$S")" = "1:retired 2:live 3:retired 4:staged live=2 previous=1"
check "rollback again: 1 live, nothing before it" sh -c \
    '"$1" snapshots rollback --store "$2" --json | grep -q "\"previous\": 0"' sh "$WEFT" "$S"
check "a third rollback: exit 1, no previous version" sh -c '"$1" snapshots rollback \
    --store "$2" >/dev/null 2>"$3"; [ $? -eq 1 ] && grep -q "no previous version" "$3"' \
    sh "$WEFT" "$S" "$E2E_TMP/err"
check "promote 4 (staged): live 4, previous 1" sh -c '"$1" snapshots promote 4 --store "$2" \
    >/dev/null' sh "$WEFT" "$S"
check "after promoting 4" \
    test "$(states "$S")" = "1:retired 2:retired 3:retired 4:live live=4 previous=1"

# ---- verify ----
check "verify: every version intact, exit 0" sh -c '"$1" snapshots verify --store "$2" \
    >"$3" && grep -q "verified 4 versions: no problems" "$3"' sh "$WEFT" "$S" "$E2E_TMP/v.txt"
check "verify 4 --json: no problems, its blob count as listed" test "$(snap verify 4 \
    --store "$S" --json | /usr/bin/python3 -c 'import json,sys; d=json.load(sys.stdin);
print(d["problems"], d["versions"][0]["blobs"])')" = "[] $(catalog "$S" "len(cat[4]['blobs'])")"

# ---- export, import ----
check "export 4" snap export 4 "$E2E_TMP/four.snap" --store "$S"
check "the file: magic, and its last 32 bytes are the SHA-256 of the rest (hashlib)" \
    /usr/bin/python3 -c 'import hashlib,sys; b=open(sys.argv[1],"rb").read()
sys.exit(not (b[:8] == b"WEFTSNAP" and hashlib.sha256(b[:-32]).digest() == b[-32:]))' \
    "$E2E_TMP/four.snap"
check "import into a new store: version 1, staged" sh -c '"$1" snapshots import "$2" \
    --store "$3" --json | grep -q "\"state\": \"staged\""' sh "$WEFT" "$E2E_TMP/four.snap" "$T"
check "an import is never live by itself" test "$(states "$T")" = "1:staged live=0 previous=0"
check "export of the imported version" snap export 1 "$E2E_TMP/again.snap" --store "$T"
check "export, import, export: byte-identical files (cmp)" \
    cmp "$E2E_TMP/four.snap" "$E2E_TMP/again.snap"
check "the import records its origin (file and SHA-256)" test "$(catalog "$T" \
    "(cat[1]['origin']['file'], cat[1]['origin']['sha256'])")" = "('$E2E_TMP/four.snap', \
'$(/usr/bin/python3 -c 'import hashlib,sys; print(hashlib.sha256(open(sys.argv[1],"rb").read()[:-32]).hexdigest())' "$E2E_TMP/four.snap")')"
check "the imported snapshot serves the same predictions" sh -c '
    "$1" snapshots promote 1 --store "$2" >/dev/null' sh "$WEFT" "$T"
start_server "$S" || finish
curl -fsS "$BASE/v1/links/predict?source=n0&k=5" | sed 's/"version":[0-9]*,//' >"$E2E_TMP/p4.json"
stop_server
start_server "$T" || finish
curl -fsS "$BASE/v1/links/predict?source=n0&k=5" | sed 's/"version":[0-9]*,//' >"$E2E_TMP/p1.json"
stop_server
check "predictions of the original and the imported copy are identical" \
    cmp "$E2E_TMP/p4.json" "$E2E_TMP/p1.json"
head -c 5000 "$E2E_TMP/four.snap" >"$E2E_TMP/cut.snap"
snap import "$E2E_TMP/cut.snap" --store "$S" >/dev/null 2>"$E2E_TMP/err"
check "import of a truncated file: exit 1, says truncated, stores nothing" sh -c '
    [ $1 -eq 1 ] && grep -q "truncated" "$2"' sh $? "$E2E_TMP/err"
check "nothing stored by the refused import" \
    test "$(states "$S")" = "1:retired 2:retired 3:retired 4:live live=4 previous=1"

# ---- a damaged blob ----
# One bit of version 2's stored embeddings flipped with mdb_load (which overwrites the keys
# it is given), behind weft's back.
cat >"$E2E_TMP/damage.py" <<'EOF'
import subprocess, sys
out = subprocess.run(["mdb_dump", "-s", "blobs", sys.argv[1]], capture_output=True, text=True,
                     check=True).stdout
rows = out.split("HEADER=END")[1].split("DATA=END")[0].split()
blobs = {bytes.fromhex(k): bytes.fromhex(v) for k, v in zip(rows[0::2], rows[1::2])}
key = (2).to_bytes(8, "big") + b"entity"
value = bytearray(blobs[key])
value[48 + 4000] ^= 0x01
print("VERSION=3\nformat=bytevalue\ntype=btree\nHEADER=END")
print(" " + key.hex())
print(" " + value.hex())
print("DATA=END")
EOF
/usr/bin/python3 "$E2E_TMP/damage.py" "$S" >"$E2E_TMP/damage.dump"
check "flip one bit of version 2's entity blob (mdb_load)" \
    mdb_load -s blobs "$S" <"$E2E_TMP/damage.dump"
snap verify --store "$S" >"$E2E_TMP/v.txt" 2>"$E2E_TMP/err"
check "verify: exit 1, version 2's blob 'entity' named, the CRC-32 mismatch said" sh -c '
    [ $1 -eq 1 ] && grep -q "^version 2: .*DAMAGED" "$2" &&
    grep -q "blob .entity.: CRC-32" "$2" && grep -q "verification failed: 1 problem" "$3"' \
    sh $? "$E2E_TMP/v.txt" "$E2E_TMP/err"
check "verify 4: the other versions are intact" snap verify 4 --store "$S"
snap promote 2 --store "$S" >/dev/null 2>"$E2E_TMP/err"
check "promote of the damaged 2: exit 1, fails verification" sh -c '[ $1 -eq 1 ] &&
    grep -q "version 2 fails verification" "$2" && grep -q "entity" "$2"' sh $? "$E2E_TMP/err"
check "promote refused: 4 is still live" test "$(catalog "$S" "cat[4]['state']")" = live
snap export 2 "$E2E_TMP/two.snap" --store "$S" >/dev/null 2>&1
check "export of the damaged 2: exit 1, no file left" sh -c '[ $1 -eq 1 ] &&
    [ ! -e "$2" ] && [ ! -e "$2.tmp" ]' sh $? "$E2E_TMP/two.snap"

# ---- prune ----
# Besides live 4 and previous 1: 2 and 3. Keep 1: the older, 2 (the damaged one), goes.
snap prune --keep 1 --store "$S" >"$E2E_TMP/prune.txt"
check "prune --keep 1: version 2 deleted" grep -q "^deleted version 2 " "$E2E_TMP/prune.txt"
check "after pruning: 1, 3, 4 remain" \
    test "$(catalog "$S" "sorted(cat)")" = "[1, 3, 4]"
check "verify after pruning: no problems (no blob left behind)" snap verify --store "$S"
check "prune --keep 0 --json: 3 deleted, never live or previous" test "$(snap prune --keep 0 \
    --store "$S" --json | /usr/bin/python3 -c 'import json,sys
print([d["version"] for d in json.load(sys.stdin)["deleted"]])')" = "[3]"
check "after pruning to 0: live 4 and previous 1" \
    test "$(catalog "$S" "sorted(cat)")" = "[1, 4]"

# ---- bad arguments: exit 2 with a usage message, nothing touched ----
usage() {   # usage NAME ARGS...: exit 2 and "(see 'weft snapshots --help')" on stderr
    name=$1
    shift
    "$WEFT" snapshots "$@" >/dev/null 2>"$E2E_TMP/usage"
    rc=$?
    check "usage: $name" sh -c '[ $1 -eq 2 ] && grep -q "^weft snapshots: " "$2" &&
        grep -q "weft snapshots --help" "$2"' sh $rc "$E2E_TMP/usage"
}
usage "no action"
usage "unknown action" frobnicate --store "$S"
usage "no --store" list
usage "show without V" show --store "$S"
usage "show with a non-number" show 2x --store "$S"
usage "version 0" show 0 --store "$S"
usage "promote takes a number, not live" promote live --store "$S"
usage "prune without --keep" prune --store "$S"
usage "prune --keep -1" prune --keep -1 --store "$S"
usage "--keep with promote" promote 1 --keep 2 --store "$S"
usage "--force with list" list --force --store "$S"
usage "export without FILE" export 1 --store "$S"
usage "unknown option" list --bogus --store "$S"
usage "--store without a value" list --store
usage "too many arguments" verify 1 2 --store "$S"
check "--help: exit 0 with the actions" sh -c '"$1" snapshots --help | grep -q "prune --keep N"' \
    sh "$WEFT"
mkdir -p "$E2E_TMP/empty"
check "promote in a directory without a store: exit 1, nothing created" sh -c '
    "$1" snapshots promote 1 --store "$2" 2>/dev/null; [ $? -eq 1 ] && [ ! -e "$2/data.mdb" ]' \
    sh "$WEFT" "$E2E_TMP/empty"
check "list of a missing store: exit 1" sh -c '"$1" snapshots list --store "$2/none" \
    >/dev/null 2>&1; [ $? -eq 1 ]' sh "$WEFT" "$E2E_TMP"

finish
