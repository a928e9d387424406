#!/bin/sh
# The README's promises: the demo script makes its data, trains and serves; the examples it
# prints are the README's Quick start examples; and every curl example in README.md works as
# printed (only the port is changed to a free one): the 8080 ones against the demo, the 8081
# ones against the Cora label model trained by the README's own command.
. "$TOP/tests/e2e/lib.sh"
PORT=$(free_port)
VAR="$E2E_TMP/var" PORT=$PORT BUILD="$BUILD" sh "$TOP/deploy/demo.sh" >"$E2E_TMP/demo.log" 2>&1 &
SERVER_PID=$!
# The demo trains first (a minute; several under the sanitizers): wait while it runs.
i=0
until curl -fsS "http://127.0.0.1:$PORT/readyz" >/dev/null 2>&1 || [ $i -ge 6000 ]; do
    kill -0 "$SERVER_PID" 2>/dev/null || break
    sleep 0.1
    i=$((i + 1))
done
check "demo script trains and serves" curl -fsS "http://127.0.0.1:$PORT/readyz" -o /dev/null
check "demo printed the link evaluation beside popularity" grep -q "popularity" "$E2E_TMP/demo.log"

# The Quick start's block is what the demo prints (for port 8080).
VAR="$E2E_TMP/var" PORT=8080 BUILD="$BUILD" sh "$TOP/deploy/demo.sh" --examples | grep '^curl' \
    >"$E2E_TMP/printed"
awk '/^## Quick start/ { on = 1 } /^### / { on = 0 } on && /^curl/' "$TOP/README.md" >"$E2E_TMP/quick"
check "the Quick start examples are the ones make demo prints" cmp -s "$E2E_TMP/printed" "$E2E_TMP/quick"

grep -E "^curl -s (-X POST )?'http://127\.0\.0\.1:8080" "$TOP/README.md" \
    | sed "s/127\.0\.0\.1:8080/127.0.0.1:$PORT/" >"$E2E_TMP/examples"
check "README has curl examples for the demo" test "$(wc -l <"$E2E_TMP/examples")" -ge 12
n=0
while IFS= read -r cmd; do
    n=$((n + 1))
    sh -c "$cmd" >"$E2E_TMP/ex$n.out" 2>&1
    case "$cmd" in
        */metrics*) check "example $n is Prometheus text: $cmd" grep -q "^weft_" "$E2E_TMP/ex$n.out" ;;
        */readyz*) check "example $n answers: $cmd" test -s "$E2E_TMP/ex$n.out" ;;
        *source=nobody*) check "example $n is a JSON error with a hint: $cmd" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert d["error"]["code"] == "not_found" and d["error"]["hint"], d' "$E2E_TMP/ex$n.out" ;;
        *) check "example $n returns JSON with a version and no error: $cmd" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert "error" not in d, d
assert "version" in d or "checks" in d or "snapshots" in d, d' "$E2E_TMP/ex$n.out" ;;
    esac
done <"$E2E_TMP/examples"
check "the first example lists 5 parts for the buyer" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert len(d["predictions"]) == 5 and d["source"].startswith("buyer:"), d
assert all(p["target"].startswith("part:") for p in d["predictions"]), d' "$E2E_TMP/ex1.out"
check "the label example carries the caution" /usr/bin/python3 -c '
import json, sys
d = json.load(open(sys.argv[1]))
assert d["node"].startswith("seller:") and "person" in d["caution"], d' "$E2E_TMP/ex3.out"
check "the analyst page is served at /" sh -c \
    "curl -fsS 'http://127.0.0.1:$PORT/' | grep -qi '<html'"
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
