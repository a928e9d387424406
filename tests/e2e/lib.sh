# Shared helpers for tests/e2e/test_*.sh (sourced, POSIX sh).
# check NAME COMMAND...   runs COMMAND; counts and prints the result.
# finish                  prints "N checks passed, N failed" and exits 1 on any failure.
# free_port               prints a free loopback TCP port.
# start_server STORE [ARG...]  starts weft serve (with the extra ARGs) on a free port in the
#                         background; sets PORT, SERVER_PID and BASE, waits until /healthz
#                         answers; stop_server stops it.
CHECKS_PASSED=0
CHECKS_FAILED=0

check() {
    name=$1
    shift
    if "$@"; then
        CHECKS_PASSED=$((CHECKS_PASSED + 1))
        echo "ok   $name"
    else
        CHECKS_FAILED=$((CHECKS_FAILED + 1))
        echo "FAIL $name"
    fi
}

finish() {
    [ -n "${SERVER_PID:-}" ] && stop_server
    echo "$CHECKS_PASSED checks passed, $CHECKS_FAILED failed"
    [ "$CHECKS_FAILED" -eq 0 ]
    exit $?
}

free_port() {
    /usr/bin/python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1]); s.close()'
}

start_server() {
    PORT=$(free_port)
    BASE="http://127.0.0.1:$PORT"
    store=$1
    shift
    "$WEFT" serve --store "$store" --listen "127.0.0.1:$PORT" "$@" >"$E2E_TMP/server.log" 2>&1 &
    SERVER_PID=$!
    i=0
    while [ $i -lt 100 ]; do
        curl -fsS "$BASE/healthz" >/dev/null 2>&1 && return 0
        kill -0 "$SERVER_PID" 2>/dev/null || break
        sleep 0.1
        i=$((i + 1))
    done
    echo "server did not start:"
    cat "$E2E_TMP/server.log"
    return 1
}

stop_server() {
    kill "$SERVER_PID" 2>/dev/null
    wait "$SERVER_PID" 2>/dev/null
    SERVER_PID=""
}

# json_get FILE EXPR: evaluates a Python expression over the parsed JSON document `d`.
json_get() {
    /usr/bin/python3 -c 'import json,sys; d=json.load(open(sys.argv[1])); print(eval(sys.argv[2]))' "$1" "$2"
}
