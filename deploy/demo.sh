#!/bin/sh
# make demo: train a link model on the demo graph into ./demo-store and serve it on
# 127.0.0.1:$PORT until Ctrl-C. Each run adds a snapshot version and promotes it.
# Until weft has a demo data set of its own, the graph is Zachary's karate club (1977),
# tests/data/karate, a public social network of 34 members.
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
PORT=${PORT:-8080}
STORE=${STORE:-$TOP/demo-store}
WEFT="$BUILD/weft"
EDGES="$TOP/tests/data/karate/edges.tsv"

echo "== weft inspect $EDGES"
"$WEFT" inspect --undirected "$EDGES"
echo
echo "== weft train (dot model, 16 dimensions)"
"$WEFT" train --store "$STORE" --edges "$EDGES" --undirected --dim 16 --epochs 100 --seed 7
echo
cat <<EOT
== weft serve on http://127.0.0.1:$PORT  (Ctrl-C stops it). Try, in another terminal:
  curl -s 'http://127.0.0.1:$PORT/v1/links/predict?source=m0&k=5&pretty=1'
  curl -s 'http://127.0.0.1:$PORT/v1/model?pretty=1'
  curl -s 'http://127.0.0.1:$PORT/healthz'
EOT
exec "$WEFT" serve --store "$STORE" --listen "127.0.0.1:$PORT"
