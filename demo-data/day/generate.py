#!/usr/bin/env python3.11
"""Generates the invented intraday demo day for KESTREL50 (a fictional index).

What
----
Writes into the directory of this script (demo-data/day/):

* 38 snapshots ``kestrel50-2026-11-30THHMM.json``, every 10 minutes from 09:30 to
  15:40 UTC on 2026-11-30, in the `logstrip analyze` input format (README, "Input"):
  22 expiries from one week to three years, each with ``expiry`` (RFC 3339),
  ``forward``, ``discount`` and 35-55 implied-vol ``points`` with bid/ask, and
  ``"fit": {"model": "rough_heston"}``.
* ``truth.json``: the model, its parameters, the rough Heston parameters a fit should
  recover, and per snapshot the spot, v0 and the closed-form swap levels per expiry,
  plus the planted bad quotes and the butterfly slice.

Nothing here is market data. The smiles are priced from a known model, classical
Heston (Heston 1993, RFS 6(2)), with QuantLib's ``AnalyticHestonEngine``; classical
Heston is rough Heston with H = 1/2 (shared/MATH.md sec. 5), so a rough Heston fit of
the leverage swaps should give hurst = 0.5, rho_nu = rho * sigma and
mean_reversion = kappa.

The day
-------
* kappa, theta, sigma, rho are fixed for the day (MODEL below); rate and dividend
  yield are flat (RATE, DIVIDEND): forward = spot * exp((r - q) tau), discount =
  exp(-r tau), tau ACT/365F from ``as_of`` to ``expiry`` (MATH.md sec. 1).
* Spot and v0 move along one seeded path: an Euler step of the Heston (CIR) variance
  between snapshots, with v floored at 1e-4 and the drift and diffusion evaluated at
  max(v, 0), and a log-Euler step for the spot, the Brownian increments correlated
  by rho; the spot is rounded to 0.01. The path runs in trading time (one 6.5-hour session = 1/252
  year, so a 10-minute step is 1/(252*39) year) so that the intraday moves have a
  plausible size; the option prices use calendar time (ACT/365F) as the tool does.
* Strikes: about -4 to +2.5 standard deviations (sd = model ATM vol * sqrt(tau)),
  spaced as z = 1.2 sinh(u) with u evenly spaced (denser near the money), rounded to
  listed-style increments (5 index points up to 0.1 year, 10 up to 0.5, 25 up to 1.5,
  50 beyond) and de-duplicated.
* Pricing: out-of-the-money option (put below the forward, call at or above), unit
  forward, zero rates (the undiscounted price per unit forward, MATH.md sec. 1),
  ``AnalyticHestonEngine(model, CONTROL_VARIATE_FORMULATION, FourierIntegration.expSinh(1e-14),
  1e-16)``. QuantLib here has whole-day maturities only, so a fractional tau is
  priced by the exact Heston time change: over model time T = D/365 (D whole days)
  with kappa, theta, sigma, v0 all multiplied by c = tau / T (rho unchanged) the
  terminal distribution equals that over tau with the original parameters. The
  script checks the time change on a whole-day expiry before it starts.
* Implied vols: QuantLib ``blackFormulaImpliedStdDev`` (accuracy 1e-12), checked by
  re-pricing with ``blackFormula`` (1e-7 relative). Quotes whose OTM price is below
  1e-7 of the forward, or whose inversion fails that check, are dropped.
* Quotes: mid = model vol + noise, noise normal with sd 0.4 * half-spread, cut at one
  half-spread (so the model vol always lies inside bid/ask); half-spread (vol) =
  (0.0025 + 0.0005 / sqrt(tau)) * (1 + 0.3 |z|) below the money, (1 + 0.5 z) above:
  wider in the wings and at the short end. Mids, bids and asks are rounded to 1e-5.
* Bad quotes: in 5 snapshots (not the first, the last or the butterfly one), one or two quotes are moved
  5 to 15 vol points off the market (bid/ask move with them); listed in truth.json.
* Butterfly slice: in the 12:00 snapshot the 2027-12-17 expiry (about one
  year) is replaced by quotes whose total variance is exactly a raw SVI (BUTTERFLY_SVI,
  no noise; bid/ask as for the other slices) that violates Durrleman's condition
  (MATH.md sec. 3) inside the quoted strikes: a put wing that stays flat to about
  k = -0.35 and then turns up sharply, with the at-the-money level about 2 vol points
  under its neighbours. The parameters were found by a seeded random search over raw
  SVI (kept only when g < 0 inside the quoted range and `logstrip analyze` flagged
  the slice), then rounded. A calendar violation could not be avoided: a raw SVI
  lying between its neighbours' Heston total variances at every quoted k was not
  found by a numerical search (the smallest g it reached was about +0.2), because
  g < 0 needs a slope of about 2w/|k| that those neighbours do not leave room for.
  The slice sits below the previous expiry's total variance on the put side and at
  the money and above the next expiry's in the call wing beyond k = 0.19 (truth.json
  lists where), so the tool also reports calendar arbitrage and a negative forward
  variance there. The script recomputes g and the
  calendar comparison and stops if g >= 0 over the quoted range.

Closed forms in truth.json (MATH.md sec. 5): VS = theta + (v0 - theta)(1 - e^{-kT})/(kT);
GS the same with k' = kappa - rho*sigma, theta' = kappa*theta/k'; LS = GS - VS. For the
butterfly slice truth.json also gives the log-strip values of its SVI smile
(numerical integration over the whole line, MATH.md sec. 2), which is what the tool
should replicate there.

Seed and versions
-----------------
SEED = 20261130 (Python ``random.Random``; draws in a fixed order: path, then
snapshot by snapshot, slice by slice, strikes ascending, then the bad quotes).
Generated with Python 3.11.7 and QuantLib 1.44 (PyPI wheel ``QuantLib==1.44``);
nothing else outside the standard library.

How to run
----------
    python3.11 -m venv /tmp/venv && /tmp/venv/bin/pip install QuantLib==1.44
    /tmp/venv/bin/python demo-data/day/generate.py

It takes about a minute and overwrites the files listed above (and nothing else).
"""
import json
import math
import os
import random
from datetime import datetime, timedelta, timezone

import QuantLib as ql

# QuantLib's complex-logarithm formulation of the Heston characteristic function with a
# Black-Scholes control variate, passed by its enumeration value (2 in QuantLib 1.44's
# AnalyticHestonEngine::ComplexLogFormula) rather than by its name.
CONTROL_VARIATE_FORMULATION = 2

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20261130
UNDERLYING = "KESTREL50"

# Heston parameters for the day (equity-index-like; 2 kappa theta / sigma^2 = 0.60,
# so Feller's condition is not met: v can touch zero, which the Euler path truncates).
MODEL = {"kappa": 2.0, "theta": 0.045, "sigma": 0.55, "rho": -0.7}
RATE, DIVIDEND = 0.03, 0.015
SPOT_OPEN, V0_OPEN = 4210.5, 0.036

DAY = datetime(2026, 11, 30, tzinfo=timezone.utc)
TIMES = [DAY + timedelta(hours=9, minutes=30) + timedelta(minutes=10 * i) for i in range(38)]
PATH_DT = 1.0 / (252 * 39)  # trading-time years per 10-minute step

EXPIRY_DATES = [
    "2026-12-07", "2026-12-11", "2026-12-18", "2026-12-31", "2027-01-15", "2027-02-19",
    "2027-03-19", "2027-04-16", "2027-05-21", "2027-06-18", "2027-07-16", "2027-09-17",
    "2027-10-15", "2027-12-17", "2028-03-17", "2028-06-16", "2028-09-15", "2028-12-15",
    "2029-03-16", "2029-06-15", "2029-09-21", "2029-11-16",
]
EXPIRIES = [datetime.fromisoformat(d + "T16:00:00+00:00") for d in EXPIRY_DATES]

MIN_PRICE = 1e-7          # smallest OTM price / forward that is quoted
Z_LO, Z_HI, Z_SCALE = -4.0, 2.5, 1.2
N_BAD_SNAPSHOTS = 5

# The butterfly slice (12:00 snapshot): raw SVI w(k) = a + b (rho (k - m) + sqrt((k - m)^2 + s^2)).
BUTTERFLY_EXPIRY = "2027-12-17"
# Index of the snapshot that carries it: 12:00, mid-day, so that the latest snapshot of
# the day (what a dashboard shows first) is clean.
BUTTERFLY_AT = 15
BUTTERFLY_SVI = {"a": 0.0168, "b": 0.09, "rho": -0.81, "m": -0.345, "s": 0.076}

QL_TODAY = ql.Date(2, 1, 2026)
ql.Settings.instance().evaluationDate = QL_TODAY
DC = ql.Actual365Fixed()


def rfc3339(t: datetime) -> str:
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def year_fraction(as_of: datetime, expiry: datetime) -> float:
    """ACT/365F with seconds (MATH.md sec. 1)."""
    return (expiry - as_of).total_seconds() / (365.0 * 86400.0)


# ------------------------------------------------------------------ closed forms

def closed_forms(tau: float, v0: float) -> dict:
    """MATH.md sec. 5: Heston variance, gamma and leverage swap levels."""
    k, th, sg, rh = MODEL["kappa"], MODEL["theta"], MODEL["sigma"], MODEL["rho"]

    def level(kap, the):
        x = kap * tau
        return the + (v0 - the) * (-math.expm1(-x)) / x

    kp = k - rh * sg
    vs = level(k, th)
    gs = level(kp, k * th / kp)
    return {"tau": tau, "variance_swap": vs, "gamma_swap": gs, "leverage_swap": gs - vs}


# ------------------------------------------------------------------ QuantLib pricing

class HestonSlice:
    """OTM Heston prices per unit forward at one tau and v0 (zero rates, spot 1)."""

    def __init__(self, tau: float, v0: float, days: int | None = None):
        d = days if days is not None else max(1, round(tau * 365.0))
        self.maturity = QL_TODAY + d
        c = tau / DC.yearFraction(QL_TODAY, self.maturity)  # exact time change
        curve = ql.YieldTermStructureHandle(ql.FlatForward(QL_TODAY, 0.0, DC))
        proc = ql.HestonProcess(curve, curve, ql.QuoteHandle(ql.SimpleQuote(1.0)),
                                c * v0, c * MODEL["kappa"], c * MODEL["theta"],
                                c * MODEL["sigma"], MODEL["rho"])
        self.engine = ql.AnalyticHestonEngine(
            ql.HestonModel(proc), CONTROL_VARIATE_FORMULATION,
            ql.FourierIntegration.expSinh(1e-14), 1e-16)
        self.tau = tau

    def otm(self, k: float) -> float:
        typ = ql.Option.Put if k < 0 else ql.Option.Call
        opt = ql.VanillaOption(ql.PlainVanillaPayoff(typ, math.exp(k)),
                               ql.EuropeanExercise(self.maturity))
        opt.setPricingEngine(self.engine)
        return opt.NPV()

    def vol(self, k: float) -> float | None:
        """Implied vol at log-moneyness k, or None when the price is too small to
        quote or the inversion does not re-price."""
        price = self.otm(k)
        return implied_vol(k, price, self.tau)


def implied_vol(k: float, price: float, tau: float) -> float | None:
    if not price >= MIN_PRICE:
        return None
    typ = ql.Option.Put if k < 0 else ql.Option.Call
    strike = math.exp(k)
    try:
        sd = ql.blackFormulaImpliedStdDev(typ, strike, 1.0, price, 1.0, 0.0,
                                          ql.nullDouble(), 1e-12, 1000)
    except RuntimeError:
        return None
    if not sd > 0 or abs(ql.blackFormula(typ, strike, 1.0, sd) - price) > 1e-7 * price:
        return None
    return sd / math.sqrt(tau)


def check_time_change():
    """The time change used for fractional tau against a plain whole-day set-up."""
    tau = 30 / 365.0
    plain = HestonSlice(tau, 0.04, days=30)      # c = 1
    moved = HestonSlice(tau, 0.04, days=45)      # c = 2/3
    for k in (-0.2, 0.0, 0.1):
        a, b = plain.otm(k), moved.otm(k)
        if abs(a - b) > 1e-10 * a:
            raise SystemExit(f"time change check failed at k={k}: {a} vs {b}")


# ------------------------------------------------------------------ raw SVI and Durrleman's g

def svi(k: float, p: dict) -> tuple[float, float, float]:
    """Raw SVI total variance and its first two derivatives in k."""
    x = k - p["m"]
    r = math.sqrt(x * x + p["s"] ** 2)
    w = p["a"] + p["b"] * (p["rho"] * x + r)
    w1 = p["b"] * (p["rho"] + x / r)
    w2 = p["b"] * p["s"] ** 2 / r ** 3
    return w, w1, w2


def durrleman_g(k: float, p: dict) -> float:
    """MATH.md sec. 3 (Durrleman 2010, Finance Stoch. 14)."""
    w, w1, w2 = svi(k, p)
    return (1 - k * w1 / (2 * w)) ** 2 - w1 * w1 / 4 * (1 / w + 0.25) + w2 / 2


def ncdf(x: float) -> float:
    return 0.5 * math.erfc(-x / math.sqrt(2.0))


def black_otm(k: float, w: float) -> float:
    s = math.sqrt(w)
    d1 = -k / s + s / 2
    d2 = d1 - s
    if k < 0:
        return math.exp(k) * ncdf(-d2) - ncdf(-d1)
    return ncdf(d1) - math.exp(k) * ncdf(d2)


def svi_swaps(p: dict, tau: float) -> dict:
    """Log-strip VS, GS, LS of an SVI smile (MATH.md sec. 2), composite Simpson on
    k in [-6, 6] with step 1e-4 (the OTM price is below 1e-16 beyond for this slice)."""
    n, lo, hi = 120000, -6.0, 6.0
    h = (hi - lo) / n
    acc = {"variance_swap": 0.0, "gamma_swap": 0.0, "leverage_swap": 0.0}
    for i in range(n + 1):
        k = lo + i * h
        wt = 1 if i in (0, n) else (4 if i % 2 else 2)
        o = black_otm(k, svi(k, p)[0])
        acc["variance_swap"] += wt * o * math.exp(-k)
        acc["gamma_swap"] += wt * o
        acc["leverage_swap"] += wt * o * (-math.expm1(-k))
    return {key: 2.0 / tau * v * h / 3 for key, v in acc.items()}


# ------------------------------------------------------------------ the day

def simulate_path(rng: random.Random) -> list[tuple[float, float]]:
    k, th, sg, rh = MODEL["kappa"], MODEL["theta"], MODEL["sigma"], MODEL["rho"]
    s, v = SPOT_OPEN, V0_OPEN
    out = [(s, v)]
    for _ in range(len(TIMES) - 1):
        z1 = rng.gauss(0.0, 1.0)
        z2 = rh * z1 + math.sqrt(1 - rh * rh) * rng.gauss(0.0, 1.0)
        vp = max(v, 0.0)
        s *= math.exp((RATE - DIVIDEND - vp / 2) * PATH_DT + math.sqrt(vp * PATH_DT) * z1)
        v = v + k * (th - vp) * PATH_DT + sg * math.sqrt(vp * PATH_DT) * z2
        out.append((round(s, 2), max(v, 1e-4)))
        s, v = out[-1]
    return out


def strike_step(tau: float) -> float:
    return 5.0 if tau < 0.1 else 10.0 if tau < 0.5 else 25.0 if tau < 1.5 else 50.0


def half_spread(tau: float, z: float) -> float:
    base = 0.0025 + 0.0005 / math.sqrt(tau)
    return base * (1 + 0.3 * abs(z)) if z < 0 else base * (1 + 0.5 * z)


def strikes_for(fwd: float, tau: float, sd: float, n: int) -> list[float]:
    u_lo, u_hi = math.asinh(Z_LO / Z_SCALE), math.asinh(Z_HI / Z_SCALE)
    step = strike_step(tau)
    out = set()
    for i in range(n):
        z = Z_SCALE * math.sinh(u_lo + (u_hi - u_lo) * i / (n - 1))
        out.add(round(fwd * math.exp(z * sd) / step) * step)
    return sorted(out)


def quote(rng: random.Random, strike: float, vol: float, half: float) -> dict:
    noise = max(-half, min(half, rng.gauss(0.0, 0.4 * half)))
    mid = vol + noise
    return {"strike": strike, "vol": round(mid, 5),
            "bid": round(mid - half, 5), "ask": round(mid + half, 5)}


def make_slice(rng, as_of, spot, v0, expiry, svi_params=None):
    tau = year_fraction(as_of, expiry)
    fwd = round(spot * math.exp((RATE - DIVIDEND) * tau), 2)
    model = HestonSlice(tau, v0)
    sd = model.vol(0.0) * math.sqrt(tau)
    n = rng.randint(42, 54)
    points, truth_vols = [], {}
    for strike in strikes_for(fwd, tau, sd, n):
        k = math.log(strike / fwd)
        z = k / sd
        if svi_params is None:
            vol = model.vol(k)
            if vol is None:
                continue
            truth_vols[strike] = vol
            points.append(quote(rng, strike, vol, half_spread(tau, z)))
        else:
            vol = math.sqrt(svi(k, svi_params)[0] / tau)
            half = half_spread(tau, z)
            points.append({"strike": strike, "vol": round(vol, 5),
                           "bid": round(vol - half, 5), "ask": round(vol + half, 5)})
    sl = {"expiry": rfc3339(expiry), "forward": fwd,
          "discount": round(math.exp(-RATE * tau), 6), "points": points}
    return sl, {"tau": tau, "forward": fwd, "sd": sd, "model": model, "vols": truth_vols}


def check_butterfly_slice(sl, info, prev_info, next_info):
    """g < 0 inside the quoted strikes and no calendar violation against the two
    neighbouring model smiles at the quoted log-moneyness."""
    p, tau, fwd = BUTTERFLY_SVI, info["tau"], info["forward"]
    ks = [math.log(q["strike"] / fwd) for q in sl["points"]]
    grid = [ks[0] + (ks[-1] - ks[0]) * i / 2000 for i in range(2001)]
    gs = [(durrleman_g(k, p), k) for k in grid]
    neg = [k for g, k in gs if g < 0]
    if not neg:
        raise SystemExit("butterfly slice: g >= 0 over the quoted range")
    g_min, k_min = min(gs)
    above, below, worst = [], [], 0.0
    for k in ks:
        w = svi(k, p)[0]
        v_prev, v_next = prev_info["model"].vol(k), next_info["model"].vol(k)
        # compare at the same log-moneyness (MATH.md sec. 3); forwards differ, k is what counts
        if v_next is not None and w > v_next ** 2 * next_info["tau"]:
            above.append(k)
            worst = max(worst, w / (v_next ** 2 * next_info["tau"]) - 1)
        if v_prev is not None and w < v_prev ** 2 * prev_info["tau"]:
            below.append(k)
            worst = max(worst, 1 - w / (v_prev ** 2 * prev_info["tau"]))
    return {"g_negative_k": [min(neg), max(neg)], "g_min": g_min, "g_min_k": k_min,
            "quoted_k": [ks[0], ks[-1]],
            "calendar": {"k_above_next_expiry_model": above, "k_below_previous_expiry_model": below,
                         "max_relative_excess_total_variance": worst}}


def main():
    check_time_change()
    rng = random.Random(SEED)
    path = simulate_path(rng)
    n = len(TIMES)
    snaps, truth_snaps, infos = [], [], []
    b_index = EXPIRY_DATES.index(BUTTERFLY_EXPIRY)
    for i, (t, (spot, v0)) in enumerate(zip(TIMES, path)):
        slices, info = [], []
        for j, e in enumerate(EXPIRIES):
            use_svi = BUTTERFLY_SVI if (i == BUTTERFLY_AT and j == b_index) else None
            sl, inf = make_slice(rng, t, spot, v0, e, use_svi)
            slices.append(sl)
            info.append(inf)
        name = f"kestrel50-{t.strftime('%Y-%m-%dT%H%M')}.json"
        snaps.append({"name": name, "doc": {
            "underlying": UNDERLYING, "as_of": rfc3339(t), "spot": spot,
            "slices": slices, "fit": {"model": "rough_heston"}}})
        truth_snaps.append({
            "file": name, "as_of": rfc3339(t), "spot": spot, "v0": v0,
            "swaps": [dict(closed_forms(inf["tau"], v0), expiry=rfc3339(e), forward=inf["forward"])
                      for inf, e in zip(info, EXPIRIES)]})
        infos.append(info)
        print(f"{name}: spot {spot:.2f} v0 {v0:.5f} points "
              f"{min(len(s['points']) for s in slices)}-{max(len(s['points']) for s in slices)}")

    # Bad quotes: 5 snapshots other than the first, the last and the butterfly one, one or two quotes each.
    bad = []
    for i in sorted(rng.sample([i for i in range(1, n - 1) if i != BUTTERFLY_AT], N_BAD_SNAPSHOTS)):
        for _ in range(rng.choice((1, 2))):
            j = rng.randrange(len(EXPIRIES))
            sl, inf = snaps[i]["doc"]["slices"][j], infos[i][j]
            cands = [q for q in sl["points"]
                     if -3.0 <= math.log(q["strike"] / inf["forward"]) / inf["sd"] <= 2.0
                     and not q.get("_bad")]
            q = rng.choice(cands)
            size = rng.uniform(0.05, 0.15)
            sign = rng.choice((-1, 1)) if q["vol"] - size > 0.6 * q["vol"] else 1
            half = (q["ask"] - q["bid"]) / 2
            before = q["vol"]
            q["vol"] = round(before + sign * size, 5)
            q["bid"], q["ask"] = round(q["vol"] - half, 5), round(q["vol"] + half, 5)
            q["_bad"] = True
            bad.append({"file": snaps[i]["name"], "as_of": snaps[i]["doc"]["as_of"],
                        "expiry": sl["expiry"], "strike": q["strike"],
                        "model_vol": inf["vols"][q["strike"]], "quoted_vol": before,
                        "bad_vol": q["vol"], "shift_vol": round(q["vol"] - before, 5)})

    # The butterfly slice.
    last = snaps[BUTTERFLY_AT]["doc"]["slices"][b_index]
    b_info = infos[BUTTERFLY_AT][b_index]
    check = check_butterfly_slice(last, b_info, infos[BUTTERFLY_AT][b_index - 1], infos[BUTTERFLY_AT][b_index + 1])
    svi_levels = svi_swaps(BUTTERFLY_SVI, b_info["tau"])
    print(f"butterfly slice {last['expiry']}: g < 0 on k in "
          f"[{check['g_negative_k'][0]:.4f}, {check['g_negative_k'][1]:.4f}], "
          f"min {check['g_min']:.4f} at k={check['g_min_k']:.4f}; quoted k "
          f"[{check['quoted_k'][0]:.4f}, {check['quoted_k'][1]:.4f}]; total variance above the next "
          f"expiry's model at {len(check['calendar']['k_above_next_expiry_model'])} quotes, below the "
          f"previous at {len(check['calendar']['k_below_previous_expiry_model'])}, worst "
          f"{check['calendar']['max_relative_excess_total_variance']:.1%}; SVI VS {svi_levels['variance_swap']:.6f}")

    for s in snaps:
        for sl in s["doc"]["slices"]:
            for q in sl["points"]:
                q.pop("_bad", None)
        with open(os.path.join(HERE, s["name"]), "w") as f:
            json.dump(s["doc"], f, indent=1)
            f.write("\n")

    k, sg, rh = MODEL["kappa"], MODEL["sigma"], MODEL["rho"]
    truth = {
        "description": "Invented intraday scenario for the fictional index KESTREL50: smiles "
                       "priced from classical Heston (QuantLib AnalyticHestonEngine) with quote "
                       "noise, planted off-market quotes and one butterfly-arbitrage slice. "
                       "Not market data. See generate.py and README.md.",
        "underlying": UNDERLYING,
        "model": {"name": "heston", **MODEL, "rate": RATE, "dividend": DIVIDEND,
                  "feller_ratio": 2 * k * MODEL["theta"] / sg ** 2,
                  "spot_open": SPOT_OPEN, "v0_open": V0_OPEN,
                  "path_step_years": PATH_DT, "seed": SEED},
        "expected_fit": {"model": "rough_heston", "hurst": 0.5, "rho_nu": rh * sg,
                         "mean_reversion": k,
                         "note": "Heston is rough Heston with H = 1/2 (MATH.md sec. 5). The "
                                 "last snapshot's butterfly slice is not Heston and pulls its fit."},
        "versions": {"python": "3.11", "QuantLib": ql.__version__},
        "snapshots": truth_snaps,
        "bad_quotes": bad,
        "butterfly_slice": {"file": snaps[BUTTERFLY_AT]["name"], "as_of": snaps[BUTTERFLY_AT]["doc"]["as_of"],
                            "expiry": last["expiry"], "tau": b_info["tau"],
                            "forward": b_info["forward"], "raw_svi": BUTTERFLY_SVI,
                            **check, "svi_log_strip": svi_levels,
                            "note": "quotes are the SVI vols without noise; closed_forms in "
                                    "the 12:00 snapshot for this expiry are the Heston values, "
                                    "svi_log_strip what the quotes imply"},
    }
    with open(os.path.join(HERE, "truth.json"), "w") as f:
        json.dump(truth, f, indent=1)
        f.write("\n")
    print(f"bad quotes: {len(bad)} in {len({b['file'] for b in bad})} snapshots")


if __name__ == "__main__":
    main()
