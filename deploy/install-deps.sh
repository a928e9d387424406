#!/bin/sh
# Installs, only where missing, every Debian package weft needs to build, run and test.
# This is the one place that lists them. Safe to run again: it does nothing when all are present.
#   deploy/install-deps.sh                  install what is missing (uses sudo when not root)
#   deploy/install-deps.sh --check          exit 1 and list what is missing, install nothing
#   deploy/install-deps.sh --bench [--check]  the same, plus what `make bench` compares against
#   deploy/install-deps.sh --fuzz [--check]   the same, plus what `make fuzz` builds with
set -eu

with_bench=0
with_fuzz=0
check_only=0
for arg in "$@"; do
    case "$arg" in
        --bench) with_bench=1 ;;
        --fuzz) with_fuzz=1 ;;
        --check) check_only=1 ;;
        *) echo "install-deps: unknown option $arg" >&2; exit 2 ;;
    esac
done

PACKAGES="
build-essential
pkg-config
libmicrohttpd-dev
libjansson-dev
liblmdb-dev
lmdb-utils
libcriterion-dev
libopenblas-dev
libopenblas0-pthread
zlib1g-dev
nettle-dev
curl
openssl
python3
python3-numpy
python3-scipy
python3-sklearn
python3-jsonschema
python3-yaml
openapi-specification
prometheus
wrk
chromium
fonts-dejavu-core
nodejs
"
# The analyst page's browser test (tests/e2e/test_page.sh) drives chromium with playwright-core,
# which npm installs from tests/browser/package-lock.json. A node installed from elsewhere that
# brings its own npm (and conflicts with Debian's npm package) is kept as it is.
command -v npm >/dev/null 2>&1 || PACKAGES="$PACKAGES npm"

# Only for `make bench`: the reference programs of ../shared/bench (PyTorch) and load tools.
BENCH_PACKAGES="
python3-torch
python3-flask
util-linux
"
[ "$with_bench" -eq 1 ] && PACKAGES="$PACKAGES $BENCH_PACKAGES"

# Only for `make fuzz`: clang with libFuzzer and its sanitizer runtimes (tests/fuzz). The
# replay of the corpora in `make test` needs none of them.
FUZZ_PACKAGES="
clang
libfuzzer-14-dev
"
[ "$with_fuzz" -eq 1 ] && PACKAGES="$PACKAGES $FUZZ_PACKAGES"

missing=""
for p in $PACKAGES; do
    status=$(dpkg-query -W -f='${Status}' "$p" 2>/dev/null || true)
    case "$status" in
        "install ok installed") ;;
        *) missing="$missing $p" ;;
    esac
done

if [ -z "$missing" ]; then
    [ "$check_only" -eq 1 ] || echo "install-deps: all packages present"
    exit 0
fi
if [ "$check_only" -eq 1 ]; then
    echo "install-deps: missing:$missing"
    exit 1
fi

echo "install-deps: installing:$missing"
SUDO=""
[ "$(id -u)" -eq 0 ] || SUDO="sudo"
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -q
# shellcheck disable=SC2086 # word splitting of the package list is intended
$SUDO apt-get install -y -q --no-install-recommends $missing
echo "install-deps: done"
