#!/bin/sh
# The analyst page (GET /, GET /assets/{file}) and the map it draws (GET /v1/map):
# - the page's files as served: the bytes of web/, their Content-Type, a strict
#   Content-Security-Policy, ETag and 304; nothing loaded from another site, no inline script;
# - GET /v1/map against numpy: the same rows of the stored entity matrix (read from the store
#   with mdb_dump, lmdb-utils), centred, through np.linalg.svd (/usr/bin/python3) give the same
#   explained variance and the same coordinates up to each component's sign, for every node
#   and for a sample; the figures go to $BUILD/artifacts/pca-check.txt;
# - the page in a real browser: Debian's chromium, headless, driven by playwright-core
#   (tests/browser/page_test.js, installed from tests/browser/package-lock.json by npm ci), with
#   every request to another site refused; it runs a link query and a label explanation through
#   the forms and checks the rendered rows against the API; screenshots at 1280x800 and
#   390x844 are kept in $BUILD/artifacts/. Without chromium (deploy/install-deps.sh installs
#   it) the browser part prints a SKIP line and the rest still runs.
# Data: Cora (tests/data/cora, provenance in tests/data/README.md) with a link and a label
# model (--model dot,gcn) and node types derived from the labels (class cN -> type tN); DATA
# below switches to the invented data of `weft demo` (DistMult, five relations).
set -u
. "$TOP/tests/e2e/lib.sh"

DATA=${PAGE_DATA:-cora}   # cora | demo

STORE="$E2E_TMP/store"
ART="$BUILD/artifacts"
mkdir -p "$ART"
rm -f "$ART"/page-*.png "$ART/pca-check.txt"

case "$DATA" in
cora)
    D="$TOP/tests/data/cora"
    sed 's/\tc/\tt/' "$D/labels.tsv" >"$E2E_TMP/types.tsv"
    set -- --model dot,gcn --edges "$D/edges.tsv" --undirected --features "$D/features.tsv" \
        --labels "$D/labels.tsv" --split "$D/split.tsv" --types "$E2E_TMP/types.tsv" --epochs 30
    LINK_NODE=n0
    LABEL_NODE=n0
    ;;
demo)
    D="$E2E_TMP/demo"
    "$WEFT" demo --out "$D" >"$E2E_TMP/demo.log" 2>&1
    set -- --model distmult,gcn --edges "$D/edges.tsv" --types "$D/types.tsv" \
        --features "$D/features.tsv" --labels "$D/labels.tsv" --split "$D/split.tsv" --epochs 5
    LINK_NODE=$(awk -F'\t' '$1 == "buyer" {print $2}' "$D/examples.tsv")
    LABEL_NODE=$(awk -F'\t' '$1 == "seller" {print $2}' "$D/examples.tsv")
    ;;
*)
    echo "PAGE_DATA must be cora or demo, not $DATA"
    exit 1
    ;;
esac
check "weft train: a link and a label model on the $DATA data" \
    sh -c 'log=$0; "$@" >"$log" 2>&1 || { cat "$log"; exit 1; }' "$E2E_TMP/train.log" \
    "$WEFT" train --quiet --force --store "$STORE" --threads 2 "$@"
start_server "$STORE" --access-log off || finish

# ---- the page's files as served ----

HDR="$E2E_TMP/headers"
curl -sS -D "$HDR" -o "$E2E_TMP/index.html" "$BASE/"
header() {   # header NAME: its value in $HDR, without the line end
    awk -v n="$1" 'tolower($0) ~ "^" tolower(n) ":" {
        sub(/^[^:]*: */, ""); sub(/\r$/, ""); print }' "$HDR"
}
check "GET / answers 200 with web/index.html" cmp -s "$E2E_TMP/index.html" "$TOP/web/index.html"
check "GET / is text/html; charset=utf-8" test "$(header Content-Type)" = "text/html; charset=utf-8"
CSP=$(header Content-Security-Policy)
check "a strict Content-Security-Policy: scripts and styles only from this server" sh -c '
    case "$0" in *unsafe*|*"*"*|*http*) exit 1 ;; esac
    for want in "default-src '\''none'\''" "script-src '\''self'\''" "style-src '\''self'\''" \
        "connect-src '\''self'\''" "frame-ancestors '\''none'\''"; do
        case "$0" in *"$want"*) ;; *) exit 1 ;; esac
    done' "$CSP"
check "X-Content-Type-Options: nosniff" test "$(header X-Content-Type-Options)" = nosniff
ETAG=$(header ETag)
check "an ETag, revalidated on every load (Cache-Control: no-cache)" \
    sh -c 'test -n "$0" && test "$1" = no-cache' "$ETAG" "$(header Cache-Control)"
check "If-None-Match with the ETag: 304 and no body" sh -c '
    test "$(curl -sS -o "$2" -w "%{http_code}" -H "If-None-Match: $1" "$0/")" = 304 && ! test -s "$2"' \
    "$BASE" "$ETAG" "$E2E_TMP/304.body"

for f in app.js app.css; do
    case $f in *.js) type="text/javascript; charset=utf-8" ;; *) type="text/css; charset=utf-8" ;; esac
    curl -sS -D "$HDR" -o "$E2E_TMP/$f" "$BASE/assets/$f"
    check "GET /assets/$f: the bytes of web/$f as $type" \
        sh -c 'cmp -s "$0" "$1" && test "$2" = "$3"' "$E2E_TMP/$f" "$TOP/web/$f" \
        "$(header Content-Type)" "$type"
done
check "GET /assets/ of a file the page lacks: 404 with the JSON error" sh -c '
    test "$(curl -sS -o "$1" -w "%{http_code}" "$0/assets/nothing.js")" = 404 &&
    grep -q "\"code\":\"not_found\"" "$1"' "$BASE" "$E2E_TMP/404.json"

# Offline by construction: every src and href of the page is one of its own files (or a
# data: URL, the empty icon), no script is inline, no element carries a style or an on...
# handler (the CSP would refuse them), and the script names no other site (the SVG namespace
# is a name, never fetched).
check "the page loads only its own files and has no inline script or style" \
    /usr/bin/python3 -c '
import re, sys
html = open(sys.argv[1]).read()
refs = re.findall(r"""(?:src|href)\s*=\s*["\x27]([^"\x27]*)""", html)
bad = [r for r in refs if not (r.startswith("/assets/") or r.startswith("#") or r == "data:,")]
bad += ["inline <script>" for s in re.findall(r"<script\b[^>]*>", html) if "src=" not in s]
bad += ["style attribute" for _ in re.findall(r"\sstyle\s*=", html)]
bad += ["handler " + h for h in re.findall(r"\s(on[a-z]+)\s*=", html)]
js = open(sys.argv[2]).read()
bad += [u for u in re.findall(r"https?://[^\s\"\x27)]+", js) if u != "http://www.w3.org/2000/svg"]
bad += ["@import or url() in the CSS" for _ in re.findall(r"@import|url\(", open(sys.argv[3]).read())]
if bad:
    print("\n".join(bad))
sys.exit(1 if bad else 0)' "$E2E_TMP/index.html" "$E2E_TMP/app.js" "$E2E_TMP/app.css"

# ---- GET /v1/map against numpy ----

mdb_dump -s blobs "$STORE" >"$E2E_TMP/blobs.dump" 2>"$E2E_TMP/mdb_dump.err"
cat >"$E2E_TMP/pca.py" <<'EOF'
import json, sys, urllib.request
import numpy as np

base, dump, report = sys.argv[1:4]
blobs, lines, i = {}, open(dump).read().split("\n"), 0
while lines[i] != "HEADER=END":
    i += 1
i += 1
while lines[i] != "DATA=END":
    key, value = bytes.fromhex(lines[i].strip()), bytes.fromhex(lines[i + 1].strip())
    blobs[(int.from_bytes(key[:8], "big"), key[8:].decode())] = value[48:]
    i += 2
off = np.frombuffer(blobs[(1, "nodes.off")], dtype=np.uint64)
raw = blobs[(1, "nodes.bytes")]
names = [raw[off[j]:off[j + 1]].split(b"\0")[0].decode() for j in range(len(off) - 1)]
ids = {n: j for j, n in enumerate(names)}
E = np.frombuffer(blobs[(1, "entity")], dtype=np.float32).reshape(len(names), -1).astype(np.float64)

out, bad = [], 0
def say(line):
    print(line)
    out.append(line)

for max_points in (20000, 500):
    d = json.load(urllib.request.urlopen(f"{base}/v1/map?max_points={max_points}"))
    rows = [ids[p["name"]] for p in d["points"]]
    m = len(rows)
    ok_rows = rows == sorted(set(rows)) and m == min(max_points, len(names))
    X = E[rows] - E[rows].mean(axis=0)
    U, S, Vt = np.linalg.svd(X, full_matrices=False)   # numpy's SVD of the centred rows
    var = S ** 2 / (m - 1)
    ref = X @ Vt[:2].T
    got = np.array([[p["x"], p["y"]] for p in d["points"]])
    var_err = np.abs(np.array(d["explained_variance"]) - var[:2]) / var[:2]
    ratio_err = np.abs(np.array(d["explained_variance_ratio"]) - var[:2] / var.sum())
    total_err = abs(d["total_variance"] - var.sum()) / var.sum()
    coord_err = [min(np.abs(got[:, j] - ref[:, j]).max(), np.abs(got[:, j] + ref[:, j]).max())
                 / np.abs(ref[:, j]).max() for j in range(2)]
    good = (ok_rows and d["sampled"] == (m < len(names)) and var_err.max() < 1e-6
            and ratio_err.max() < 1e-7 and total_err < 1e-6 and max(coord_err) < 1e-5)
    bad += not good
    say(f"{'ok  ' if good else 'FAIL'} /v1/map?max_points={max_points}: {m} of {len(names)} rows "
        f"of dimension {E.shape[1]} ({'ascending, distinct' if ok_rows else 'WRONG ROWS'})")
    say(f"     explained variance  weft {d['explained_variance'][0]:.9g}, {d['explained_variance'][1]:.9g}"
        f"  numpy {var[0]:.9g}, {var[1]:.9g}  (relative difference {var_err.max():.2e})")
    say(f"     share of variance   weft {d['explained_variance_ratio'][0]:.9g}, "
        f"{d['explained_variance_ratio'][1]:.9g}  numpy {var[0] / var.sum():.9g}, "
        f"{var[1] / var.sum():.9g}  (total {d['total_variance']:.9g} / {var.sum():.9g})")
    say(f"     coordinates up to sign: largest difference {coord_err[0]:.2e}, {coord_err[1]:.2e} "
        f"of each component's range; eigenvalue gap lambda2/lambda3 = {var[1] / var[2]:.4f}")
open(report, "w").write("GET /v1/map against numpy's SVD (np.linalg.svd of the centred rows)\n"
                        + "\n".join(out) + "\n")
sys.exit(1 if bad else 0)
EOF
check "GET /v1/map: PCA against numpy's SVD (figures in \$BUILD/artifacts/pca-check.txt)" \
    /usr/bin/python3 "$E2E_TMP/pca.py" "$BASE" "$E2E_TMP/blobs.dump" "$ART/pca-check.txt"
check "GET /v1/map carries the words of the label routes' caution" /usr/bin/python3 -c '
import json, sys, urllib.request
get = lambda p: json.load(urllib.request.urlopen(sys.argv[1] + p))
a, b = get("/v1/map?max_points=5")["caution"], get("/v1/labels/predict?node=" + sys.argv[2])["caution"]
sys.exit(0 if a == b and len(a) > 40 else 1)' "$BASE" "$LABEL_NODE"
check "GET /v1/map twice: the same answer (a fixed sample, a fixed start)" sh -c '
    curl -sS "$0/v1/map?max_points=300" >"$1.a" && curl -sS "$0/v1/map?max_points=300" >"$1.b" &&
    cmp -s "$1.a" "$1.b"' "$BASE" "$E2E_TMP/map"

# ---- the page in a real browser ----

CHROMIUM=${CHROMIUM:-/usr/bin/chromium}
BROWSER_DIR="$TOP/tests/browser"
if [ ! -x "$CHROMIUM" ]; then
    echo "SKIP the page in a browser: $CHROMIUM is not installed (deploy/install-deps.sh installs chromium)"
    finish
fi
check "node is installed (deploy/install-deps.sh installs nodejs and npm)" \
    sh -c 'command -v node >/dev/null'
# playwright-core as pinned in package-lock.json, installed once into tests/browser/node_modules.
lock_version() {
    node -e 'const p = require(process.argv[1]); console.log(p.packages["node_modules/playwright-core"].version)' \
        "$BROWSER_DIR/package-lock.json" 2>/dev/null
}
have_version() {
    node -e 'console.log(require(process.argv[1]).version)' \
        "$BROWSER_DIR/node_modules/playwright-core/package.json" 2>/dev/null
}
if [ "$(have_version)" != "$(lock_version)" ]; then
    check "npm ci in tests/browser (playwright-core $(lock_version))" \
        sh -c 'cd "$0" && npm ci --no-audit --no-fund --loglevel=error >"$1" 2>&1 || { cat "$1"; exit 1; }' \
        "$BROWSER_DIR" "$E2E_TMP/npm.log"
fi
check "the page in $CHROMIUM: queries, map, keyboard, offline, screenshots in \$BUILD/artifacts" \
    env CHROMIUM="$CHROMIUM" node "$BROWSER_DIR/page_test.js" "$BASE" "$ART" "$LINK_NODE" \
    "$LABEL_NODE"
for shot in page-1280x800.png page-390x844.png; do
    check "screenshot $shot kept" test -s "$ART/$shot"
done

finish
