"""Generates the invented demo snapshot for `logstrip analyze` and `logstrip bench`.

KESTREL50 is a fictional index; nothing here is market data. The smiles come from
an SSVI surface (Quantitative Finance, 2014, "Arbitrage-free SVI volatility
surfaces"): w(k, t) = theta_t/2 * (1 + rho*phi*k + sqrt((phi*k + rho)^2 + 1 - rho^2)),
phi = eta / theta_t^0.5, with an upward-sloping ATM total variance theta_t, plus
seeded noise on the quotes, a bid/ask spread widening in the wings, and one
off-market quote. Run: python3 demo-data/generate.py  (Python 3.11, standard library only).
"""
import json
import math
import random
from datetime import datetime, timedelta, timezone

SEED = 20261130
random.seed(SEED)

AS_OF = datetime(2026, 11, 30, 15, 30, tzinfo=timezone.utc)
SPOT = 4210.5
RATE, DIVIDEND = 0.03, 0.015
RHO, ETA = -0.7, 1.1


def atm_total_variance(t):
    # ATM variance rising from 0.028 (short end) to 0.045 (long end).
    v = 0.045 - 0.017 * math.exp(-1.5 * t)
    return v * t


def ssvi(k, t):
    th = atm_total_variance(t)
    phi = ETA / math.sqrt(th)
    return th / 2 * (1 + RHO * phi * k + math.sqrt((phi * k + RHO) ** 2 + 1 - RHO**2))


def slices(n_expiries=35, n_points=60, noise_vol=0.0015):
    # Expiries from one week to three years, denser at the short end.
    days = sorted({round(7 * (1095 / 7) ** (i / (n_expiries - 1))) for i in range(n_expiries)})
    out = []
    for d in days:
        t = d / 365.0
        expiry = AS_OF + timedelta(days=d)
        fwd = SPOT * math.exp((RATE - DIVIDEND) * t)
        sd = math.sqrt(atm_total_variance(t))
        points = []
        for j in range(n_points):
            z = -3.5 + 6.0 * j / (n_points - 1)  # -3.5 .. +2.5 standard deviations
            strike = round(fwd * math.exp(z * sd), 1)
            k = math.log(strike / fwd)
            vol = math.sqrt(ssvi(k, t) / t)
            half = 0.002 + 0.004 * abs(z) / 3.5
            mid = vol + random.uniform(-noise_vol, noise_vol)
            points.append({"strike": strike, "vol": round(mid, 5),
                           "bid": round(mid - half, 5), "ask": round(mid + half, 5)})
        # dedupe strikes that rounding merged
        seen, unique = set(), []
        for p in points:
            if p["strike"] not in seen:
                seen.add(p["strike"])
                unique.append(p)
        out.append({"expiry": expiry.strftime("%Y-%m-%dT%H:%M:%SZ"),
                    "forward": round(fwd, 2), "discount": round(math.exp(-RATE * t), 6),
                    "points": unique})
    # One off-market quote: a stale wing vol 8 points too high.
    out[5]["points"][3]["vol"] = round(out[5]["points"][3]["vol"] + 0.08, 5)
    out[5]["points"][3]["bid"] = round(out[5]["points"][3]["vol"] - 0.004, 5)
    out[5]["points"][3]["ask"] = round(out[5]["points"][3]["vol"] + 0.004, 5)
    return out


def main():
    snap = {"underlying": "KESTREL50", "as_of": AS_OF.strftime("%Y-%m-%dT%H:%M:%SZ"), "spot": SPOT,
            "slices": slices(), "fit": {"model": "rough_heston"}}
    with open("demo-data/kestrel50-snapshot.json", "w") as f:
        json.dump(snap, f, indent=1)
    swaps = {"underlying": "KESTREL50", "as_of": snap["as_of"],
             "swaps": [{"tau": 0.25, "variance_swap": 0.0352, "gamma_swap": 0.0338},
                       {"tau": 0.5, "variance_swap": 0.0371, "gamma_swap": 0.0352},
                       {"tau": 1.0, "variance_swap": 0.0398, "gamma_swap": 0.0374},
                       {"tau": 2.0, "variance_swap": 0.0425, "gamma_swap": 0.0397},
                       {"tau": 3.0, "variance_swap": 0.0437, "gamma_swap": 0.0408}],
             "fit": {"model": "rough_heston", "nu": 0.4}}
    with open("demo-data/kestrel50-swaps.json", "w") as f:
        json.dump(swaps, f, indent=1)


if __name__ == "__main__":
    main()
