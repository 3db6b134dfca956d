"""Numerical targets (docs/input-policy.md, "Precision"): on hard data — values spanning 1e-9 to
1e12, a million ties, 1e12 plus small increments, heavy tails — the compiled SQL on DuckDB meets
  * Gini, Lorenz ordinates, shares, quantiles: relative error ≤ 1e-10 against exact rational
    arithmetic (Python ``fractions``: every double is a rational, so the reference is exact);
  * Theil, MLD, GE, Atkinson, CV: relative error ≤ 1e-9 against mpmath at 60 digits on data whose
    spread is at least 1e-6 of the mean, and absolute error ≤ 1e-20 below that (the floor);
and gives the same digits (1e-12 relative) whatever the row order and thread count."""

from __future__ import annotations

from fractions import Fraction

import duckdb
import mpmath as mp
import numpy as np
import pandas as pd
import pytest

import uneven

mp.mp.dps = 60


# ---- exact references (fractions), written from the definitions in DESIGN.md ----------------------

def _sorted_exact(x, w):
    pairs = sorted(zip((Fraction(float(v)) for v in x), (Fraction(float(v)) for v in w)))
    return [p[0] for p in pairs], [p[1] for p in pairs]


def exact_gini(x, w):
    xs, ws = _sorted_exact(x, w)
    W, T, C, acc = sum(ws), sum(a * b for a, b in zip(xs, ws)), Fraction(0), Fraction(0)
    for xi, wi in zip(xs, ws):
        C += wi
        acc += wi * xi * (2 * C - wi - W)
    return acc / (W * T)


def exact_lorenz(x, w, p):
    """L(p) on the piecewise linear curve through (C_i/W, S_i/T)."""
    xs, ws = _sorted_exact(x, w)
    W, T = sum(ws), sum(a * b for a, b in zip(xs, ws))
    target, C, held = Fraction(p) * W, Fraction(0), Fraction(0)
    for xi, wi in zip(xs, ws):
        take = min(max(target - C, 0), wi)
        held += take * xi
        C += wi
    return held / T


def exact_quantile(x, w, p):
    xs, ws = _sorted_exact(x, w)
    W, C = sum(ws), Fraction(0)
    for xi, wi in zip(xs, ws):
        C += wi
        if C / W >= Fraction(p):
            return xi
    return xs[-1]


def rel(got, want) -> float:
    want = float(want) if not isinstance(want, mp.mpf) else want
    return float(abs((mp.mpf(float(got)) - want) / want)) if want != 0 else float(abs(got))


# ---- hard data (invented, fixed seeds) ------------------------------------------------------------

def _datasets():
    rng = np.random.default_rng(20261201)
    n = 1500
    span = 10.0 ** rng.uniform(-9, 12, n)  # values from 1e-9 to 1e12
    offset = 1e12 + rng.integers(0, 1000, n).astype(float)  # 1e12 plus small increments (exact doubles)
    pareto = (rng.pareto(1.1, n) + 1) * 1000.0  # heavy tail (Pareto index 1.1)
    w = rng.integers(1, 9, n).astype(float)
    wf = rng.uniform(0.1, 5.0, n)  # fractional weights
    return {"span": (span, w), "offset": (offset, w), "pareto": (pareto, wf), "pareto-unweighted": (pareto, np.ones(n))}


DATA = _datasets()


def _run(sql: str, x, w, threads: int | None = None) -> list:
    con = duckdb.connect()
    if threads:
        con.execute(f"SET threads = {threads}")
    con.register("t", pd.DataFrame({"x": x, "w": w}))
    return list(con.execute(uneven.compile(sql)).fetchone())


@pytest.mark.parametrize("name", sorted(DATA))
def test_ordered_measures_exact_to_1e10(name):
    x, w = DATA[name]
    # quantile p chosen away from a jump (p·W not a running weight) for fractional weights
    got = _run("SELECT gini(x, w), lorenz(x, 0.3, w), top_share(x, 0.1, w), bottom_share(x, 0.5, w), "
               "quantile_w(x, 0.37, w), generalized_lorenz(x, 0.9, w) FROM t", x, w)
    T_over_W = Fraction(sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(x, w))) / sum(
        Fraction(float(b)) for b in w)
    want = [exact_gini(x, w), exact_lorenz(x, w, 0.3), 1 - exact_lorenz(x, w, 0.9), exact_lorenz(x, w, 0.5),
            exact_quantile(x, w, 0.37), T_over_W * exact_lorenz(x, w, 0.9)]
    for label, g, e in zip(("gini", "lorenz", "top_share", "bottom_share", "quantile", "gen_lorenz"), got, want):
        assert rel(g, e) <= 1e-10, f"{name} {label}: {g} vs exact {float(e)}"


def test_million_ties_exact():
    # 1,000,000 rows over 5 distinct values: the exact reference works on (value, count) pairs
    values = [0.5, 3.0, 3.0000001, 7.25, 1e6]
    counts = [400_000, 300_000, 150_000, 100_000, 50_000]
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT CASE WHEN i < 400000 THEN 0.5 WHEN i < 700000 THEN 3.0 "
                "WHEN i < 850000 THEN 3.0000001 WHEN i < 950000 THEN 7.25 ELSE 1e6 END AS x "
                "FROM range(1000000) r(i) ORDER BY hash(i)")
    got = con.execute(uneven.compile("SELECT gini(x), lorenz(x, 0.55), quantile_w(x, 0.86), theil(x) FROM t")).fetchone()
    assert rel(got[0], exact_gini(values, counts)) <= 1e-10
    assert rel(got[1], exact_lorenz(values, counts, 0.55)) <= 1e-10
    assert got[2] == 7.25  # C/W passes 0.86 inside the fourth value's block
    xs = [mp.mpf(v) for v in values]
    mu = sum(c * v for c, v in zip(counts, xs)) / sum(counts)
    theil = sum(c * v * mp.log(v / mu) for c, v in zip(counts, xs)) / (mu * sum(counts))
    assert rel(got[3], theil) <= 1e-9


# ---- log and power measures against mpmath ----------------------------------------------------------

def mp_weighted(x, w):
    """(μ, mean) in 60-digit arithmetic on the exact doubles: mean(f) = Σ w f(x) / Σ w."""
    xs, ws = [mp.mpf(float(v)) for v in x], [mp.mpf(float(v)) for v in w]
    W = sum(ws)

    def mean(f):
        return sum(b * f(a) for a, b in zip(xs, ws)) / W

    return mean(lambda v: v), mean


def mp_measures(x, w):
    mu, mean = mp_weighted(x, w)
    return {
        "theil": mean(lambda v: (v / mu) * mp.log(v / mu)),
        "mld": mean(lambda v: mp.log(mu / v)),
        "ge2": (mean(lambda v: (v / mu) ** 2) - 1) / 2,
        "ge-1": (mean(lambda v: (v / mu) ** -1) - 1) / 2,
        "ge0.5": (mean(lambda v: (v / mu) ** 0.5) - 1) / (0.5 * -0.5),
        "atk0.5": 1 - mean(lambda v: v ** 0.5) ** 2 / mu,
        "atk1": 1 - mp.exp(mean(mp.log)) / mu,
        "atk2": 1 - mean(lambda v: v ** -1) ** -1 / mu,
        "cv": mp.sqrt(mean(lambda v: (v - mu) ** 2)) / mu,
    }


LOG_SQL = ("SELECT theil(x, w), mld(x, w), ge(x, 2, w), ge(x, -1, w), ge(x, 0.5, w), atkinson(x, 0.5, w), "
           "atkinson(x, 1, w), atkinson(x, 2, w), cv(x, w) FROM t")
LOG_NAMES = ("theil", "mld", "ge2", "ge-1", "ge0.5", "atk0.5", "atk1", "atk2", "cv")


@pytest.mark.parametrize("spread", [1.0, 1e-2, 1e-4, 1e-6])
def test_log_measures_relative_1e9(spread):
    rng = np.random.default_rng(7)
    n = 800
    x = 1e12 * np.exp(spread * rng.standard_normal(n)) if spread < 1 else rng.lognormal(3.0, 1.2, n)
    w = rng.integers(1, 6, n).astype(float)
    got, want = _run(LOG_SQL, x, w), mp_measures(x, w)
    for name, g in zip(LOG_NAMES, got):
        assert rel(g, want[name]) <= 1e-9, f"spread {spread} {name}: {g} vs {mp.nstr(want[name], 17)}"


@pytest.mark.parametrize("spread", [1e-7, 1e-8, 1e-10])
def test_log_measures_absolute_floor(spread):
    rng = np.random.default_rng(8)
    n = 800
    x = 1e12 * (1 + spread * rng.standard_normal(n))
    w = rng.integers(1, 6, n).astype(float)
    got, want = _run(LOG_SQL, x, w), mp_measures(x, w)
    for name, g in zip(LOG_NAMES, got):
        if name == "cv":  # no cancellation at all: relative
            assert rel(g, want[name]) <= 1e-9
        else:
            assert abs(mp.mpf(float(g)) - want[name]) <= 1e-20, f"spread {spread} {name}"


CLOSED_SQL = ("SELECT ge(x, 2, w), ge(x, 3, w), ge(x, -1, w), ge(x, -2, w), ge(x, 0.5, w), ge(x, -0.5, w), "
              "atkinson(x, 0.5, w), atkinson(x, 1.5, w), atkinson(x, 2, w) FROM t")


def mp_closed(x, w):
    mu, mean = mp_weighted(x, w)

    def ge(a):  # the usual definition (common practice; Shorrocks 1980, from memory)
        return (mean(lambda v: (v / mu) ** a) - 1) / (a * (a - 1))

    def atk(e):  # Atkinson (1970, from memory): 1 − (mean of x^(1−ε))^(1/(1−ε)) / μ
        return 1 - mean(lambda v: v ** (1 - e)) ** (1 / (1 - e)) / mu

    return [ge(2), ge(3), ge(-1), ge(-2), ge(mp.mpf(0.5)), ge(mp.mpf(-0.5)), atk(mp.mpf(0.5)),
            atk(mp.mpf(1.5)), atk(2)]


@pytest.mark.parametrize("spread", [1.0, 1e-4, 1e-7, 1e-10])
def test_closed_form_parameters_keep_relative_digits(spread):
    """GE at α ∈ {2, 3, −1, −2, ½, −½} and Atkinson at ε ∈ {½, 3/2, 2} sum d²-factored terms
    (d = (x − μ)/μ, catalog/moment.py): relative 1e-9 against mpmath even where the measure is
    1e-21 (spread 1e-10 of a mean of 1e12), below the absolute floor the other parameters keep."""
    rng = np.random.default_rng(9)
    n = 600
    x = 1e12 * (1 + spread * rng.standard_normal(n)) if spread < 1 else rng.lognormal(3.0, 1.2, n)
    w = rng.integers(1, 6, n).astype(float)
    got, want = _run(CLOSED_SQL, x, w), mp_closed(x, w)
    for i, (g, e) in enumerate(zip(got, want)):
        assert rel(g, e) <= 1e-9, f"spread {spread} measure {i}: {g} vs {mp.nstr(e, 17)}"


# ---- determinism: row order and threads -------------------------------------------------------------

DET_SQL = ("SELECT g, gini(x, w), lorenz(x, 0.4, w), top_share(x, 0.1), quantile_w(x, 0.5, w), theil(x, w), "
           "mld(x), atkinson(x, 2, w), ge(x, 2), cv(x, w), hoover(x), hhi(x, e), cr(x, 3, e) FROM t GROUP BY g "
           "ORDER BY g")


def test_same_digits_across_row_orders_and_threads():
    rng = np.random.default_rng(11)
    n = 60_000
    df = pd.DataFrame({"g": rng.integers(0, 6, n), "x": np.round(rng.lognormal(8, 1.5, n), 2),
                       "w": rng.uniform(0.2, 4.0, n), "e": rng.integers(0, 40, n)})
    df.loc[df.index[::97], "x"] = df["x"].iloc[0]  # ties with different weights
    results = []
    for order in range(3):
        shuffled = df.sample(frac=1.0, random_state=order).reset_index(drop=True)
        for threads in (1, 2, 8):
            results.append((order, threads, _run_grouped(shuffled, threads)))
    base = results[0][2]
    for order, threads, res in results[1:]:
        assert len(res) == len(base)
        for row_b, row in zip(base, res):
            for b, v in zip(row_b, row):
                assert abs(v - b) <= 1e-12 * abs(b), f"order {order}, threads {threads}: {v} vs {b}"


def _run_grouped(df, threads):
    con = duckdb.connect()
    con.execute(f"SET threads = {threads}")
    con.register("t", df)
    return con.execute(uneven.compile(DET_SQL)).fetchall()
