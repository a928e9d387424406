#!/bin/sh
# make demo: writes the invented demo data (weft demo: a regional marketplace for hobby
# electronics parts) to $DATA, trains a link model (ComplEx) and a label model (GCN) into one
# snapshot in $STORE, and serves it on $HOST:$PORT until Ctrl-C, after printing curl
# examples that work as printed.
#
#   deploy/demo.sh              generate, train, serve (what `make demo` runs)
#   deploy/demo.sh --examples   print only the curl examples for $HOST:$PORT and the data in
#                               $DATA (generated first when missing); starts nothing
#
# Environment: BUILD (build), HOST (127.0.0.1), PORT (8080), VAR (./var), DATA
# ($VAR/demo-data), STORE ($VAR/store).
#
# Running it again regenerates the same data (same seed, same bytes) and trains again into
# the same store: the new snapshot becomes the next version if it passes the gate; if the gate
# refuses it, the live version keeps serving. `rm -rf var` starts from nothing.
set -eu
TOP=$(cd "$(dirname "$0")/.." && pwd)
BUILD=${BUILD:-build}
case "$BUILD" in /*) ;; *) BUILD="$TOP/$BUILD" ;; esac
HOST=${HOST:-127.0.0.1}
PORT=${PORT:-8080}
VAR=${VAR:-$TOP/var}
DATA=${DATA:-$VAR/demo-data}
STORE=${STORE:-$VAR/store}
WEFT="$BUILD/weft"
SEED=1

# example WHAT: the node examples.tsv names for WHAT (buyer, part, seller).
example() {
    awk -F '\t' -v what="$1" '$1 == what { print $2; exit }' "$DATA/examples.tsv"
}

generate() {
    "$WEFT" demo --out "$DATA" --seed "$SEED"
}

# The curl examples, one command a line, for the data in $DATA and the server at $HOST:$PORT.
print_examples() {
    base="http://$HOST:$PORT"
    buyer=$(example buyer)
    part=$(example part)
    seller=$(example seller)
    cat <<EOT
# the 5 parts $buyer (a drone hobbyist) is most likely to buy next:
curl -s '$base/v1/links/predict?source=$buyer&relation=bought&candidate_type=part&k=5&pretty=1'
# why $part: similar buyers who bought it, and two-step paths (a part they bought
# fits it, a shop they buy from sells it):
curl -s '$base/v1/links/explain?source=$buyer&relation=bought&target=$part&k=5&pretty=1'
# how likely $seller (no observed label) is to be suspicious, and which neighbours say so:
curl -s '$base/v1/labels/predict?node=$seller&pretty=1'
curl -s '$base/v1/labels/explain?node=$seller&k=5&pretty=1'
# the model checks, and the Prometheus metrics:
curl -s '$base/v1/health?pretty=1'
curl -s '$base/metrics'
EOT
}

case "${1:-}" in
    --examples)
        [ -s "$DATA/examples.tsv" ] || generate >/dev/null
        print_examples
        exit 0
        ;;
    -h | --help)
        sed -n '2,/^set -eu/p' "$0" | sed '$d' | sed 's/^# \{0,1\}//'
        exit 0
        ;;
    "") ;;
    *)
        echo "demo.sh: unknown option '$1' (see deploy/demo.sh --help)" >&2
        exit 2
        ;;
esac

echo "== weft demo: the invented data set, in $DATA"
generate
echo
echo "== weft inspect $DATA/edges.tsv"
"$WEFT" inspect "$DATA/edges.tsv"
echo
echo "== weft train: ComplEx for the links, a GCN for the sellers' labels, one snapshot in $STORE"
# The link model's settings, measured on this data: ComplEx ranks a little above DistMult; dim
# 64 does as well as 200 at a third of the time; an N3 weight of 0.03 (the default 0.1 learns
# slower) and 30 epochs whatever the validation curve does, as it is still rising, slowly and
# noisily, there (the best epoch is kept). The GCN keeps its defaults.
start=$(date +%s.%N)
status=0
"$WEFT" train --store "$STORE" --model complex,gcn --dim 64 --reg-weight 0.03 --epochs 30 \
    --patience 0 --seed "$SEED" --quiet \
    --edges "$DATA/edges.tsv" --types "$DATA/types.tsv" --features "$DATA/features.tsv" \
    --labels "$DATA/labels.tsv" --split "$DATA/split.tsv" || status=$?
end=$(date +%s.%N)
echo "training took $(awk -v a="$start" -v b="$end" 'BEGIN { printf "%.1f", b - a }') s"
case $status in
    0) ;;
    3) echo "the gate refused this run's snapshot: the live version keeps serving" \
            "(rm -rf '$VAR' starts the demo from nothing)" ;;
    *) exit "$status" ;;
esac
echo
cat <<EOT
== weft serve on http://$HOST:$PORT (Ctrl-C stops it). Try, in another terminal:

$(print_examples)

Everything in this data set is invented. On real data, a predicted label about a seller is a
probabilistic guess learnt from past labels: it can be wrong and can carry their biases. Have
a person review it before acting on it; local law and data-protection rules decide what may
be done with it.

EOT
exec "$WEFT" serve --store "$STORE" --listen "$HOST:$PORT"
