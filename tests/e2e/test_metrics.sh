#!/bin/sh
# GET /metrics and the access log. References: promtool check metrics (Debian's prometheus
# package, the format's own linter); a real Prometheus server on loopback that scrapes weft
# every second and answers its query API (/api/v1/query) with what it parsed; the requests
# this test sends, counted here; the manifest (model figures, creation time); the kernel's
# /proc/PID/status (VmRSS) and ps (elapsed time) for the process figures. promtool does not
# check histogram buckets or duplicate series, so a parser here does.
set -u
. "$TOP/tests/e2e/lib.sh"

KARATE="$TOP/tests/data/karate/edges.tsv"
S="$E2E_TMP/store"
PY=/usr/bin/python3

# --force: karate's few held-out edges cannot show a model beating popularity; this test is
# about the figures, not the model.
"$WEFT" train --quiet --force --store "$S" --edges "$KARATE" --model dot --undirected \
    --threads 1 >"$E2E_TMP/train.log" 2>&1
check "version 1 trained" test $? -eq 0

PORT=$(free_port)
BASE="http://127.0.0.1:$PORT"
"$WEFT" serve --store "$S" --listen "127.0.0.1:$PORT" --access-log "$E2E_TMP/access.log" \
    >"$E2E_TMP/server.log" 2>&1 &
SERVER_PID=$!
i=0
until curl -fsS "$BASE/readyz" >/dev/null 2>&1 || [ $i -ge 100 ]; do
    sleep 0.1
    i=$((i + 1))
done

# Requests with known outcomes; the counters must say exactly this.
req() {
    curl -sS -o /dev/null -w '%{http_code}\n' "$@" >>"$E2E_TMP/sent.txt"
}
: >"$E2E_TMP/sent.txt"
for i in 1 2 3; do req "$BASE/v1/model"; done
req "$BASE/v1/links/predict?source=m0&k=3"
req "$BASE/v1/links/predict?source=m5"
req "$BASE/v1/links/predict?source=nobody"
req "$BASE/no/such/path?x=1"
req "$BASE/%FF%22quoted"
req -X DELETE "$BASE/v1/model"
check "the requests got the statuses expected" [ "$(tr '\n' ' ' <"$E2E_TMP/sent.txt")" = \
    "200 200 200 200 200 404 404 404 405 " ]
curl -sS "$BASE/v1/model" >"$E2E_TMP/manifest.json"   # the 4th GET /v1/model

curl -sS -D "$E2E_TMP/metrics.headers" -o "$E2E_TMP/metrics.txt" "$BASE/metrics"
check "Content-Type: text/plain; version=0.0.4" \
    grep -qi '^content-type: text/plain; version=0.0.4' "$E2E_TMP/metrics.headers"
promtool check metrics <"$E2E_TMP/metrics.txt" >"$E2E_TMP/promtool.txt" 2>&1
check "promtool check metrics: no problem" test $? -eq 0 -a ! -s "$E2E_TMP/promtool.txt"
cat "$E2E_TMP/promtool.txt"

# parse.py FILE: the samples as {(name, sorted label pairs): value}, after checking what
# promtool leaves out: one HELP and one TYPE per family before its samples, no series twice,
# every histogram with rising le bounds, cumulative counts, +Inf = _count.
cat >"$E2E_TMP/parse.py" <<'EOF'
import math, re, sys
LABEL = re.compile(r'(\w+)="((?:[^"\\]|\\.)*)"')
def parse(path):
    families, samples, order = {}, {}, []
    for line in open(path, encoding="utf-8"):
        line = line.rstrip("\n")
        if line.startswith("# "):
            kind, name = line.split(" ")[1:3]
            f = families.setdefault(name, {})
            assert kind not in f, "second %s for %s" % (kind, name)
            assert not any(s[0].startswith(name) for s in samples), "%s after samples" % kind
            f[kind] = line
            continue
        m = re.match(r'^([a-zA-Z_:][\w:]*)(?:\{(.*)\})? (\S+)$', line)
        assert m, "bad line: " + line
        name, labels, value = m.group(1), m.group(2) or "", float(m.group(3))
        key = (name, tuple(sorted(LABEL.findall(labels))))
        assert key not in samples, "series twice: " + line
        samples[key] = value
        order.append(key)
    for name, f in families.items():
        assert "HELP" in f and "TYPE" in f, name
    for (name, labels), v in samples.items():
        fam = re.sub(r"_(bucket|sum|count)$", "", name)
        assert name in families or fam in families, "no family for " + name
    hist = {}
    for name, labels in order:
        if name.endswith("_bucket"):
            d = dict(labels); le = d.pop("le")
            hist.setdefault((name[:-7], tuple(sorted(d.items()))), []).append(
                (math.inf if le == "+Inf" else float(le), samples[(name, labels)]))
    for (fam, labels), buckets in hist.items():
        les = [b[0] for b in buckets]; counts = [b[1] for b in buckets]
        assert les == sorted(les) and les[-1] == math.inf, (fam, labels, les)
        assert counts == sorted(counts), (fam, labels, counts)
        assert counts[-1] == samples[(fam + "_count", labels)], (fam, labels)
        assert samples[(fam + "_sum", labels)] >= 0
    return samples
def get(samples, name, **labels):
    return samples.get((name, tuple(sorted(labels.items()))))
EOF
check "format: families, unique series, consistent histograms (parsed here)" $PY -c '
import sys; sys.path.insert(0, sys.argv[1]); import parse; parse.parse(sys.argv[2])' \
    "$E2E_TMP" "$E2E_TMP/metrics.txt"

check "request counts by route pattern, method and status = the requests sent" $PY -c '
import sys; sys.path.insert(0, sys.argv[1]); import parse
s = parse.parse(sys.argv[2])
def n(route, status, method="GET"):
    return parse.get(s, "weft_http_requests_total", method=method, route=route, status=status)
want = {("/v1/model", "200", "GET"): 4, ("/v1/links/predict", "200", "GET"): 2,
        ("/v1/links/predict", "404", "GET"): 1, ("unmatched", "404", "other"): 2,
        ("/v1/model", "405", "other"): 1}
for (route, status, method), count in want.items():
    assert n(route, status, method) == count, (route, status, method, n(route, status, method))
for (name, labels), v in s.items():
    for k, val in labels:
        assert "?" not in val and "no/such" not in val and "quoted" not in val, (name, labels)
for (route, status, method), count in want.items():
    c = parse.get(s, "weft_http_request_duration_seconds_count", method=method, route=route, status=status)
    assert c == count, ("histogram", route, status, c)' "$E2E_TMP" "$E2E_TMP/metrics.txt"

check "snapshot version, age and swaps" $PY -c '
import calendar, json, os, sys, time; sys.path.insert(0, sys.argv[1]); import parse
s = parse.parse(sys.argv[2]); m = json.load(open(sys.argv[3]))
assert parse.get(s, "weft_snapshot_version") == m["version"] == 1
age = parse.get(s, "weft_snapshot_age_seconds")
created = calendar.timegm(time.strptime(m["created"], "%Y-%m-%dT%H:%M:%SZ"))
answered = os.path.getmtime(sys.argv[2])   # created has whole seconds: within 2 s
assert abs(age - (answered - created)) < 2, (age, answered - created)
assert parse.get(s, "weft_snapshot_swaps_total") == 1
assert parse.get(s, "weft_snapshot_load_failures_total") == 0
assert abs(parse.get(s, "weft_snapshot_loaded_timestamp_seconds") - time.time()) < 60' \
    "$E2E_TMP" "$E2E_TMP/metrics.txt" "$E2E_TMP/manifest.json"

check "model metrics = the manifest's test metrics and baselines, by part" $PY -c '
import json, sys; sys.path.insert(0, sys.argv[1]); import parse
s = parse.parse(sys.argv[2]); m = json.load(open(sys.argv[3]))["models"]["link"]["metrics"]
for k in ("mrr", "hits@1", "hits@3", "hits@10"):
    got = parse.get(s, "weft_model_test_metric", part="link", metric=k)
    assert abs(got - m["test"][k]) < 1e-12, (k, got, m["test"][k])
    got = parse.get(s, "weft_model_baseline_test_metric", part="link", baseline="popularity", metric=k)
    assert abs(got - m["baselines"]["popularity"][k]) < 1e-12, (k, got)
assert parse.get(s, "weft_model_beats_baselines", part="link") == (1 if m["beats_baselines"] else 0)' \
    "$E2E_TMP" "$E2E_TMP/metrics.txt" "$E2E_TMP/manifest.json"

check "resident memory within 25% of /proc/PID/status VmRSS, start time = now - ps etimes" $PY -c '
import subprocess, sys, time; sys.path.insert(0, sys.argv[1]); import parse
s = parse.parse(sys.argv[2]); pid = sys.argv[3]
rss = [int(l.split()[1]) * 1024 for l in open("/proc/%s/status" % pid) if l.startswith("VmRSS:")][0]
got = parse.get(s, "weft_process_resident_memory_bytes")
assert abs(got - rss) <= 0.25 * rss, (got, rss)
etimes = int(subprocess.check_output(["ps", "-o", "etimes=", "-p", pid]))
start = parse.get(s, "weft_process_start_time_seconds")
assert abs(start - (time.time() - etimes)) < 3, (start, time.time() - etimes)' \
    "$E2E_TMP" "$E2E_TMP/metrics.txt" "$SERVER_PID"

check "access log: one JSON line per request, the fields, escaped text" $PY -c '
import json, sys
lines = [json.loads(l) for l in open(sys.argv[1])]
keys = {"time", "method", "route", "path", "status", "duration_ms", "bytes", "version", "remote"}
assert all(set(l) == keys for l in lines), lines[0]
lines = [l for l in lines if l["route"] != "/readyz"]   # the start-up probe
assert len(lines) == 11, len(lines)   # the 9 requests, the 4th /v1/model, /metrics
model = [l for l in lines if l["route"] == "/v1/model" and l["status"] == 200]
assert len(model) == 4 and all(l["version"] == 1 and l["bytes"] > 0 for l in model)
odd = [l for l in lines if l["path"].startswith("/\ufffd")]
assert len(odd) == 1 and odd[0]["path"] == "/\ufffd\"quoted" and odd[0]["route"] is None, odd
assert [l["path"] for l in lines if l["status"] == 404 and l["route"] is None][0] == "/no/such/path"
assert all(l["remote"] == "127.0.0.1" and l["time"].endswith("Z") for l in lines)' \
    "$E2E_TMP/access.log"

# A second version: one more swap.
"$WEFT" train --quiet --force --store "$S" --edges "$KARATE" --model dot --undirected \
    --threads 1 --seed 2 >>"$E2E_TMP/train.log" 2>&1
i=0
until curl -sS "$BASE/metrics" | grep -q '^weft_snapshot_version 2$' || [ $i -ge 50 ]; do
    sleep 0.1
    i=$((i + 1))
done
curl -sS "$BASE/metrics" >"$E2E_TMP/metrics2.txt"
check "after a promotion: version 2, two swaps" $PY -c '
import sys; sys.path.insert(0, sys.argv[1]); import parse
s = parse.parse(sys.argv[2])
assert parse.get(s, "weft_snapshot_version") == 2 and parse.get(s, "weft_snapshot_swaps_total") == 2' \
    "$E2E_TMP" "$E2E_TMP/metrics2.txt"

# ---- a real Prometheus server scrapes weft and gives the series back ----
if ! command -v prometheus >/dev/null 2>&1; then
    echo "SKIP the Prometheus server check: no prometheus binary (deploy/install-deps.sh installs it)"
    finish
fi
PPORT=$(free_port)
cat >"$E2E_TMP/prometheus.yml" <<EOF
global:
  scrape_interval: 1s
  scrape_timeout: 1s
scrape_configs:
  - job_name: weft
    static_configs:
      - targets: ['127.0.0.1:$PORT']
EOF
prometheus --config.file="$E2E_TMP/prometheus.yml" --storage.tsdb.path="$E2E_TMP/prometheus" \
    --web.listen-address="127.0.0.1:$PPORT" >"$E2E_TMP/prometheus.log" 2>&1 &
PROM_PID=$!
# query.py PORT EXPR: the value Prometheus gives for EXPR, once it has one (at most 20 s).
cat >"$E2E_TMP/query.py" <<'EOF'
import json, sys, time, urllib.parse, urllib.request
port, expr = sys.argv[1], sys.argv[2]
url = "http://127.0.0.1:%s/api/v1/query?%s" % (port, urllib.parse.urlencode({"query": expr}))
end = time.time() + 20
while time.time() < end:
    try:
        d = json.load(urllib.request.urlopen(url, timeout=2))
        if d["status"] == "success" and d["data"]["result"]:
            print(d["data"]["result"][0]["value"][1])
            sys.exit(0)
    except OSError:
        pass
    time.sleep(0.25)
sys.exit(1)
EOF
up=$($PY "$E2E_TMP/query.py" "$PPORT" 'up{job="weft"} == 1')
check "Prometheus scrapes weft: up = 1" [ "$up" = 1 ]
version=$($PY "$E2E_TMP/query.py" "$PPORT" 'weft_snapshot_version')
check "Prometheus reads weft_snapshot_version = 2, as weft reports it" [ "$version" = 2 ]
seen=$($PY "$E2E_TMP/query.py" "$PPORT" 'weft_http_requests_total{route="/v1/model",method="GET",status="200"}')
ours=$($PY -c 'import sys; sys.path.insert(0, sys.argv[1]); import parse
print("%g" % parse.get(parse.parse(sys.argv[2]), "weft_http_requests_total", route="/v1/model", method="GET", status="200"))' \
    "$E2E_TMP" "$E2E_TMP/metrics2.txt")
check "Prometheus reads the /v1/model request count = weft's ($ours)" [ "$seen" = "$ours" ]
check "Prometheus: the scrape has no error" $PY -c '
import json, sys, urllib.request
d = json.load(urllib.request.urlopen("http://127.0.0.1:%s/api/v1/targets" % sys.argv[1]))
t = [t for t in d["data"]["activeTargets"] if t["labels"]["job"] == "weft"][0]
print(t["health"], repr(t["lastError"]))
assert t["health"] == "up" and t["lastError"] == ""' "$PPORT"
kill "$PROM_PID"
wait "$PROM_PID" 2>/dev/null
finish
