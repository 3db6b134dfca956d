"""Centred measures (cv, hoover) computed on the ordered pass of the same value, weight and FILTER
(the group mean as a partition total of the window) give the reference values: weighted and not,
with tie grouping on and off, with a FILTER, and on data with a large common offset and a tiny
spread (where Σw·x²/W − μ² would lose every digit). Reference: ``uneven.reference`` (numpy with
``math.fsum``, checked against outside sources in test_reference.py)."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as ref


def frame(seed: int = 5, offset: float = 0.0, spread: float = 1.0) -> pd.DataFrame:
    """Invented stall revenues of a fictional market: three groups and a NULL key, NULL values and
    weights, zero weights."""
    rng = np.random.default_rng(seed)
    n = 600
    df = pd.DataFrame({"grp": rng.choice(["harbour", "hill", "mill", None], n),
                       "x": offset + spread * rng.lognormal(0.0, 1.0, n),
                       "w": rng.integers(0, 4, n).astype(float)})
    df.loc[[3, 40], "x"] = np.nan
    df.loc[[7], "w"] = np.nan
    return df


def expected(df: pd.DataFrame, measure, weighted: bool, where=None) -> dict:
    out = {}
    for key, d in df.groupby("grp", dropna=False, sort=False):
        if where is not None:
            d = d[where(d)]
        d = d[d["x"].notna()]
        if weighted:
            d = d[d["w"].notna()]
        key = key if isinstance(key, str) else None
        out[key] = measure(d["x"].to_numpy(float), d["w"].to_numpy(float) if weighted else None)
    return out


def run(con, sql: str, **options) -> dict:
    got = uneven.query(sql, con=con, **options)
    return {(k if isinstance(k, str) else None): v for k, v in zip(got.iloc[:, 0], got.iloc[:, 1])}


def close(a, b, rel=1e-10) -> bool:
    if a is None or b is None or (isinstance(a, float) and np.isnan(a)):
        return (a is None or np.isnan(a)) and (b is None or np.isnan(b))
    return abs(a - b) <= rel * max(abs(b), 1e-300)


@pytest.mark.parametrize("tie_grouping", ["off", "on"])
@pytest.mark.parametrize("weighted", [False, True], ids=["unweighted", "weighted"])
@pytest.mark.parametrize("name", ["cv", "hoover"])
def test_fused_centred_matches_reference(name, weighted, tie_grouping):
    df = frame()
    con = duckdb.connect()
    con.register("t", df)
    w = ", w" if weighted else ""
    sql = f"SELECT grp, {name}(x{w}), gini(x{w}) FROM t GROUP BY grp"
    explained = uneven.explain(sql, con=con, tie_grouping=tie_grouping)
    kinds = [p["kind"] for p in explained.passes]
    assert "centred" not in kinds  # served by the ordered pass
    got = run(con, sql, tie_grouping=tie_grouping)
    want = expected(df, getattr(ref, name), weighted)
    assert got.keys() == want.keys()
    for key in want:
        assert close(got[key], want[key]), (key, got[key], want[key])


def test_fused_centred_with_filter_and_tiny_spread():
    # offset 1e6, spread 1e-3: six digits of the mean cancel in x − μ; the deviations are formed
    # per row, so the result keeps its digits (a plain Σw·x² form would not)
    df = frame(seed=9, offset=1e6, spread=1e-3)
    con = duckdb.connect()
    con.register("t", df)
    sql = ("SELECT grp, cv(x, w) FILTER (WHERE w < 3), gini(x, w) FILTER (WHERE w < 3) "
           "FROM t GROUP BY grp")
    got = run(con, sql)
    want = expected(df, ref.cv, True, where=lambda d: d["w"] < 3)
    for key in want:
        assert close(got[key], want[key], rel=1e-7), (key, got[key], want[key])


def test_centred_pass_kept_without_keys_or_ordered_pass():
    con = duckdb.connect()
    con.register("t", frame())
    one = uneven.explain("SELECT cv(x, w), gini(x, w) FROM t", con=con)
    assert "centred" in [p["kind"] for p in one.passes]
    alone = uneven.explain("SELECT grp, cv(x, w) FROM t GROUP BY grp", con=con)
    assert [p["kind"] for p in alone.passes] == ["centred"]
