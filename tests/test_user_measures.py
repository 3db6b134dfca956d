"""A user-defined measure (the worked example of docs/registered_functions.md) through all three
doors: SQL text, the builder and the DuckDB macros from install(), against its numpy reference."""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from uneven import reference as R
from uneven.catalog.user import MeasureDefinitionError


def middle_share_reference(x, lo, hi, w=None):
    """Share of the total held by the population between fractions lo and hi: L(hi) − L(lo)."""
    a, b = R.lorenz(x, lo, w), R.lorenz(x, hi, w)
    return None if a is None or b is None else b - a


@pytest.fixture()
def middle_share():
    m = uneven.define_measure("middle_share", params=["lo", "hi"], pass_="ordered",
                               result="lorenz(hi) - lorenz(lo)", reference=middle_share_reference,
                               formula="L(hi) − L(lo): share of the middle of the distribution")
    yield m
    uneven.remove_measure("middle_share")


def test_exact_small_case(middle_share):
    # x = 1, 2, 3, 4 (T = 10): the second quarter holds 2 of 10 (exact arithmetic with fractions)
    want = Fraction(2, 10)
    got = uneven.query("SELECT middle_share(x, 0.25, 0.5) AS m FROM (VALUES (1), (2), (3), (4)) v(x)")["m"][0]
    assert got == pytest.approx(float(want), abs=1e-15)


def test_three_doors_agree_with_the_reference(middle_share):
    df = make_groups()
    sql = "SELECT grp, middle_share(x, 0.4, 0.9, w) AS m FROM t GROUP BY grp ORDER BY grp NULLS LAST"
    con = duckdb.connect()
    con.register("src", df)
    con.execute("CREATE TABLE t AS SELECT * FROM src")
    via_sql = uneven.query(sql, con=con)
    via_builder = uneven.from_("t", con=con).group_by("grp").agg(m=uneven.middle_share("x", 0.4, 0.9, weight="w")).df()
    uneven.install(con, measures=["middle_share"])
    via_macro = con.execute(sql).fetchdf()
    via_table = con.execute("SELECT grp, middle_share AS m FROM middle_share_by('t', 'x', 0.4, 0.9, 'w', ['grp']) "
                            "ORDER BY grp NULLS LAST").fetchdf()
    for key, d in df.groupby("grp", dropna=False, sort=False):
        d = d[d["x"].notna() & d["w"].notna()]
        want = middle_share_reference(d["x"].to_numpy(float), 0.4, 0.9, d["w"].to_numpy(float))
        for out in (via_sql, via_builder, via_macro, via_table):
            row = out[out["grp"].isna()] if pd.isna(key) else out[out["grp"] == key]
            assert row["m"].iloc[0] == pytest.approx(want, rel=1e-9), (key, out)
    assert np.allclose(via_macro["m"], via_sql["m"], rtol=1e-12, atol=0)
    with pytest.raises(duckdb.Error, match="middle_share.*hi"):
        con.execute("SELECT middle_share(x, 0.4, 1.5) FROM t").fetchall()


def test_moment_measure_and_definition_errors():
    uneven.define_measure("mean_square_ratio", pass_="moment", params=[], result="sum(w * x * x) / total_weight / (mean * mean)",
                           reference=lambda x, w=None: None)
    try:
        got = uneven.query("SELECT mean_square_ratio(x) AS r FROM (VALUES (1), (3)) v(x)")["r"][0]
        assert got == pytest.approx(5 / 4, rel=1e-9)  # E[x²]/μ² = 5/4 by hand
    finally:
        uneven.remove_measure("mean_square_ratio")
    with pytest.raises(MeasureDefinitionError, match="built-in"):
        uneven.define_measure("gini", result="lorenz(0.5)", reference=None)
    with pytest.raises(MeasureDefinitionError, match="unknown name 'foo'"):
        uneven.define_measure("bad_one", result="lorenz(0.5) + foo", reference=None)
    with pytest.raises(MeasureDefinitionError, match="pass_"):
        uneven.define_measure("bad_two", pass_="sideways", result="1", reference=None)
    with pytest.raises(MeasureDefinitionError, match="parameter kind .* got 'percent'"):
        uneven.define_measure("bad_three", params=["p"], param_kinds={"p": "percent"}, result="lorenz(p)",
                              reference=None)
    assert "bad_three" not in {m["name"] for m in uneven.measures()}
    assert "bad_one" not in {m["name"] for m in uneven.measures()}
