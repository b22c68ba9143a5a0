#!/usr/bin/env python3
"""Loopback load table: POST /v1/analyze, POST /v1/snapshots (SQLite and
PostgreSQL) and GET .../latest at 1, 16 and 64 concurrent clients, with throughput,
p50/p99 latency, errors and the server's peak resident memory (VmHWM).

    cargo build --release
    python3 benches/load_table.py [--seconds 10] [--postgres postgres://postgres@127.0.0.1:5432/postgres]

Standard library only; drives benches/http_load.py. The client runs on the same
machine as the server, so on few cores it takes CPU from it: the figures are a floor.
"""

import argparse
import json
import os
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
BIN = os.path.join(ROOT, "target", "release", "logstrip")
SNAPSHOT = os.path.join(ROOT, "demo-data", "kestrel50-snapshot.json")


def free_port():
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def start(database):
    port = free_port()
    proc = subprocess.Popen([BIN, "serve", "--listen", f"127.0.0.1:{port}", "--database", database],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    base = f"http://127.0.0.1:{port}"
    for _ in range(100):
        try:
            urllib.request.urlopen(base + "/readyz", timeout=1)
            return proc, base
        except Exception:  # noqa: BLE001 - not up yet
            time.sleep(0.2)
    proc.kill()
    sys.exit(f"server on {database} did not become ready")


def start_with_snapshot(database):
    """A server on `database` holding the demo snapshot (so `latest` has an answer)."""
    proc, base = start(database)
    subprocess.run(["curl", "-s", "-o", "/dev/null", "-H", "content-type: application/json",
                    "--data-binary", "@" + SNAPSHOT, base + "/v1/snapshots"], check=True)
    return proc, base


def peak_rss_mib(proc):
    with open(f"/proc/{proc.pid}/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def load(url, concurrency, seconds, body=None, unique=False, headers=()):
    args = [sys.executable, os.path.join(HERE, "http_load.py"), "--url", url,
            "--concurrency", str(concurrency), "--seconds", str(seconds)]
    if body:
        args += ["--body", body]
    if unique:
        args.append("--unique-as-of")
    for h in headers:
        args += ["--header", h]
    return json.loads(subprocess.run(args, check=True, capture_output=True, text=True).stdout)


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--seconds", type=float, default=10.0)
    parser.add_argument("--postgres", default="postgres://postgres@127.0.0.1:5432/postgres",
                        help="admin URL; a database logstrip_load_<pid> is created and dropped")
    args = parser.parse_args()
    rows = []

    def run(label, store, base, proc, path, concurrency, **kw):
        r = load(base + path, concurrency, args.seconds, **kw)
        errors = r["errors"] + sum(v for k, v in r["statuses"].items() if not k.startswith("2") and k != "304")
        rows.append((label, store, concurrency, r["requests_per_second"], r["latency_ms"]["p50"],
                     r["latency_ms"]["p99"], errors, peak_rss_mib(proc)))
        print(rows[-1], file=sys.stderr)

    with tempfile.TemporaryDirectory() as tmp:
        proc, base = start_with_snapshot(f"sqlite://{tmp}/load.db")
        try:
            for c in (1, 16, 64):
                run("POST /v1/analyze", "-", base, proc, "/v1/analyze", c, body=SNAPSHOT)
            for c in (1, 16, 64):
                run("POST /v1/snapshots", "SQLite", base, proc, "/v1/snapshots", c, body=SNAPSHOT, unique=True)
            for c in (1, 16, 64):
                run("GET .../latest", "SQLite", base, proc, "/v1/underlyings/KESTREL50/latest", c)
        finally:
            proc.kill()

    db = f"logstrip_load_{os.getpid()}"
    admin = args.postgres
    subprocess.run(["psql", admin, "-qc", f"CREATE DATABASE {db}"], check=True)
    try:
        proc, base = start_with_snapshot(admin.rsplit("/", 1)[0] + "/" + db)
        try:
            for c in (1, 16, 64):
                run("POST /v1/snapshots", "PostgreSQL", base, proc, "/v1/snapshots", c, body=SNAPSHOT, unique=True)
            for c in (1, 16, 64):
                run("GET .../latest", "PostgreSQL", base, proc, "/v1/underlyings/KESTREL50/latest", c)
        finally:
            proc.kill()
    finally:
        time.sleep(0.5)
        subprocess.run(["psql", admin, "-qc", f"DROP DATABASE IF EXISTS {db} WITH (FORCE)"], check=False)

    print("| endpoint | store | clients | requests/s | p50 ms | p99 ms | errors | peak RSS MiB |")
    print("|---|---|---|---|---|---|---|---|")
    for label, store, c, rps, p50, p99, errors, rss in rows:
        print(f"| {label} | {store} | {c} | {rps:.0f} | {p50:.1f} | {p99:.1f} | {errors} | {rss:.0f} |")


if __name__ == "__main__":
    main()
