#!/usr/bin/env python3
"""Writes the small seed inputs of the fuzz targets into fuzz/corpus/<target>/ (the
corpus the fuzzer grows; not committed). Seeds are cut down from the invented demo
snapshot (demo-data/kestrel50-snapshot.json): a few expiries, a few strikes, in each
of the input shapes the parsers take. Standard library only (Python 3.11).
"""

import json
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
DEMO = os.path.join(HERE, "..", "demo-data", "kestrel50-snapshot.json")


def write(target, name, data):
    folder = os.path.join(HERE, "corpus", target)
    os.makedirs(folder, exist_ok=True)
    with open(os.path.join(folder, name), "wb") as f:
        f.write(data if isinstance(data, bytes) else data.encode())


def small_snapshots(demo):
    """Snapshots with 1 to 4 expiries of 4 to 9 strikes, vols and prices."""
    rng = random.Random(20261203)
    out = []
    for expiries in (1, 2, 4):
        for strikes in (4, 9):
            slices = []
            for s in demo["slices"][: expiries * 6 : 6]:
                pts = s["points"][:: max(1, len(s["points"]) // strikes)][:strikes]
                slices.append({"expiry": s["expiry"], "forward": s["forward"],
                               "discount": s["discount"], "points": pts})
            out.append({"underlying": "FUZZIDX", "as_of": demo["as_of"], "spot": demo["spot"],
                        "slices": slices, "fit": {"model": rng.choice(["rough_heston", "heston", "none"])}})
    # One with prices and an inferred forward, and one with tau and the monotone smile.
    out.append({"underlying": "FUZZIDX", "as_of": demo["as_of"], "smile": "monotone",
                "slices": [{"tau": 0.5, "forward": 100.0,
                            "points": [{"strike": k, "vol": 0.2 + 0.001 * (100 - k)} for k in (80, 90, 100, 110, 120)]}]})
    out.append({"underlying": "FUZZIDX", "as_of": demo["as_of"],
                "slices": [{"tau": 0.25, "prices": [{"strike": 90, "call": 11.2, "put": 1.3},
                                                    {"strike": 100, "call": 4.1, "put": 4.0},
                                                    {"strike": 110, "call": 1.1, "put": 10.9}]}],
                "fit": {"model": "heston", "fix": {"mean_reversion": 0.0}}})
    return out


def as_csv(snapshot):
    rows = ["expiry,tau,strike,vol,bid,ask,forward,discount"]
    for s in snapshot["slices"]:
        for p in s.get("points", []):
            rows.append(",".join(str(v) for v in (s.get("expiry", ""), s.get("tau", ""), p["strike"], p["vol"],
                                                  p.get("bid", ""), p.get("ask", ""), s.get("forward", ""),
                                                  s.get("discount", ""))))
    return "\n".join(rows) + "\n"


def main():
    with open(DEMO) as f:
        demo = json.load(f)
    snaps = small_snapshots(demo)
    for i, snap in enumerate(snaps):
        write("snapshot_json", f"seed-{i:02}.json", json.dumps(snap))
        if any("points" in s for s in snap["slices"]):
            text = as_csv(snap)
            # The CSV parser wants one of expiry/tau per row: drop the empty column.
            header, *rows = text.splitlines()
            cols = header.split(",")
            keep = [j for j, c in enumerate(cols) if any(r.split(",")[j] for r in rows)]
            lines = [",".join(line.split(",")[j] for j in keep) for line in [header, *rows]]
            write("snapshot_csv", f"seed-{i:02}.csv", "\n".join(lines) + "\n")
    write("snapshot_csv", "seed-prices.csv", "tau,strike,call,put\n0.25,90,11.2,1.3\n0.25,100,4.1,4.0\n0.25,110,1.1,10.9\n")
    # Number seeds: a byte pattern that decodes to plausible slices and fits.
    rng = random.Random(7)
    for i in range(8):
        write("analyze_numbers", f"seed-{i:02}", bytes([i * 2 + (i % 2)] + [rng.randrange(7, 256) for _ in range(600)]))


if __name__ == "__main__":
    main()
