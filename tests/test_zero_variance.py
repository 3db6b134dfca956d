"""A standard error whose exact variance is 0 comes out as exactly 0 on every plan (window, refine,
stream; catalog/variance_floor.py), and a tiny but real variance keeps its digits.

The Palma of a group whose bottom four tenths of the weight lie on one tied value a and whose top
tenth lies on one tied value b is (0.1·b)/(0.4·a) whatever the weights, so its linearized score is 0
on every row and its variance, with or without a survey design, is exactly 0. The computed forms
keep a rounding residue of their terms, which the square root used to lift to standard errors of
1e-9 … 1e-7. The exact variances are computed in this file's helpers in exact rational arithmetic
(Python ``fractions``) from the published influence functions (test_stream_se.Exact: the Lorenz
ordinate's, Deville 1999, and the ratio's delta method; the with-replacement design variance,
Wolter 2007; cited from memory).
"""

from __future__ import annotations

import math

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.engine.stream as stream_engine
from engines import engine_or_skip
from test_stream_design_cuts import design_variance
from test_stream_se import exact_z

PLANS = ("window", "refine", "stream")


def tied_groups(seed: int = 7) -> pd.DataFrame:
    """Groups of 2 to 4 rows: all but the last row on a, the last on b > a, the last row's weight share
    between 0.1 and 0.6, so the bottom 40 % and the top 10 % each lie on one value; strata and PSUs
    for the design."""
    rng = np.random.default_rng(seed)
    rows = []
    for g in range(12):
        n = 2 + g % 3
        a, b = float(rng.integers(1, 50)), float(rng.integers(60, 200))
        w = rng.uniform(0.5, 3.0, n)
        rest = w[:-1].sum()
        w[-1] = rest * rng.uniform(0.15, 1.4)  # share w/(w + rest) in [0.13, 0.58]
        for k in range(n):
            rows.append((g, a if k < n - 1 else b, float(w[k]), k % 2, k))
    return pd.DataFrame(rows, columns=["g", "x", "w", "h", "c"])


def exact(df: pd.DataFrame, design: bool):
    """{group: exact variance of palma_se} (None where no standard error exists)."""
    out = {}
    for g, part in df.groupby("g"):
        h = part.h.tolist() if design else None
        c = part.c.tolist() if design else None
        out[g] = design_variance(part.x.tolist(), part.w.tolist(), h, c, lambda e: exact_z("palma", e))
    return out


def run(df: pd.DataFrame, sql: str, ordered: str) -> pd.DataFrame:
    con = duckdb.connect()
    con.register("t", df)
    kinds = [p["kind"] for p in uneven.explain(sql, con, ordered=ordered).passes]
    assert ordered in kinds or ordered == "window", (ordered, kinds)
    return uneven.query(sql, con, ordered=ordered).set_index("g").sort_index()


SQL = "SELECT g, palma_se(x, w) AS se, palma_ci_lo(x, w) AS lo, palma(x, w) AS est FROM t GROUP BY g"


@pytest.mark.parametrize("ordered, batch", [("window", None), ("refine", None), ("stream", 3), ("stream", None)],
                         ids=["window", "refine", "stream-batch3", "stream-whole"])
def test_palma_tied_at_both_cuts_has_se_exactly_zero(ordered, batch, monkeypatch):
    if batch:  # batches of 3 rows cut the groups anywhere
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    df = tied_groups()
    want = exact(df, design=False)
    assert all(v == 0 for v in want.values())  # the data is what the test says it is
    got = run(df, SQL, ordered)
    assert got.se.tolist() == [0.0] * len(want)
    assert (got.lo == got.est).all()  # the interval collapses to the estimate


@pytest.mark.parametrize("ordered", ["window", "stream"])
@pytest.mark.parametrize("design", ["strata := h, psu := c", "strata := h", "psu := c"])
def test_palma_tied_with_a_design_has_se_exactly_zero(design, ordered):
    df = tied_groups()
    h = "h" if "h" in design.split("psu")[0] else None
    c = "c" if "psu" in design else None
    want = {}
    for g, part in df.groupby("g"):
        want[g] = design_variance(part.x.tolist(), part.w.tolist(), part[h].tolist() if h else None,
                                  part[c].tolist() if c else None, lambda e: exact_z("palma", e))
    assert any(v is not None for v in want.values()) and all(v in (None, 0) for v in want.values())
    got = run(df, f"SELECT g, palma_se(x, w, {design}) AS se FROM t GROUP BY g", ordered)
    # NULL where a stratum has one unit (the exact form has no variance there), else exactly 0
    assert [None if math.isnan(v) else v for v in got.se] == [None if v is None else 0.0 for v in want.values()]


@pytest.mark.parametrize("name", ["sqlite", "postgres"])
def test_window_plan_on_other_engines_gives_zero(name):
    eng = engine_or_skip(name)
    df = tied_groups()
    eng.load(df)
    got = eng.run(SQL).sort_values("g")
    assert [float(v) for v in got.se] == [0.0] * len(exact(df, design=False))


def tiny_groups() -> pd.DataFrame:
    """The tied groups with the bottom values spread: row k at a·(1 + k·δ), so the Palma moves with the
    weights by a relative amount of the order of δ; δ from 1e-4 down to 1e-7 (a variance of about
    1e-9 … 1e-15 of the estimate's square)."""
    df = tied_groups()
    df = df[df.groupby("g").x.transform("size") >= 3].copy()
    deltas = df.g.map(dict(zip(sorted(df.g.unique()), [1e-4, 1e-5, 1e-6, 1e-7] * 4)))
    bottom = df.x < df.groupby("g").x.transform("max")
    df.loc[bottom, "x"] = df.x * (1 + df.groupby("g").cumcount() * deltas)
    return df


@pytest.mark.parametrize("ordered", PLANS)
def test_a_tiny_real_variance_keeps_its_digits(ordered):
    df = tiny_groups()
    want = exact(df, design=False)
    got = run(df, SQL, ordered)
    kept = 0
    for g, v in want.items():
        if v == 0:  # the bottom four tenths still on one value: an exact 0 among them
            assert got.se[g] == 0.0, g
        elif v > 1e-11:  # δ = 1e-4, 1e-5: a variance 1e-10 … 1e-6 of the estimate's square, a few hundred
            # times the rounding bound on the window plan's raw sums: kept, with the digits the form has
            # (the bound is not so loose that it zeroes them)
            kept += 1
            assert abs(got.se[g] / math.sqrt(v) - 1) <= 1e-4, (g, got.se[g], math.sqrt(v))
    assert kept == 4
