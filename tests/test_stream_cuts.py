"""The stream plan's cut measures computed all at once per batch (engine/streamcuts.py): Lorenz
ordinates, shares, Palma, S80/S20, quantiles and percentile ratios, checked against exact rational
arithmetic (Python ``fractions``: the references of tests/test_numerics.py, written from the
definitions in DESIGN.md) and against the window plan row for row, with batches of 3 rows read on
the reader thread and whole batches read serially (conftest.batch), each segment searched on its own slice and all
segments on complex keys (``streamcuts.SLICES``), whatever the rows per group (``streamcuts.MIN_ROWS``).

The numerics data of tests/test_numerics.py stand side by side as four groups of one table, so a
batch holds groups of very different sizes of values one after the other (values from 1e-9 to
1e12, 1e12 plus small increments, Pareto tails, fractional weights).
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.engine.streamcuts as streamcuts
from test_numerics import DATA, exact_lorenz, exact_quantile, rel
from test_stream import assert_same_frames

CUTS = ("lorenz(x, 0.05, w) AS l05, lorenz(x, 0.3, w) AS l30, lorenz(x, 0.999, w) AS l999, "
        "top_share(x, 0.01, w) AS t01, top_share(x, 0.1, w) AS t10, bottom_share(x, 0.5, w) AS b50, "
        "palma(x, w) AS palma, s80s20(x, w) AS s8020, quantile_w(x, 0.137, w) AS q137, quantile_w(x, 0.37, w) AS q37, "
        "quantile_w(x, 1.0, w) AS q100, percentile_ratio(x, 0.871, 0.137, w) AS pr, generalized_lorenz(x, 0.9, w) AS gl")


def exact_row(x, w) -> list:
    """The measures of CUTS in exact fractions (DESIGN.md: top_share(p) = 1 − L(1 − p), Palma =
    top_share(0.1)/L(0.4), S80/S20 = top_share(0.2)/L(0.2), percentile ratio = Q(hi)/Q(lo),
    generalized Lorenz = μ·L(p)). The quantiles' p are away from the jump points of these data,
    where the doubles' C/W ≥ p and the exact comparison may differ (DESIGN.md)."""
    L = {p: exact_lorenz(x, w, p) for p in (0.05, 0.3, 0.999, 0.5, 0.4, 0.2, 0.9)}
    top = {p: 1 - exact_lorenz(x, w, 1 - p) for p in (0.01, 0.1, 0.2)}
    Q = {p: exact_quantile(x, w, p) for p in (0.137, 0.37, 1.0, 0.871)}
    mu = sum(Fraction(float(a)) * Fraction(float(b)) for a, b in zip(x, w)) / sum(Fraction(float(b)) for b in w)
    return [L[0.05], L[0.3], L[0.999], top[0.01], top[0.1], L[0.5], top[0.1] / L[0.4], top[0.2] / L[0.2],
            Q[0.137], Q[0.37], Q[1.0], Q[0.871] / Q[0.137], mu * L[0.9]]


@pytest.fixture(scope="module")
def numerics():
    frames = [pd.DataFrame({"g": name, "x": x, "w": w}) for name, (x, w) in sorted(DATA.items())]
    con = duckdb.connect()
    con.register("t", pd.concat(frames, ignore_index=True))
    exact = {name: exact_row(x, w) for name, (x, w) in DATA.items()}
    return con, exact


@pytest.fixture(params=[0, 10_000], ids=["complex-keys", "slices"])
def search(monkeypatch, request):
    monkeypatch.setattr(streamcuts, "SLICES", request.param)
    monkeypatch.setattr(streamcuts, "MIN_ROWS", 0)  # every batch takes the cut search, however short its groups


def test_cut_measures_match_exact_fractions(numerics, batch, search):
    con, exact = numerics
    sql = f"SELECT g, {CUTS} FROM t GROUP BY g ORDER BY g"
    assert "stream plan" in str(uneven.explain(sql, con, ordered="stream"))
    got = uneven.query(sql, con, ordered="stream")
    assert list(got.g) == sorted(DATA)
    for row in got.itertuples(index=False):
        for label, value, want in zip(got.columns[1:], row[1:], exact[row[0]]):
            assert rel(value, want) <= 1e-12, f"{row[0]} {label}: {value} vs exact {float(want)}"


@pytest.fixture(scope="module")
def grouped():
    """Many small groups (NULL keys, ties, zero and NULL weights, negative values), a few large ones."""
    rng = np.random.default_rng(1004)
    n = 3000
    df = pd.DataFrame({"a": rng.integers(0, 400, n).astype(float), "b": rng.choice(["n", "s"], n),
                       "x": rng.lognormal(1, 1, n).round(1), "w": rng.integers(0, 4, n).astype(float)})
    df.loc[:600, "a"] = 1000.0  # a large group
    df.loc[rng.random(n) < 0.05, "a"] = None
    df.loc[rng.random(n) < 0.04, "x"] = None
    df.loc[rng.random(n) < 0.03, "w"] = None
    df.loc[rng.random(n) < 0.02, "x"] *= -1.0
    con = duckdb.connect()
    con.register("t", df)
    return con


@pytest.mark.parametrize("weight", [", w", ""])
def test_cut_measures_match_the_window_plan_row_for_row(grouped, batch, search, weight):
    sql = f"SELECT a, b, {CUTS.replace(', w)', weight + ')')} FROM t GROUP BY a, b ORDER BY a, b"
    got = uneven.query(sql, grouped, ordered="stream")
    want = uneven.query(sql, grouped, ordered="window")
    assert len(got) > 500
    assert_same_frames(got, want)


def test_a_quantile_on_a_jump_takes_the_window_plans_comparison(batch, search):
    # 25 rows of weight 1 (or 2): 0.28·W is 7.000000000000001·(W/25) in doubles, above C = 7·(W/25), yet
    # C/W ≥ 0.28 holds in doubles at that row; the window plan compares C/W ≥ p, and so does numpy's
    # weighted inverted CDF (np.quantile(method="inverted_cdf", weights=…), the outside reference of
    # DESIGN.md): the seventh value. The same at 0.56 (the fourteenth); 0.37 is no jump point
    con = duckdb.connect()
    frames = [pd.DataFrame({"g": g, "x": np.arange(1.0, 26.0) * (g + 1), "w": 1.0 + g % 2}) for g in range(40)]
    con.register("t", pd.concat(frames, ignore_index=True))
    sql = ("SELECT g, quantile_w(x, 0.28, w) AS a, quantile_w(x, 0.56, w) AS b, quantile_w(x, 0.37, w) AS c "
           "FROM t GROUP BY g ORDER BY g")
    got = uneven.query(sql, con, ordered="stream")
    for g, *values in got.itertuples(index=False):
        x, w = np.arange(1.0, 26.0) * (g + 1), np.full(25, 1.0 + g % 2)
        want = [float(np.quantile(x, p, method="inverted_cdf", weights=w)) for p in (0.28, 0.56, 0.37)]
        assert values == want == [7.0 * (g + 1), 14.0 * (g + 1), 10.0 * (g + 1)]
    assert_same_frames(got, uneven.query(sql, con, ordered="window"))
