#!/usr/bin/env bash
# Schema-driven API testing: schemathesis (PyPI) against /openapi.json of a live server
# with the demo day loaded, every operation, every check (server errors, status codes,
# content types, headers, response schemas, invalid data rejected, valid data accepted,
# methods and auth), on positive and negative data; tests/api_schema.toml and
# tests/api_schema_hooks.py say where and why 422 is an accepted answer to valid data.
#
# It runs once per store: SQLite, and PostgreSQL at LOGSTRIP_TEST_POSTGRES_URL (a
# database of its own is created and dropped). LOGSTRIP_SCHEMA_STORES=sqlite runs SQLite
# only; the PostgreSQL run is never skipped silently: without the URL the script fails.
# Each run fails on any failure or error, or when fewer than 1,000 requests were generated.
# Called by .ci/run after the tests (it uses the debug binary they built).
set -euo pipefail
cd "$(dirname "$0")/.."
SCHEMATHESIS_VERSION=4.32.5
MIN_GENERATED=1000
VENV=target/schemathesis-venv
if [ ! -x "$VENV/bin/schemathesis" ]; then
    python3 -m venv "$VENV"
    "$VENV/bin/pip" install -q "schemathesis==$SCHEMATHESIS_VERSION"
fi
cargo build -q --bin logstrip
WORK=$(mktemp -d)
SERVER=
PG_DATABASE=
cleanup() {
    if [ -n "$SERVER" ]; then kill "$SERVER" 2>/dev/null || true; wait "$SERVER" 2>/dev/null || true; fi
    if [ -n "$PG_DATABASE" ]; then psql -q "$LOGSTRIP_TEST_POSTGRES_URL" -c "DROP DATABASE IF EXISTS $PG_DATABASE WITH (FORCE)" || true; fi
    rm -rf "$WORK"
}
trap cleanup EXIT

# run_store NAME DATABASE_URL: serve the demo day from the store and run schemathesis.
run_store() {
    local name=$1 database=$2 port log
    port=$(python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
    target/debug/logstrip demo --database "$database" --listen "127.0.0.1:$port" >"$WORK/demo-$name.log" 2>&1 &
    SERVER=$!
    for _ in $(seq 1 300); do
        if python3 -c "import urllib.request; urllib.request.urlopen('http://127.0.0.1:$port/readyz', timeout=2)" 2>/dev/null; then
            break
        fi
        if ! kill -0 "$SERVER" 2>/dev/null; then
            cat "$WORK/demo-$name.log" >&2
            echo "$name: the demo server stopped before it was ready" >&2
            exit 1
        fi
        sleep 1
    done
    log="$WORK/schemathesis-$name.log"
    echo "== schemathesis against the demo day on $name"
    SCHEMATHESIS_HOOKS=tests/api_schema_hooks.py "$VENV/bin/schemathesis" --config-file tests/api_schema.toml \
        run "http://127.0.0.1:$port/openapi.json" \
        --checks all --mode all --max-examples 80 --workers 1 --seed 20261202 --no-color | tee "$log"
    kill "$SERVER" 2>/dev/null || true
    wait "$SERVER" 2>/dev/null || true
    SERVER=
    local generated
    generated=$(grep -Eo '[0-9]+ generated' "$log" | tail -n 1 | grep -Eo '[0-9]+')
    echo "$name: schemathesis generated ${generated:-0} requests"
    if [ "${generated:-0}" -lt "$MIN_GENERATED" ]; then
        echo "$name: fewer than $MIN_GENERATED generated requests" >&2
        exit 1
    fi
    if grep -Eq '[0-9]+ (failures?|errors?) in ' "$log"; then
        echo "$name: schemathesis reported failures or errors" >&2
        exit 1
    fi
}

for store in ${LOGSTRIP_SCHEMA_STORES:-sqlite postgres}; do
    case "$store" in
        sqlite)
            run_store sqlite "sqlite://$WORK/schema.db"
            ;;
        postgres)
            if [ -z "${LOGSTRIP_TEST_POSTGRES_URL:-}" ]; then
                echo "LOGSTRIP_TEST_POSTGRES_URL is not set: set it (.ci/run does) or LOGSTRIP_SCHEMA_STORES=sqlite" >&2
                exit 1
            fi
            PG_DATABASE="logstrip_schema_$$_$(date +%s)"
            psql -q "$LOGSTRIP_TEST_POSTGRES_URL" -c "CREATE DATABASE $PG_DATABASE"
            run_store postgres "${LOGSTRIP_TEST_POSTGRES_URL%/*}/$PG_DATABASE"
            ;;
        *)
            echo "unknown store $store in LOGSTRIP_SCHEMA_STORES (sqlite, postgres)" >&2
            exit 1
            ;;
    esac
done
