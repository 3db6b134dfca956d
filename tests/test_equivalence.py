"""Equivalised income and person weights: hand-worked scale values, every engine against the
written definition, the person-weighted measures against the same measures on one row per person,
and the three doors (SQL, builder, installed macro) giving the same numbers."""

from __future__ import annotations

import math

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R
from uneven.reference import poverty as RP


def households(seed: int = 5, n: int = 80) -> pd.DataFrame:
    """Invented households of a fictional country: income, adults, children, survey weight; a few
    rows outside the scale's domain (no adult, negative children, NULLs)."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"hh": np.arange(n), "income": np.round(rng.lognormal(10, 0.6, n), 0),
                       "adults": rng.integers(1, 4, n), "children": rng.integers(0, 4, n),
                       "w": rng.integers(1, 6, n).astype(float)})
    df.loc[3, "adults"] = 0
    df.loc[5, "children"] = -1
    df["income"] = df["income"].astype("Float64")
    df.loc[7, "income"] = pd.NA
    return df


# A household of 2 adults and 2 children with 42,000: modified OECD scale 1 + 0.5 + 2·0.3 = 2.1
# (common practice in official statistics, from memory) → 20,000; square root of 4 → 21,000;
# elasticity 1 (per capita) → 10,500; elasticity 0 (household) → 42,000.
@pytest.mark.parametrize("scale,want", [("'oecd_modified'", 20000.0), ("'sqrt'", 21000.0), ("1", 10500.0),
                                        ("0", 42000.0), (None, 20000.0)])
def test_hand_worked_household(scale, want):
    arg = "" if scale is None else f", scale := {scale}"
    got = uneven.query(f"SELECT equivalised(42000, 2, 2{arg}) AS v")["v"][0]
    assert got == pytest.approx(want, rel=1e-15)


SCALES = [("oecd_modified", "'oecd_modified'"), ("sqrt", "'sqrt'"), (0.5, "0.5"), (0.25, "1/4")]


def test_every_engine_matches_the_definition(engine):
    df = households()
    engine.load(df, "hh")
    items = ", ".join(f"equivalised(income, adults, children, scale := {sql}) AS s{i}"
                      for i, (_, sql) in enumerate(SCALES))
    res = engine.run(f"SELECT hh, {items} FROM hh ORDER BY hh")
    for _, row in res.iterrows():
        src = df.loc[int(row["hh"])]
        income = None if pd.isna(src.income) else float(src.income)
        for i, (scale, _) in enumerate(SCALES):
            want = RP.equivalised(income, int(src.adults), int(src.children), scale)
            got = row[f"s{i}"]
            if want is None:
                assert got is None or pd.isna(got), (row["hh"], scale, got)
            else:
                assert got == pytest.approx(want, rel=1e-12), (row["hh"], scale)


def _persons(df: pd.DataFrame, scale) -> tuple[np.ndarray, np.ndarray]:
    """One row per person (each carrying the household's weight and equivalised income): the
    definition person weights stand for."""
    xs, ws = [], []
    for _, h in df.iterrows():
        value = RP.equivalised(None if pd.isna(h.income) else float(h.income), int(h.adults), int(h.children), scale)
        if value is None:
            continue
        for _ in range(int(h.adults) + int(h.children)):
            xs.append(value)
            ws.append(float(h.w))
    return np.array(xs), np.array(ws)


def test_person_weights_equal_one_row_per_person(engine):
    df = households()
    engine.load(df, "hh")
    res = engine.run("SELECT gini(equivalised(income, adults, children), w * (adults + children)) AS g, "
                     "below_line_share(equivalised(income, adults, children), 0.6, w * (adults + children)) AS h, "
                     "wolfson(equivalised(income, adults, children, scale := 'sqrt'), w * (adults + children)) AS p "
                     "FROM hh")
    x, w = _persons(df, "oecd_modified")
    xs, ws = _persons(df, "sqrt")
    assert res["g"][0] == pytest.approx(R.gini(x, w), rel=1e-9)
    assert res["h"][0] == pytest.approx(RP.below_line_share(x, 0.6, w), rel=1e-9)
    assert res["p"][0] == pytest.approx(RP.wolfson(xs, ws), rel=1e-9)


def test_builder_and_macro_agree_with_sql():
    df = households()
    con = duckdb.connect()
    con.register("hh", df)
    sql = uneven.query("SELECT gini(equivalised(income, adults, children, scale := 'sqrt'), w * (adults + children)) "
                       "AS g, fgt(equivalised(income, adults, children), 1, 15000, w * (adults + children)) AS f "
                       "FROM hh", con=con)
    built = uneven.from_(df).agg(
        g=uneven.gini(uneven.equivalised("income", "adults", "children", "sqrt"),
                      weight=uneven.person_weight("w", "adults", "children")),
        f=uneven.fgt(uneven.equivalised("income", "adults", "children"), 1, 15000,
                     weight=uneven.person_weight("w", "adults", "children"))).df()
    uneven.install(con)
    macro = con.execute("SELECT gini(equivalised(income, adults, children, 'sqrt'), w * (adults + children)) AS g, "
                        "fgt(equivalised(income, adults, children), 1, 15000, w * (adults + children)) AS f "
                        "FROM hh").df()
    x, w = _persons(df, "sqrt")
    assert sql["g"][0] == pytest.approx(R.gini(x, w), rel=1e-9)
    for col in ("g", "f"):
        assert built[col][0] == pytest.approx(sql[col][0], rel=1e-12)
        assert macro[col][0] == pytest.approx(sql[col][0], rel=1e-12)
    # the macro's scale runs with the query: a name it does not know stops it with the same words
    with pytest.raises(duckdb.Error, match="scale must be 'oecd_modified', 'sqrt' or a number"):
        con.execute("SELECT equivalised(income, adults, children, 'cube') FROM hh").fetchall()


@pytest.mark.parametrize("sql,needle", [
    ("SELECT equivalised(income, adults) FROM hh", "takes equivalised"),
    ("SELECT equivalised(income, adults, children, 'cube') FROM hh", "scale must be 'oecd_modified'"),
    ("SELECT equivalised(income, adults, children, scale := 1.5) FROM hh", "between 0 and 1"),
    ("SELECT equivalised(income, adults, children, scale := adults) FROM hh", "scale must be a numeric constant"),
    ("SELECT equivalised(income, adults, children, size := 2) FROM hh", "unknown named argument 'size'"),
])
def test_bad_arguments_are_clear_errors(sql, needle):
    with pytest.raises(uneven.MeasureArgumentError, match=needle):
        uneven.compile(sql)


def test_builder_refuses_an_unknown_scale_type():
    with pytest.raises(uneven.MeasureArgumentError, match="scale must be"):
        uneven.equivalised("income", "adults", "children", scale=None)
    assert math.isclose(RP.equivalised(42000, 2, 2, 0.5), 21000.0)
