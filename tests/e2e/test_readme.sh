#!/bin/sh
# The README's promises: the demo script trains and serves, and every curl example in
# README.md works as printed (only the port is changed to a free one).
. "$TOP/tests/e2e/lib.sh"
PORT=$(free_port)
STORE="$E2E_TMP/demo-store" PORT=$PORT BUILD="$BUILD" sh "$TOP/deploy/demo.sh" \
    >"$E2E_TMP/demo.log" 2>&1 &
SERVER_PID=$!
# The demo trains first (seconds; minutes under the sanitizers): wait while it runs.
i=0
until curl -fsS "http://127.0.0.1:$PORT/healthz" >/dev/null 2>&1 || [ $i -ge 1800 ]; do
    kill -0 "$SERVER_PID" 2>/dev/null || break
    sleep 0.1
    i=$((i + 1))
done
check "demo script trains and serves" curl -fsS "http://127.0.0.1:$PORT/healthz" -o /dev/null
check "demo printed the evaluation" grep -q "MRR" "$E2E_TMP/demo.log"

grep -E "^curl -s '?http://127\.0\.0\.1:8080" "$TOP/README.md" | sed "s/127\.0\.0\.1:8080/127.0.0.1:$PORT/" \
    >"$E2E_TMP/examples"
check "README has curl examples" test "$(wc -l <"$E2E_TMP/examples")" -ge 3
n=0
while IFS= read -r cmd; do
    n=$((n + 1))
    sh -c "$cmd" >"$E2E_TMP/ex$n.json" 2>&1
    check "example $n returns JSON: $cmd" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert "version" in d or "error" in d, d' "$E2E_TMP/ex$n.json"
done <"$E2E_TMP/examples"
check "predict example lists 5 candidates" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert len(d["predictions"]) == 5 and d["source"] == "n0", d' "$E2E_TMP/ex1.json"
check "unknown node example is a JSON error with a hint" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert d["error"]["code"] == "not_found" and d["error"]["hint"], d' "$E2E_TMP/ex$n.json"
stop_server

# The Labels section: its training command (as printed there) and its curl examples.
cd "$E2E_TMP" && mkdir -p build tests && ln -s "$WEFT" build/weft && ln -s "$TOP/tests/data" tests/data
build/weft train --store label-store --model gcn --edges tests/data/cora/edges.tsv \
    --features tests/data/cora/features.tsv --labels tests/data/cora/labels.tsv \
    --split tests/data/cora/split.tsv >"$E2E_TMP/labels-train.log" 2>&1
check "README label training command runs" test $? -eq 0
grep -q "build/weft train --store label-store --model gcn --edges tests/data/cora/edges.tsv" \
    "$TOP/README.md"
check "README shows that training command" test $? -eq 0
start_server label-store
grep -E "^curl -s '?http://127\.0\.0\.1:8081" "$TOP/README.md" | sed "s/127\.0\.0\.1:8081/127.0.0.1:$PORT/" \
    >"$E2E_TMP/label-examples"
check "README has label curl examples" test "$(wc -l <"$E2E_TMP/label-examples")" -ge 2
n=0
while IFS= read -r cmd; do
    n=$((n + 1))
    sh -c "$cmd" >"$E2E_TMP/lex$n.json" 2>&1
    check "label example $n answers with the caution: $cmd" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert d["node"] == "n0" and "person" in d["caution"], d' \
        "$E2E_TMP/lex$n.json"
done <"$E2E_TMP/label-examples"
finish
