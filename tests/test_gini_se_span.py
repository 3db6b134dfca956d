"""The Gini's linearized standard error (gini_se) on weighted values spanning 0 … 1e12 (zeros, ties,
values 1e12 and 1e12 + 1 side by side), in a few groups, one of 6 rows: against the variance computed
here in exact fractions (Python ``fractions``) from the published linearization, n/(n−1)·Σ(u_k − ū)²
with u_k = w_k·z_k and the Gini's influence z_k (Langel & Tillé 2013, Deville 1999, cited from memory;
with a design: the with-replacement variance of PSU totals within strata, Wolter 2007, §1.4, from
memory). On the window plan of every engine (tests/engines.py) and on the stream plan, with and
without a survey design. On this data the upper tail's rank term and its w·d coefficient must not
cancel (catalog/linearize.gini), or the variance loses about 1e-6 of its value.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from engines import engine_or_skip
from test_numerics import rel

TOL = 1e-11  # relative, on the variance se² (measured before the upper rank term: 3e-11 to 2.6e-10)


def span_frame(seed: int = 95) -> pd.DataFrame:
    """Invented rows (fixed seed), integer weights 1…4, strata and PSUs, in three groups:
    a: 400 values 10^U(−9, 6) and one of 1e12 (a Gini near 1: the largest row carries the variance);
    b: 150 values 10^U(−9, 6), a tenth of them 1e12 + 1, with zeros and ties at 42.5;
    c: 6 rows, 0 and 1e12 or 1e12 + 1 (values 1 apart)."""
    rng = np.random.default_rng(seed)
    a = 10.0 ** rng.uniform(-9, 6, 401)
    a[200] = 1e12
    b = 10.0 ** rng.uniform(-9, 6, 150)
    b[rng.random(150) < 0.1] = 1e12 + 1.0
    b[rng.random(150) < 0.1] = rng.choice([0.0, 42.5], 1)
    c = np.array([0.0, 1e12, 1e12 + 1.0, 1e12, 1e12 + 1.0, 1e12])
    x = np.concatenate([a, b, c])
    n = len(x)
    g = np.repeat(["a", "b", "c"], [len(a), len(b), len(c)])
    psu = rng.integers(0, 5, n)
    psu[g == "c"] = [0, 0, 1, 1, 2, 2]  # the 6-row group: 3 PSUs in one stratum
    h = rng.integers(0, 2, n)
    h[g == "c"] = 0
    w = rng.integers(1, 5, n).astype(float)
    w[:401][200] = 1.0
    return pd.DataFrame({"g": g, "x": x, "w": w, "h": h, "c": psu})


def exact_variance(x, w, h=None, c=None) -> Fraction:
    """Σ_h n_h/(n_h − 1) Σ_{c in h} (U_hc − Ū_h)², U_hc = Σ u_k over the rows of PSU c in stratum h (each
    row its own PSU and one stratum without a design: n/(n−1)·Σ(u_k − ū)²), u_k = w_k·z_k,
    z_k = [2C_k x_k − 2S_k + T − W x_k − G(T + W x_k)]/(W T) over the rows sorted by x, C and S the
    running sums of w and w·x, G = Σ w_k x_k (2C_k − w_k − W)/(W T); all exact."""
    rows = sorted((Fraction(float(a)), Fraction(float(b)), i) for i, (a, b) in enumerate(zip(x, w)))
    W = sum(b for _, b, _ in rows)
    T = sum(a * b for a, b, _ in rows)
    C = acc = Fraction(0)
    for a, b, _ in rows:
        C += b
        acc += b * a * (2 * C - b - W)
    G = acc / (W * T)
    units: dict = {}
    C = S = Fraction(0)
    for a, b, i in rows:  # C_k x_k − S_k = Σ_{j≤k} w_j (x_k − x_j): the same whatever the order of ties
        C += b
        S += b * a
        u = b * (2 * C * a - 2 * S + T - W * a - G * (T + W * a)) / (W * T)
        stratum = None if h is None else h[i]
        unit = i if c is None else c[i]
        units.setdefault(stratum, {})
        units[stratum][unit] = units[stratum].get(unit, Fraction(0)) + u
    v = Fraction(0)
    for per_unit in units.values():
        U = list(per_unit.values())
        mean = sum(U) / len(U)
        v += Fraction(len(U), len(U) - 1) * sum((q - mean) ** 2 for q in U)
    return v


DF = span_frame()
# without a design; strata and PSUs; strata alone (every row a unit); PSUs alone (one stratum)
DESIGNS = {"se": (False, False), "sd": (True, True), "sh": (True, False), "sc": (False, True)}
SQL = ("SELECT g, gini_se(x, w) AS se, gini_se(x, w, strata := h, psu := c) AS sd, "
       "gini_se(x, w, strata := h) AS sh, gini_se(x, w, psu := c) AS sc FROM t GROUP BY g ORDER BY g")


def expected(group: str, strata: bool, psu: bool) -> Fraction:
    part = DF[DF.g == group].reset_index(drop=True)
    return exact_variance(part.x, part.w, part.h.tolist() if strata else None, part.c.tolist() if psu else None)


def check(frame: pd.DataFrame, groups=("a", "b", "c")) -> None:
    got = {row.g: row for row in frame.itertuples(index=False)}
    for grp in groups:
        for column, (strata, psu) in DESIGNS.items():
            se = float(getattr(got[grp], column))
            assert rel(se * se, expected(grp, strata, psu)) <= TOL, (grp, column, se)


def test_the_data_spans_twelve_orders_with_large_neighbours():
    assert DF.x.max() == 1e12 + 1.0 and (DF.x == 0).any() and (DF.x == 1e12).any()
    assert DF.x[(DF.x > 0)].min() < 1e-6 and sorted(DF.g.value_counts()) == [6, 150, 401]


@pytest.mark.parametrize("name", ["duckdb", "postgres", "sqlite"])
def test_window_plan_of_every_engine(name):
    eng = engine_or_skip(name)
    try:
        eng.load(DF, "t")
        check(eng.run(SQL))
    finally:
        eng.close()


def test_window_plan_on_spark_one_small_case():
    eng = engine_or_skip("spark")
    small = DF[DF.g == "c"]
    try:
        eng.load(small, "t")
        check(eng.run(SQL), groups=("c",))
    finally:
        eng.close()


@pytest.mark.parametrize("ordered", ["stream", "window"])
def test_query_on_duckdb(ordered):
    con = duckdb.connect()
    con.register("t", DF)
    check(uneven.query(SQL, con, ordered=ordered))
