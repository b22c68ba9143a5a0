#!/usr/bin/env python3
"""Bounded loopback load test of a running `logstrip serve` (Python 3 standard library only).

Each of N client threads keeps one HTTP/1.1 connection open and sends requests back to
back for a fixed duration; the script prints one JSON line with throughput, latency
percentiles and errors.

    python3 benches/http_load.py --url http://127.0.0.1:8080/v1/analyze \
        --body demo-data/kestrel50-snapshot.json --concurrency 16 --seconds 20

`--unique-as-of` rewrites the snapshot's `as_of` (one second earlier per request) so
that every `POST /v1/snapshots` stores a new row instead of finding the previous one.
The client shares the machine with the server: on 2 cores its own CPU use lowers the
figures a little.
"""

import argparse
import datetime
import http.client
import json
import threading
import time
import urllib.parse


def percentile(sorted_values, q):
    if not sorted_values:
        return None
    index = min(len(sorted_values) - 1, max(0, int(round(q * (len(sorted_values) - 1)))))
    return sorted_values[index]


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--url", required=True)
    parser.add_argument("--method", default=None, help="default POST with --body, else GET")
    parser.add_argument("--body", help="file to send as application/json")
    parser.add_argument("--concurrency", type=int, default=16)
    parser.add_argument("--seconds", type=float, default=20.0)
    parser.add_argument("--unique-as-of", action="store_true")
    parser.add_argument("--header", action="append", default=[], help="NAME: VALUE")
    args = parser.parse_args()

    url = urllib.parse.urlsplit(args.url)
    path = url.path + (("?" + url.query) if url.query else "")
    method = args.method or ("POST" if args.body else "GET")
    body_text = open(args.body, encoding="utf-8").read() if args.body else None
    headers = {"content-type": "application/json"} if body_text else {}
    for h in args.header:
        name, value = h.split(":", 1)
        headers[name.strip()] = value.strip()

    as_of = None
    if args.unique_as_of and body_text:
        as_of = json.loads(body_text)["as_of"]
        base_time = datetime.datetime.fromisoformat(as_of.replace("Z", "+00:00"))
    counter = [0]
    counter_lock = threading.Lock()

    def next_body():
        if as_of is None:
            return body_text
        with counter_lock:
            counter[0] += 1
            n = counter[0]
        shifted = (base_time - datetime.timedelta(seconds=n)).strftime("%Y-%m-%dT%H:%M:%SZ")
        return body_text.replace(f'"as_of": "{as_of}"', f'"as_of": "{shifted}"', 1).replace(
            f'"as_of":"{as_of}"', f'"as_of":"{shifted}"', 1
        )

    latencies, statuses, errors = [], {}, []
    lock = threading.Lock()
    stop_at = time.perf_counter() + args.seconds

    def worker():
        conn = http.client.HTTPConnection(url.hostname, url.port or 80, timeout=120)
        local_lat, local_status, local_err = [], {}, []
        while time.perf_counter() < stop_at:
            body = next_body()
            started = time.perf_counter()
            try:
                conn.request(method, path, body=body.encode() if body else None, headers=headers)
                response = conn.getresponse()
                response.read()
                local_lat.append(time.perf_counter() - started)
                local_status[response.status] = local_status.get(response.status, 0) + 1
            except Exception as e:  # noqa: BLE001 - any failure is counted and reported
                local_err.append(repr(e))
                conn.close()
                conn = http.client.HTTPConnection(url.hostname, url.port or 80, timeout=120)
        with lock:
            latencies.extend(local_lat)
            errors.extend(local_err)
            for k, v in local_status.items():
                statuses[k] = statuses.get(k, 0) + v

    started = time.perf_counter()
    threads = [threading.Thread(target=worker) for _ in range(args.concurrency)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    elapsed = time.perf_counter() - started
    latencies.sort()
    ms = lambda s: None if s is None else round(s * 1000, 2)  # noqa: E731
    print(json.dumps({
        "url": args.url,
        "method": method,
        "concurrency": args.concurrency,
        "seconds": round(elapsed, 2),
        "requests": len(latencies),
        "requests_per_second": round(len(latencies) / elapsed, 1),
        "latency_ms": {"p50": ms(percentile(latencies, 0.50)), "p99": ms(percentile(latencies, 0.99)),
                       "max": ms(latencies[-1] if latencies else None)},
        "statuses": statuses,
        "errors": len(errors),
        "first_error": errors[0] if errors else None,
    }))


if __name__ == "__main__":
    main()
