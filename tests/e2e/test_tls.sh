#!/bin/sh
# weft serve over HTTPS (--tls-cert, --tls-key). A self-signed certificate is made here with
# openssl (P-256, valid 2 days, for 127.0.0.1); a store trained on Cora (tests/data/cora,
# 3 epochs: it passes the gate and every health check) is served twice, over TLS and over
# plain HTTP, and the answers must be the same. Also: plain HTTP to the TLS port gets no
# answer, a client without the certificate refuses the server, TLS 1.2 and 1.3 are served
# and 1.1 is refused (the client side allows 1.1 explicitly, so only the server can refuse
# it), an encrypted key with --tls-key-password-file, and the start-up errors (a missing
# flag: exit 2; a bad file: named in the message; GnuTLS's refusals: exit 1).
set -u
. "$TOP/tests/e2e/lib.sh"

EDGES="$TOP/tests/data/cora/edges.tsv"
STORE="$E2E_TMP/store"
T="$E2E_TMP/tls"
mkdir "$STORE" "$T"
TLS_PID=""

# self_signed KEY CERT CN [openssl req option...]: a new P-256 key and a certificate for it,
# valid 2 days.
self_signed() {
    key=$1
    cert=$2
    cn=$3
    shift 3
    openssl req -x509 -newkey ec -pkeyopt ec_paramgen_curve:P-256 -nodes -days 2 \
        -keyout "$key" -out "$cert" -subj "/CN=$cn" "$@" >>"$E2E_TMP/openssl.log" 2>&1
}

# ---- a self-signed certificate and a store ----
check "openssl makes a self-signed certificate for 127.0.0.1" \
    self_signed "$T/key.pem" "$T/cert.pem" 127.0.0.1 -addext subjectAltName=IP:127.0.0.1
chmod 600 "$T/key.pem"
check "weft train on Cora (version 1)" sh -c "'$WEFT' train --quiet --store '$STORE' \
    --edges '$EDGES' --undirected --epochs 3 --threads 1 >'$E2E_TMP/train.log' 2>&1"

# start_tls [ARG...]: weft serve --tls-cert/--tls-key (and ARGs) on a free port; sets TPORT,
# TBASE and TLS_PID and waits until /readyz answers 200 over TLS (the snapshot is live).
start_tls() {
    TPORT=$(free_port)
    TBASE="https://127.0.0.1:$TPORT"
    "$WEFT" serve --store "$STORE" --listen "127.0.0.1:$TPORT" "$@" \
        >"$E2E_TMP/tls-server.log" 2>&1 &
    TLS_PID=$!
    i=0
    while [ $i -lt 300 ]; do
        [ "$(curl -sS -o /dev/null -w '%{http_code}' --cacert "$T/cert.pem" "$TBASE/readyz" \
            2>/dev/null)" = 200 ] && return 0
        kill -0 "$TLS_PID" 2>/dev/null || break
        sleep 0.1
        i=$((i + 1))
    done
    echo "TLS server did not start:"
    cat "$E2E_TMP/tls-server.log"
    return 1
}

# stop_tls: SIGTERM, and the exit status in $TLS_RC (0 after a clean stop; under
# AddressSanitizer a leak would make it non-zero).
stop_tls() {
    kill -TERM "$TLS_PID" 2>/dev/null
    wait "$TLS_PID"
    TLS_RC=$?
    TLS_PID=""
}

done_tls() {
    [ -n "$TLS_PID" ] && stop_tls
    finish
}

# tget NAME PATH [curl options...]: over TLS, trusting cert.pem; body to $E2E_TMP/NAME.tls,
# status to $STATUS.
tget() {
    name=$1
    path=$2
    shift 2
    STATUS=$(curl -sS --cacert "$T/cert.pem" -o "$E2E_TMP/$name.tls" -w '%{http_code}' "$@" \
        "$TBASE$path")
}

# pget NAME PATH [curl options...]: the same over plain HTTP to the second server.
pget() {
    name=$1
    path=$2
    shift 2
    curl -sS -o "$E2E_TMP/$name.plain" "$@" "$BASE$path"
}

same() {
    cmp -s "$E2E_TMP/$1.tls" "$E2E_TMP/$1.plain"
}

# ---- the same store over TLS and over plain HTTP ----
start_tls --tls-cert "$T/cert.pem" --tls-key "$T/key.pem" || done_tls
start_server "$STORE" || done_tls
i=0
until [ "$(curl -sS -o /dev/null -w '%{http_code}' "$BASE/readyz")" = 200 ] || [ $i -ge 300 ]; do
    sleep 0.1
    i=$((i + 1))
done

check "the start-up log says https://" \
    grep -q "listening on https://127.0.0.1:$TPORT " "$E2E_TMP/tls-server.log"
check "the start-up log says http:// without TLS" \
    grep -q "listening on http://127.0.0.1:$PORT " "$E2E_TMP/server.log"

# The loader measures input coverage shortly after the swap: wait for a 200 on both.
i=0
until tget health /v1/health && [ "$STATUS" = 200 ] &&
    [ "$(curl -sS -o "$E2E_TMP/health.plain" -w '%{http_code}' "$BASE/v1/health")" = 200 ] ||
    [ $i -ge 100 ]; do
    sleep 0.1
    i=$((i + 1))
done
check "GET /v1/health over TLS: 200" [ "$STATUS" = 200 ]
check "/v1/health over TLS: the same checks and verdicts as over HTTP" /usr/bin/python3 -c '
import json, sys
a, b = (json.load(open(p)) for p in sys.argv[1:3])
def verdicts(d):
    return d["status"], d["version"], [(c["name"], c["status"]) for c in d["checks"]]
sys.exit(verdicts(a) != verdicts(b) or a["version"] != 1)' \
    "$E2E_TMP/health.tls" "$E2E_TMP/health.plain"

tget healthz /healthz
pget healthz /healthz
check "GET /healthz over TLS: 200, the same body" sh -c '[ "$1" = 200 ]' sh "$STATUS"
check "/healthz: the same bytes over TLS and HTTP" same healthz
tget readyz /readyz
pget readyz /readyz
check "GET /readyz over TLS: 200, the same bytes" sh -c '[ "$1" = 200 ] && cmp -s "$2" "$3"' \
    sh "$STATUS" "$E2E_TMP/readyz.tls" "$E2E_TMP/readyz.plain"

tget predict '/v1/links/predict?source=n0&k=5'
pget predict '/v1/links/predict?source=n0&k=5'
check "a link query over TLS: 200 with 5 predictions" sh -c '[ "$1" = 200 ] && [ "$2" = 5 ]' \
    sh "$STATUS" "$(json_get "$E2E_TMP/predict.tls" 'len(d["predictions"])')"
check "the link query: the same bytes over TLS and over HTTP" same predict

BATCH='{"queries": [{"source": "n1", "k": 3}, {"source": "n2", "k": 4}, {"source": "nobody"}]}'
tget batch /v1/links/predict -X POST -H 'Content-Type: application/json' --data "$BATCH"
pget batch /v1/links/predict -X POST -H 'Content-Type: application/json' --data "$BATCH"
check "a POST batch over TLS: 200, the same bytes as over HTTP" \
    sh -c '[ "$1" = 200 ] && cmp -s "$2" "$3"' \
    sh "$STATUS" "$E2E_TMP/batch.tls" "$E2E_TMP/batch.plain"

tget unknown '/v1/links/predict?source=nobody'
pget unknown '/v1/links/predict?source=nobody'
check "an error over TLS: 404, the same bytes as over HTTP" \
    sh -c '[ "$1" = 404 ] && cmp -s "$2" "$3"' \
    sh "$STATUS" "$E2E_TMP/unknown.tls" "$E2E_TMP/unknown.plain"

# ---- what a client without TLS or without the certificate gets ----
code=$(curl -sS -o "$E2E_TMP/plain-to-tls.out" -w '%{http_code}' \
    "http://127.0.0.1:$TPORT/healthz" 2>"$E2E_TMP/plain-to-tls.err")
rc=$?
check "plain HTTP to the TLS port: no HTTP answer (curl exit $rc, status $code)" \
    sh -c '[ "$1" -ne 0 ] && [ "$2" = 000 ]' sh "$rc" "$code"
curl -sS -o /dev/null "$TBASE/healthz" 2>"$E2E_TMP/noca.err"
rc=$?
check "without --cacert the client refuses the self-signed certificate (curl exit 60)" \
    [ "$rc" -eq 60 ]
check "... because it cannot verify it" grep -qi "certificate" "$E2E_TMP/noca.err"

# ---- protocol versions ----
echo | openssl s_client -brief -connect "127.0.0.1:$TPORT" -CAfile "$T/cert.pem" \
    >"$E2E_TMP/s_client.out" 2>&1
check "openssl s_client: the certificate verifies and TLS 1.2 or 1.3 is negotiated" \
    sh -c 'grep -q "^Verification: OK" "$1" && grep -Eq "^Protocol version: TLSv1\.[23]$" "$1"' \
    sh "$E2E_TMP/s_client.out"
tget tls12 /healthz --tls-max 1.2
check "a client limited to TLS 1.2 is served" [ "$STATUS" = 200 ]
# OpenSSL 3 refuses TLS 1.1 at its default security level: level 0 lets it offer 1.1, so
# a failure here is the server's refusal. (With libmicrohttpd's default priorities, this
# handshake succeeds with TLSv1.1.)
curl -sS -o /dev/null --cacert "$T/cert.pem" --tlsv1.1 --tls-max 1.1 \
    --ciphers 'DEFAULT@SECLEVEL=0' "$TBASE/healthz" 2>"$E2E_TMP/tls11.err"
rc=$?
check "a client limited to TLS 1.1 is refused (curl exit $rc)" [ "$rc" -eq 35 ]

check "the private key is not in the server log" \
    sh -c '! grep -qF "$(sed -n 2p "$1")" "$2"' sh "$T/key.pem" "$E2E_TMP/tls-server.log"

stop_tls
check "SIGTERM: the TLS server exits 0" [ "$TLS_RC" -eq 0 ]
check "SIGTERM: its log says it stopped" grep -q "stopped" "$E2E_TMP/tls-server.log"
stop_server

# ---- an encrypted key ----
printf 'correct horse battery staple\n' >"$T/password"
chmod 600 "$T/password"
check "openssl encrypts the key (PKCS #8, AES-256)" \
    openssl pkey -in "$T/key.pem" -aes256 -passout "file:$T/password" -out "$T/key-enc.pem"
chmod 600 "$T/key-enc.pem"
start_tls --tls-cert "$T/cert.pem" --tls-key "$T/key-enc.pem" \
    --tls-key-password-file "$T/password" || done_tls
tget enc '/v1/links/predict?source=n0&k=5'
check "with --tls-key-password-file: the same link answer" \
    sh -c '[ "$1" = 200 ] && cmp -s "$2" "$3"' \
    sh "$STATUS" "$E2E_TMP/enc.tls" "$E2E_TMP/predict.plain"
check "the password is not in the server log" \
    sh -c '! grep -q "horse" "$1"' sh "$E2E_TMP/tls-server.log"
stop_tls
check "SIGTERM: exit status 0" [ "$TLS_RC" -eq 0 ]

# ---- start-up errors ----
# refused NAME WANT_STATUS PATTERN ARG...: weft serve with ARGs exits WANT_STATUS before
# serving, with PATTERN (grep -E) in its messages.
refused() {
    name=$1
    want=$2
    pattern=$3
    shift 3
    "$WEFT" serve --store "$STORE" --listen "127.0.0.1:$(free_port)" "$@" \
        >"$E2E_TMP/refused.log" 2>&1
    rc=$?
    check "$name: exit $want (got $rc), says so" sh -c '[ "$1" -eq "$2" ] &&
        grep -Eq -- "$3" "$4"' sh "$rc" "$want" "$pattern" "$E2E_TMP/refused.log"
    if ! grep -Eq -- "$pattern" "$E2E_TMP/refused.log"; then
        cat "$E2E_TMP/refused.log"
    fi
}

refused "--tls-cert without --tls-key" 2 "--tls-cert needs --tls-key" \
    --tls-cert "$T/cert.pem"
refused "--tls-key without --tls-cert" 2 "--tls-key needs --tls-cert" \
    --tls-key "$T/key.pem"
refused "--tls-key-password-file alone" 2 "--tls-key-password-file needs" \
    --tls-key-password-file "$T/password"

printf 'this is not a certificate\n' >"$T/garbage.pem"
refused "a certificate file that is not PEM" 2 "--tls-cert: $T/garbage.pem: no PEM certificate" \
    --tls-cert "$T/garbage.pem" --tls-key "$T/key.pem"
head -c 300 "$T/cert.pem" >"$T/cut.pem"
refused "a certificate file cut short" 2 "--tls-cert: $T/cut.pem: .*no END line" \
    --tls-cert "$T/cut.pem" --tls-key "$T/key.pem"
refused "a certificate file that cannot be read" 2 "--tls-cert: $T/absent.pem: No such file" \
    --tls-cert "$T/absent.pem" --tls-key "$T/key.pem"
refused "the key given as the certificate" 2 "--tls-cert: $T/key.pem: it holds a private key" \
    --tls-cert "$T/key.pem" --tls-key "$T/key.pem"
sed '2s/^MII/MIJ/' "$T/cert.pem" >"$T/bad-der.pem"
refused "a certificate whose DER GnuTLS refuses" 1 \
    "cannot serve HTTPS on .* with the certificate $T/bad-der.pem and the key $T/key.pem" \
    --tls-cert "$T/bad-der.pem" --tls-key "$T/key.pem"
check "... and GnuTLS's reason is in the log" grep -q "GnuTLS failed" "$E2E_TMP/refused.log"
self_signed "$T/other-key.pem" "$T/other-cert.pem" other
refused "a key that does not match the certificate" 1 "do not match" \
    --tls-cert "$T/cert.pem" --tls-key "$T/other-key.pem"
refused "an encrypted key without its password" 2 \
    "--tls-key: $T/key-enc.pem: the key is encrypted" \
    --tls-cert "$T/cert.pem" --tls-key "$T/key-enc.pem"
printf 'wrong password\n' >"$T/wrong"
chmod 600 "$T/wrong"
refused "an encrypted key with a wrong password" 1 \
    "with the certificate $T/cert.pem and the key $T/key-enc.pem" \
    --tls-cert "$T/cert.pem" --tls-key "$T/key-enc.pem" --tls-key-password-file "$T/wrong"

done_tls
