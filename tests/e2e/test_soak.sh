#!/bin/sh
# The soak of `make bench` for one minute (bench/soak.sh, SOAK_SECONDS=60): mixed load (link
# and label predictions and explanations, metric scrapes) with a promotion every 10 s. Fails
# on any error (wrk's non-2xx and socket errors, answers the server counted outside 2xx), a
# promotion not served, or growth of resident memory, file descriptors or threads past
# bench/soak.sh's rule (end against the sample after the warm-up). Data: Cora
# (tests/data/cora, provenance in tests/data/README.md).
. "$TOP/tests/e2e/lib.sh"
command -v wrk >/dev/null || { echo "wrk missing: deploy/install-deps.sh installs it"; exit 1; }
SOAK_SECONDS=${SOAK_SECONDS:-60} SOAK_DIR="$E2E_TMP/soak" REPORT="$E2E_TMP/report.md" \
    BUILD="$BUILD" sh "$TOP/bench/soak.sh"
rc=$?
check "bench/soak.sh exits 0" test $rc -eq 0
check "the report's section is written" grep -q "^## Soak: " "$E2E_TMP/report.md"
check "requests were answered" grep -Eq "^Requests: [1-9][0-9]* " "$E2E_TMP/report.md"
check "no error" grep -q "^Errors: 0 (wrk non-2xx 0, socket errors 0; answers outside 2xx counted by the server 0)" "$E2E_TMP/report.md"
check "every promotion was served" grep -q "^Promotions: [1-9][0-9]* done, 0 failed;.* load failures 0. Server alive at the end: yes" "$E2E_TMP/report.md"
check "nothing grew" grep -q "^Growth: not growing" "$E2E_TMP/report.md"
finish
