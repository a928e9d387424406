#!/bin/sh
# Installs, only where missing, every Debian package weft needs to build, run and test.
# This is the one place that lists them. Safe to run again: it does nothing when all are present.
#   deploy/install-deps.sh          install what is missing (uses sudo when not root)
#   deploy/install-deps.sh --check  exit 1 and list what is missing, install nothing
set -eu

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
python3
python3-numpy
python3-scipy
python3-sklearn
python3-jsonschema
python3-yaml
openapi-specification
"

missing=""
for p in $PACKAGES; do
    status=$(dpkg-query -W -f='${Status}' "$p" 2>/dev/null || true)
    case "$status" in
        "install ok installed") ;;
        *) missing="$missing $p" ;;
    esac
done

if [ -z "$missing" ]; then
    [ "${1:-}" = "--check" ] || echo "install-deps: all packages present"
    exit 0
fi
if [ "${1:-}" = "--check" ]; then
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
