"""The ordered pass's "ties" variant (tied values grouped before the window) gives the same results
as the plain variant: every ordered measure, weighted and not, on tie-heavy data, against the numpy
reference (``uneven.reference``, itself checked in test_reference.py against brute force, exact
fractions and closed forms); and the planner picks the variant by the rule in compiler/plan.py."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from test_measures_engines import CASES, close
from uneven.catalog import MEASURES

ORDERED_CASES = [c for c in CASES if MEASURES[c[0].split("(")[0]].pass_for(False) == "ordered"]


def tie_heavy(seed: int = 11) -> pd.DataFrame:
    """Invented counts (e.g. items sold per stall of a fictional market): few distinct values, a
    NULL key group, NULL values and weights, zero weights."""
    rng = np.random.default_rng(seed)
    n = 900
    df = pd.DataFrame({"grp": rng.choice(["north", "south", "east", None], n),
                       "x": rng.poisson(4, n).astype("int64"),
                       "w": rng.integers(0, 4, n).astype(float)})
    df["x"] = df["x"].astype("Int64")
    df.loc[[5, 17], "x"] = pd.NA
    df.loc[[8], "w"] = np.nan
    return df


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    df = tie_heavy()
    c.register("t_frame", df)
    c.execute("CREATE TABLE t AS SELECT * FROM t_frame")
    c.execute("CREATE TABLE t_double AS SELECT grp, CAST(x AS DOUBLE) + random() AS x, w FROM t_frame")
    yield c, df
    c.close()


def _want(df, ref, weighted):
    out = {}
    for key, d in df.groupby("grp", dropna=False, sort=False):
        d = d[d["x"].notna()]
        if weighted:
            d = d[d["w"].notna()]
        key = None if not isinstance(key, str) else key
        out[key] = ref(d["x"].to_numpy(float), d["w"].to_numpy(float) if weighted else None, None)
    return out


@pytest.mark.parametrize("weighted", [False, True], ids=["unweighted", "weighted"])
@pytest.mark.parametrize("template,ref", ORDERED_CASES, ids=[c[0].format(w="") for c in ORDERED_CASES])
def test_ties_variant_matches_reference(con, template, ref, weighted):
    c, df = con
    call = template.format(w=", w" if weighted else "")
    sql = f"SELECT grp, {call} AS m FROM t GROUP BY grp"
    assert "_ties" in uneven.compile(sql, tie_grouping="on")
    res = uneven.query(sql, c, tie_grouping="on")
    want = _want(df, ref, weighted)
    assert len(res) == len(want) == 4
    for _, row in res.iterrows():
        key = row["grp"] if isinstance(row["grp"], str) else None
        got = list(row["m"]) if isinstance(row["m"], np.ndarray) else row["m"]
        assert close(got, want[key]), f"{call} group {key}: got {got}, want {want[key]}"


def test_auto_groups_ties_of_repeated_integers_only(con):
    c, _ = con
    chosen = uneven.explain("SELECT grp, gini(x, w), theil(x) FROM t GROUP BY grp", c).passes
    assert [(p["kind"], p["variant"]) for p in chosen] == [("ordered", "ties"), ("centred", "adaptive")]
    assert "distinct" in chosen[0]["reason"]
    # floating-point values are not probed; compile() alone has no data to look at (the window plan's
    # variants: on DuckDB an unweighted Gini without many ties otherwise streams, docs/plans.md)
    assert uneven.explain("SELECT grp, gini(x) FROM t_double GROUP BY grp", c,
                          ordered="window").passes[0]["variant"] == "rows"
    assert "_ties" not in uneven.compile("SELECT grp, gini(x) FROM t GROUP BY grp")
    assert uneven.explain("SELECT grp, gini(x) FROM t GROUP BY grp", c, tie_grouping="off",
                          ordered="window").passes[0]["variant"] == "rows"


def test_auto_keeps_rows_when_integers_rarely_tie():
    c = duckdb.connect()
    c.execute("CREATE TABLE wide AS SELECT i % 3 AS g, (i * 7919) % 100003 AS x FROM range(20000) r(i)")
    p = uneven.explain("SELECT g, gini(x) FROM wide GROUP BY g", c, ordered="window").passes[0]
    assert p["variant"] == "rows" and "distinct" in p["reason"]
    assert uneven.explain("SELECT g, gini(x) FROM wide GROUP BY g", c).passes[0]["kind"] == "stream"  # auto
    # and both variants agree (reference: the plain pass, itself checked against numpy elsewhere)
    a = uneven.query("SELECT g, gini(x) AS v FROM wide GROUP BY g ORDER BY g", c, tie_grouping="on")
    b = uneven.query("SELECT g, gini(x) AS v FROM wide GROUP BY g ORDER BY g", c, tie_grouping="off")
    assert a["v"].tolist() == pytest.approx(b["v"].tolist(), rel=1e-12)


def test_bad_tie_grouping_is_a_clear_error():
    with pytest.raises(uneven.UnevenError, match="tie_grouping must be one of auto, on, off"):
        uneven.compile("SELECT gini(x) FROM t", tie_grouping="yes")
