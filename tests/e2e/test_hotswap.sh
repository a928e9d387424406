#!/bin/sh
# Hot swap under load: wrk keeps 16 connections busy with top-10 link queries for 30 s while
# a new snapshot is promoted every 2 s (14 promotions). Every response must be 2xx, wrk must
# see no socket error, and the server must answer from each promoted version within 1 s of
# its promotion (a poller asks every 50 ms which version answers). Data: Cora
# (tests/data/cora, provenance in tests/data/README.md); the versions are imports of one
# export, so promotions cost the server only the swap itself.
. "$TOP/tests/e2e/lib.sh"
S="$E2E_TMP/store"
command -v wrk >/dev/null || { echo "wrk missing: deploy/install-deps.sh installs it"; exit 1; }
"$WEFT" train --store "$S" --edges "$TOP/tests/data/cora/edges.tsv" --undirected --quiet \
    --epochs 5 --force >"$E2E_TMP/train.log" 2>&1
check "version 1 trained" test $? -eq 0
"$WEFT" snapshots export 1 "$E2E_TMP/v1.snap" --store "$S" >/dev/null 2>&1
for i in 2 3 4 5 6 7 8 9 10 11 12 13 14 15; do
    "$WEFT" snapshots import "$E2E_TMP/v1.snap" --store "$S" >/dev/null 2>&1 || break
done
check "versions 2 to 15 staged" test "$("$WEFT" snapshots list --store "$S" --json | \
    /usr/bin/python3 -c 'import json,sys; print(sum(1 for m in json.load(sys.stdin)["snapshots"] if m["state"] == "staged"))')" = 14

PORT=$(free_port)
BASE="http://127.0.0.1:$PORT"
"$WEFT" serve --store "$S" --listen "127.0.0.1:$PORT" --poll-ms 100 >"$E2E_TMP/server.log" 2>&1 &
SERVER_PID=$!
i=0
until curl -fsS "$BASE/readyz" >/dev/null 2>&1 || curl -fsS "$BASE/v1/model" >/dev/null 2>&1 || [ $i -ge 100 ]; do
    sleep 0.1; i=$((i + 1))
done

cat >"$E2E_TMP/load.lua" <<'LUA'
math.randomseed(7)
request = function()
    return wrk.format("GET", "/v1/links/predict?source=n" .. math.random(0, 2707) .. "&k=10")
end
LUA
# The poller: which version answers, every 50 ms, as (monotonic-free wall time, version).
# It runs until the promotions are over (the file "$E2E_TMP/stop" appears), at most 90 s.
/usr/bin/python3 - "$PORT" "$E2E_TMP/seen.txt" "$E2E_TMP/stop" <<'PY' &
import http.client, json, os, sys, time
port, out, stop = int(sys.argv[1]), sys.argv[2], sys.argv[3]
end = time.time() + 90
with open(out, "w") as f:
    while time.time() < end and not os.path.exists(stop):
        try:
            c = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
            c.request("GET", "/v1/links/predict?source=n0&k=1")
            r = c.getresponse()
            body = r.read()
            if r.status == 200:
                f.write("%.3f %d\n" % (time.time(), json.loads(body)["version"]))
            c.close()
        except OSError:
            pass
        time.sleep(0.05)
PY
POLLER=$!
wrk -t2 -c16 -d30s --latency -s "$E2E_TMP/load.lua" "$BASE" >"$E2E_TMP/wrk.txt" 2>&1 &
WRK=$!
: >"$E2E_TMP/promoted.txt"
for v in 2 3 4 5 6 7 8 9 10 11 12 13 14 15; do
    sleep 2
    t=$(/usr/bin/python3 -c 'import time; print("%.3f" % time.time())')
    "$WEFT" snapshots promote "$v" --store "$S" >>"$E2E_TMP/promote.log" 2>&1 && echo "$t $v" >>"$E2E_TMP/promoted.txt"
done
sleep 1.5   # the last promotion's switch is measured too
touch "$E2E_TMP/stop"
wait $WRK
wait $POLLER
cat "$E2E_TMP/wrk.txt"
check "14 promotions done" test "$(wc -l <"$E2E_TMP/promoted.txt")" -eq 14
check "wrk answered requests" grep -q "requests in" "$E2E_TMP/wrk.txt"
check "no non-2xx response" sh -c "! grep -q 'Non-2xx' '$E2E_TMP/wrk.txt'"
check "no socket error" sh -c "! grep -q 'Socket errors' '$E2E_TMP/wrk.txt'"
check "each promoted version answers within 1 s of its promotion" /usr/bin/python3 -c '
import sys
seen = [tuple(map(float, l.split())) for l in open(sys.argv[1]) if l.strip()]
worst = 0.0
for line in open(sys.argv[2]):
    t, v = map(float, line.split())
    first = next((ts for ts, ver in seen if ver >= v and ts >= t - 0.05), None)
    assert first is not None, "version %d never answered" % v
    worst = max(worst, first - t)
print("slowest switch: %.3f s" % worst)
assert worst <= 1.0, worst' "$E2E_TMP/seen.txt" "$E2E_TMP/promoted.txt"
finish
