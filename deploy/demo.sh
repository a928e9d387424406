#!/bin/sh
# make demo: train a link model on the demo graph into ./demo-store and serve it on
# 127.0.0.1:$PORT until Ctrl-C. Each run adds a snapshot version and promotes it.
# Until weft has a demo data set of its own, the graph is the Cora citation network
# (Sen et al. 2008; tests/data/cora): 2,708 machine-learning papers, 5,278 citation links.
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
PORT=${PORT:-8080}
STORE=${STORE:-$TOP/demo-store}
WEFT="$BUILD/weft"
EDGES="$TOP/tests/data/cora/edges.tsv"

echo "== weft inspect $EDGES"
"$WEFT" inspect --undirected "$EDGES"
echo
echo "== weft train (the defaults: a dot model for a one-relation graph)"
"$WEFT" train --store "$STORE" --edges "$EDGES" --undirected --seed 7 --quiet
echo
cat <<EOT
== weft serve on http://127.0.0.1:$PORT  (Ctrl-C stops it). Try, in another terminal:
  curl -s 'http://127.0.0.1:$PORT/v1/links/predict?source=n0&k=5&pretty=1'
  curl -s 'http://127.0.0.1:$PORT/v1/model?pretty=1'
  curl -s 'http://127.0.0.1:$PORT/healthz'
EOT
exec "$WEFT" serve --store "$STORE" --listen "127.0.0.1:$PORT"
