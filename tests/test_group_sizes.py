"""The group-size probe of ordered="auto" (compiler/group_sizes.py, engine/groups.py): a pass of
cut-based measures over groups of a few rows each streams instead of taking the refine plan; over
large groups it keeps the refine plan; compile() never probes.

The outcomes on the small groups are checked against exact rational arithmetic (the oracle of
tests/test_refine.py, written from the contract's definitions in DESIGN.md with Python ``fractions``)
at batches of 3 rows and whole, and against the window and refine plans of the same query, value for
value and NULL for NULL. The data are invented (fixed seed): 400 entities of 3 rows (values rounded
to ties, zero weights), a NULL key, a group with no valid value, one-row groups.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
import uneven.engine.stream as stream_engine
from test_refine import ORACLE, refine_data
from test_stream import assert_same_frames
from uneven.compiler import group_sizes

CUTS = ["lorenz(x, 0.3{w})", "top_share(x, 0.1{w})", "palma(x{w})", "quantile_w(x, 0.5{w})",
        "percentile_ratio(x, 0.9, 0.1{w})", "generalized_lorenz(x, 0.5{w})"]
ERRORS = ("lorenz_se(x, 0.4, w), top_share_se(x, 0.1, w), quantile_w_se(x, 0.5, w), palma_se(x, w), "
          "lorenz(x, 0.4, w), top_share(x, 0.1, w), quantile_w(x, 0.5, w), palma(x, w)")  # errors, then estimates


def entities() -> pd.DataFrame:
    rng = np.random.default_rng(20261205)
    n = 400
    g = np.repeat(np.arange(n), 3).astype(float)
    x = np.round(rng.lognormal(2.0, 1.0, 3 * n), 0)  # whole numbers: ties within groups
    w = rng.integers(0, 4, 3 * n).astype(float)  # a quarter of the weights zero
    df = pd.DataFrame({"g": g, "x": pd.array(x, dtype="Float64"), "w": pd.array(w, dtype="Float64")})
    df.loc[df["g"] == 7, "x"] = pd.NA  # a group with no valid value
    df.loc[df["g"] == 11, "g"] = np.nan  # rows of a NULL key
    extra = pd.DataFrame({"g": [1000.0, 1001.0], "x": pd.array([5.0, 2.5], dtype="Float64"),
                          "w": pd.array([2.0, 1.0], dtype="Float64")})  # one-row groups
    out = pd.concat([df, extra], ignore_index=True)
    out["g"] = out["g"].astype("Int64")  # NaN -> NULL key
    return out.sample(frac=1.0, random_state=3).reset_index(drop=True)  # shuffled: the sort has work to do


def _near(got, want) -> bool:
    """``got`` within 1e-12 relative of the exact ``want`` (an exact zero within 1e-12), NULL for NULL."""
    if want is None or got is None:
        return want is None and got is None
    err = abs(Fraction(got) - Fraction(want))
    return err <= Fraction(1, 10 ** 12) * abs(Fraction(want)) or (want == 0 and err <= Fraction(1, 10 ** 12))


def _same(got: pd.DataFrame, want: pd.DataFrame, tol=1e-12) -> None:
    """Value for value, NULL for NULL, the NULL key included (as a float NaN on both sides)."""
    assert_same_frames(got.assign(g=got["g"].astype("float64")), want.assign(g=want["g"].astype("float64")), tol)


def _kinds(con, sql, **options):
    return [(p["kind"], p["reason"]) for p in uneven.explain(sql, con, **options).passes]


def test_auto_streams_cut_measures_over_small_groups_and_refines_large_ones(monkeypatch):
    small, large = duckdb.connect(), duckdb.connect()
    small.register("t", entities())  # about 3 rows per group
    large.register("t", refine_data())  # about 200 rows per group
    cuts = "SELECT g, " + ", ".join(c.format(w=", w") for c in CUTS) + " FROM t GROUP BY g"
    errors = f"SELECT g, {ERRORS} FROM t GROUP BY g"
    compiled = {q: uneven.compile(q) for q in (cuts, errors)}
    # below PROBE_MIN_ROWS rows the plan is the one auto took without the probe
    assert [k for k, _ in _kinds(small, cuts)] == ["refine"]
    monkeypatch.setattr(group_sizes, "PROBE_MIN_ROWS", 0)
    monkeypatch.setattr(group_sizes, "REFINE_MIN_ROWS", 64.0)  # between the two shapes: 3 and ~200 rows
    for sql in (cuts, errors):
        [(kind, reason)] = _kinds(small, sql)
        assert kind == "stream" and "rows on average" in reason, reason
        assert [k for k, _ in _kinds(large, sql)] == ["refine"]
        assert [k for k, _ in _kinds(small, sql, ordered="refine")] == ["refine"]  # asked for: no probe
    # where the stream is blocked (a subquery) the window plan serves them, and explain says both
    [(kind, reason)] = _kinds(small, f"SELECT * FROM ({cuts}) q")
    assert kind == "ordered" and "subquery" in reason and "not refined: about" in reason, reason
    # the threshold is a module constant: at 2 rows per group the small groups refine too
    monkeypatch.setattr(group_sizes, "REFINE_MIN_ROWS", 2.0)
    assert [k for k, _ in _kinds(small, cuts)] == ["refine"]
    # tie grouping asked for keeps the window plan (its ties variant), as without the probe
    monkeypatch.setattr(group_sizes, "REFINE_MIN_ROWS", 64.0)
    assert [k for k, _ in _kinds(small, cuts, tie_grouping="on")] == ["ordered"]
    # compile() has no engine to probe: its SQL is the same whatever the thresholds
    assert {q: uneven.compile(q) for q in (cuts, errors)} == compiled


@pytest.mark.parametrize("batch", [3, None], ids=["batch3", "whole"])
def test_small_groups_give_exact_values_and_every_plans_results(batch, monkeypatch):
    monkeypatch.setattr(group_sizes, "PROBE_MIN_ROWS", 0)
    if batch:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", batch)
    df = entities()
    con = duckdb.connect()
    con.register("t", df)
    calls = [(c.format(w=", w" if weighted else ""), weighted) for weighted in (True, False) for c in CUTS]
    sql = "SELECT g, " + ", ".join(f"{c} AS m{i}" for i, (c, _) in enumerate(calls)) + " FROM t GROUP BY g ORDER BY g"
    assert [k for k, _ in _kinds(con, sql)] == ["stream", "stream"]  # the weighted and the unweighted pass
    got = uneven.query(sql, con)
    for row in got.itertuples(index=False):
        key = None if pd.isna(row[0]) else row[0]
        d = df[df["g"].isna()] if key is None else df[df["g"] == key]
        for i, (call, weighted) in enumerate(calls):
            d_ok = d[d["x"].notna() & (d["w"].notna() if weighted else True)]
            x = d_ok["x"].to_numpy(float)
            w = d_ok["w"].to_numpy(float) if weighted else np.ones(len(d_ok))
            want = ORACLE[CUTS[i % len(CUTS)]](x, w)  # from fractions (test_refine.ORACLE)
            value = row[i + 1]
            assert _near(None if pd.isna(value) else float(value), want), (key, call, value, want)
    assert len(got) == df["g"].nunique(dropna=False)  # every group of the WHERE, the empty one included
    for plan in ("window", "refine"):
        _same(got, uneven.query(sql, con, ordered=plan))
    if batch:  # the errors' kernels across batch boundaries: tests/test_stream_se.py
        return
    errors = f"SELECT g, {ERRORS} FROM t GROUP BY g ORDER BY g"
    streamed = uneven.query(errors, con)
    for plan in ("window", "refine"):
        other = uneven.query(errors, con, ordered=plan)
        assert len(other) == len(streamed) and other["g"].astype("float64").equals(streamed["g"].astype("float64"))
        for column, estimate in zip(streamed.columns[1:5], streamed.columns[5:]):
            for a, b, m in zip(streamed[column], other[column], streamed[estimate]):
                assert pd.isna(a) == pd.isna(b), (plan, column)
                # the variances agree to rounding, on the scale of the estimate squared: their sums run in
                # different orders, and a variance that is zero in exact arithmetic may come out a few
                # units of the last place of m² either way (its root then ~1e-7·m)
                assert pd.isna(a) or a * a == pytest.approx(b * b, rel=1e-10, abs=1e-12 * m * m), (plan, column)
