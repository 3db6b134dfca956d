"""Standard errors of the log and power measures keep their digits when the values are nearly equal.

The oracle is the textbook score of each measure in x itself (no rewriting), evaluated with mpmath
at 60 digits, and the with-replacement variance of the weighted total of the scores,
v = n/(n − 1) · Σ (u_k − ū)², u_k = w_k z_k (the design variance without strata or PSUs: common
practice, from memory). Scores (influence functions; Cowell's and Biewen's forms, from memory):
    Theil     z = [x ln x − (A/T + 1) x]/T + 1/W,            A = Σ w x ln x, T = Σ w x, W = Σ w
    MLD       z = x/T − 1/W − ln x/W + L/W²,                  L = Σ w ln x
    GE(α)     z = [x^α R/V + (α − 1) R/W − α R x/T]/(α(α−1)), V = Σ w x^α, R = (V/W)/μ^α
    Atkinson  z = −[E′ W/T + E/T − E W x/T²],                E = (V/W)^(1/β), β = 1 − ε,
              E′ = E/β (x^β/V − 1/W); ε = 1: E = exp(L/W), E′ = E (ln x/W − L/W²)
At 60 digits the cancellation these forms suffer in doubles costs nothing. The compiled SQL writes
the same scores in r = x/μ (catalog/linearize.py) and must agree to 1e-9 relative while the spread
δ of the values is at least 1e-4 of their mean; at δ = 1e-6 the rounding of x − μ itself (1e-16 of
μ, i.e. 1e-10 of d) leaves about 1e-8.
"""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pandas as pd

SPREADS = {"g1": 0.3, "g2": 1e-2, "g3": 1e-4, "g4": 1e-6}
TOLERANCE = {"g1": 1e-9, "g2": 1e-9, "g3": 1e-9, "g4": 3e-8}
CALLS = {"theil": ("theil", ()), "mld": ("mld", ()), "ge2": ("ge", (2.0,)), "ge_half": ("ge", (0.5,)),
         "ge_m1": ("ge", (-1.0,)), "atk_half": ("atkinson", (0.5,)), "atk1": ("atkinson", (1.0,)),
         "atk2": ("atkinson", (2.0,))}


def near_equal_groups(n: int = 80, seed: int = 5) -> pd.DataFrame:
    """Invented values 100·(1 + δ·u), u uniform on [0, 1), with survey-like weights, per group."""
    rng = np.random.default_rng(seed)
    frames = [pd.DataFrame({"g": g, "x": 100.0 * (1.0 + d * rng.random(n)), "w": rng.uniform(0.5, 3.0, n)})
              for g, d in SPREADS.items()]
    return pd.concat(frames, ignore_index=True)


def textbook_se(name: str, params: tuple, x, w) -> float:
    mp.mp.dps = 60
    x = [mp.mpf(float(v)) for v in x]
    w = [mp.mpf(float(v)) for v in w]
    W, T = mp.fsum(w), mp.fsum(a * b for a, b in zip(w, x))
    mu = T / W
    if name == "ge" and params[0] in (0.0, 1.0):
        name = "mld" if params[0] == 0.0 else "theil"
    if name == "theil":
        A = mp.fsum(a * b * mp.log(b) for a, b in zip(w, x))
        z = [(v * mp.log(v) - (A / T + 1) * v) / T + 1 / W for v in x]
    elif name == "mld":
        L = mp.fsum(a * mp.log(b) for a, b in zip(w, x))
        z = [v / T - 1 / W - mp.log(v) / W + L / W ** 2 for v in x]
    elif name == "ge":
        a_ = mp.mpf(params[0])
        V = mp.fsum(a * b ** a_ for a, b in zip(w, x))
        R = (V / W) / mu ** a_
        z = [(v ** a_ * R / V + (a_ - 1) * R / W - a_ * R * v / T) / (a_ * (a_ - 1)) for v in x]
    else:
        eps = mp.mpf(params[0])
        if eps == 1:
            L = mp.fsum(a * mp.log(b) for a, b in zip(w, x))
            E = mp.exp(L / W)
            dE = [E * (mp.log(v) / W - L / W ** 2) for v in x]
        else:
            b_ = 1 - eps
            V = mp.fsum(a * b ** b_ for a, b in zip(w, x))
            E = (V / W) ** (1 / b_)
            dE = [E / b_ * (v ** b_ / V - 1 / W) for v in x]
        z = [-(d * W / T + E / T - E * W * v / T ** 2) for d, v in zip(dE, x)]
    u = [a * b for a, b in zip(w, z)]
    n = len(u)
    mean = mp.fsum(u) / n
    return float(mp.sqrt(n * mp.fsum((q - mean) ** 2 for q in u) / (n - 1)))


def test_log_and_power_se_keep_their_digits_near_equal_values(engine):
    df = near_equal_groups()
    engine.load(df, "near_equal")
    items = ", ".join(f"{fn}_se(x{''.join(f', {p}' for p in params)}, w) AS {alias}"
                      for alias, (fn, params) in CALLS.items())
    got = engine.run(f"SELECT g, {items} FROM near_equal GROUP BY g ORDER BY g").set_index("g")
    assert list(got.index) == list(SPREADS)
    for g in SPREADS:
        rows = df[df.g == g]
        for alias, (fn, params) in CALLS.items():
            want = textbook_se(fn, params, rows.x, rows.w)
            value = float(got.loc[g, alias])
            assert abs(value - want) <= TOLERANCE[g] * want, (g, alias, value, want)
