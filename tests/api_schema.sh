#!/usr/bin/env bash
# Schema-driven API testing: schemathesis (PyPI) against /openapi.json of a live server
# with the demo day loaded, every operation, with checks for server errors, status
# codes, content types, response headers and response schemas, and that invalid data
# is rejected. Fails on any failure or when fewer than 1,000 requests were generated.
# Called by .ci/run after the tests (it uses the debug binary they built).
set -euo pipefail
cd "$(dirname "$0")/.."
SCHEMATHESIS_VERSION=4.32.5
VENV=target/schemathesis-venv
if [ ! -x "$VENV/bin/schemathesis" ]; then
    python3 -m venv "$VENV"
    "$VENV/bin/pip" install -q "schemathesis==$SCHEMATHESIS_VERSION"
fi
cargo build -q --bin logstrip
WORK=$(mktemp -d)
PORT=$(python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])')
target/debug/logstrip demo --database "sqlite://$WORK/schema.db" --listen "127.0.0.1:$PORT" >"$WORK/demo.log" 2>&1 &
SERVER=$!
trap 'kill $SERVER 2>/dev/null || true; rm -rf "$WORK"' EXIT
for _ in $(seq 1 300); do
    if python3 -c "import urllib.request,sys; urllib.request.urlopen('http://127.0.0.1:$PORT/readyz', timeout=2)" 2>/dev/null; then
        break
    fi
    sleep 1
done
"$VENV/bin/schemathesis" run "http://127.0.0.1:$PORT/openapi.json" \
    --checks not_a_server_error,status_code_conformance,response_schema_conformance,content_type_conformance,response_headers_conformance,negative_data_rejection \
    --max-examples 60 --workers 2 --seed 20261202 | tee "$WORK/schemathesis.log"
generated=$(grep -Eo '[0-9]+ generated' "$WORK/schemathesis.log" | tail -n 1 | grep -Eo '[0-9]+')
echo "schemathesis generated $generated requests"
if [ "${generated:-0}" -lt 1000 ]; then
    echo "fewer than 1000 generated requests" >&2
    exit 1
fi
