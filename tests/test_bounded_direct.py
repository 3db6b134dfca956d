"""The summary pass's direct form (method="bounded"): the final SELECT reads the pass's result CTE,
one row per group, instead of a second read of the source joined on the keys.

Each query runs twice on every engine of the matrix, direct and joined (``plan.SUMMARY_DIRECT``
off), and the two results must be identical row for row: same groups (NULL keys, multi-column keys,
groups none of whose rows counts), same values, same NULLs, same order where ORDER BY fixes it.
The joined form is the reference here because it is the form the engine matrix already checks
against the numpy oracle (test_bounded_engines.py); the groups with no counted row are also checked
against the measure contract (design notes: "a group where a measure is undefined
(empty …) yields NULL").
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import uneven
from uneven.compiler import plan
from uneven.compiler.context import CompileOptions
from uneven.compiler.pipeline import compile_with_context

# (label, query, ORDER BY in the query, the group-key columns to sort by otherwise)
QUERIES = [
    ("keys", "SELECT g, gini(x, w) AS gi, top_share(x, 0.1, w) AS ts, theil(x, w) AS th FROM t GROUP BY g",
     False, ["g"]),
    ("two keys", "SELECT g, h, gini(x, w) AS gi, quantile_w(x, 0.5, w) AS q FROM t GROUP BY g, h", False, ["g", "h"]),
    ("filter", "SELECT g, gini(x, w) FILTER (WHERE f) AS gi FROM t GROUP BY g", False, ["g"]),
    ("having order", "SELECT g, gini(x, w) AS gi FROM t GROUP BY g HAVING gini(x, w) > 0.05 OR g IS NULL "
     "ORDER BY gi DESC NULLS LAST, g NULLS FIRST", True, []),
    ("width", "SELECT g, round(gi_hi - gi_lo, 9) AS width, gi_lo <= gi AS inside FROM "
     "(SELECT g, gini(x, w) AS gi FROM t GROUP BY g) AS q ORDER BY g NULLS FIRST", True, []),
    ("no keys", "SELECT gini(x, w) AS gi, mld(x, w) AS ml FROM t", True, []),
    ("no keys, empty", "SELECT gini(x, w) AS gi FROM t WHERE x > 1e9", True, []),
    ("empty, keys", "SELECT g, gini(x, w) AS gi FROM t WHERE x > 1e9 GROUP BY g", True, []),
]

NO_COUNTED_ROW = ("all_null_x", "all_zero_w", "all_null_w")  # groups whose every row the pass drops


def direct_data() -> pd.DataFrame:
    """Invented rows (fixed seed): three lognormal groups and a NULL key, a second key h with a NULL,
    and groups none of whose rows counts (NULL values, zero weights, NULL weights)."""
    rng = np.random.default_rng(21)
    rows = []
    for g in ["north", "south", "east", None]:
        for _ in range(40):
            x = float(np.round(rng.lognormal(3.0, 0.9), 1))
            rows.append({"g": g, "h": [1, 2, None][int(rng.integers(3))], "x": x if rng.random() > 0.1 else None,
                         "w": float(rng.integers(0, 4)), "f": bool(rng.random() > 0.3)})
    for i in range(5):
        rows.append({"g": "all_null_x", "h": 1, "x": None, "w": 1.0, "f": True})
        rows.append({"g": "all_zero_w", "h": 1, "x": 10.0 + i, "w": 0.0, "f": True})
        rows.append({"g": "all_null_w", "h": 2, "x": 5.0 + i, "w": None, "f": True})
        rows.append({"g": "filtered", "h": 2, "x": 3.0 + i, "w": 1.0, "f": False})
    df = pd.DataFrame(rows)
    df["h"] = df["h"].astype("Int64")
    return df


@pytest.fixture(scope="module")
def loaded(engine):
    engine.load(direct_data())
    return engine


def run_both(engine, sql: str, monkeypatch) -> tuple[pd.DataFrame, pd.DataFrame, str, str]:
    direct_sql = uneven.compile(sql, dialect=engine.dialect, method="bounded")
    monkeypatch.setattr(plan, "SUMMARY_DIRECT", False)
    joined_sql = uneven.compile(sql, dialect=engine.dialect, method="bounded")
    monkeypatch.setattr(plan, "SUMMARY_DIRECT", True)
    return engine.execute(direct_sql), engine.execute(joined_sql), direct_sql, joined_sql


def _plain(v):
    if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NA:
        return None
    return float(v) if isinstance(v, (int, float, np.floating, np.integer)) and not isinstance(v, bool) else v


def rows_of(df: pd.DataFrame, ordered: bool, keys: list[str]) -> list[tuple]:
    out = [tuple(_plain(v) for v in row) for row in df.itertuples(index=False)]
    if not ordered:
        idx = [list(df.columns).index(k) for k in keys]
        out.sort(key=lambda r: tuple((r[i] is None, str(r[i])) for i in idx))
    return out


@pytest.mark.parametrize("label, sql, ordered, keys", QUERIES, ids=[q[0] for q in QUERIES])
def test_direct_equals_joined(loaded, monkeypatch, label, sql, ordered, keys):
    if loaded.name == "spark" and label in ("two keys", "width", "no keys, empty"):
        pytest.skip("Spark plans each query for seconds: the other shapes cover its SQL")
    direct, joined, direct_sql, joined_sql = run_both(loaded, sql, monkeypatch)
    assert '"_uv_agg_' not in direct_sql and "_uv_agg_" not in direct_sql, "the direct form read the source twice"
    assert "_uv_agg_" in joined_sql
    assert list(direct.columns) == list(joined.columns)
    mine, theirs = rows_of(direct, ordered, keys), rows_of(joined, ordered, keys)
    assert len(mine) == len(theirs), (label, len(mine), len(theirs))
    for a, b in zip(mine, theirs):
        assert len(a) == len(b)
        for u, v in zip(a, b):
            if isinstance(u, float) and isinstance(v, float):
                assert u == pytest.approx(v, rel=1e-12, abs=1e-15), (label, a, b)
            else:
                assert u == v, (label, a, b)


def test_groups_without_counted_rows_kept(loaded):
    """Every group of the WHERE is a row; where no row counts, every result is NULL (the contract:
    an empty group yields NULL, never a made-up number)."""
    out = loaded.execute(uneven.compile("SELECT g, gini(x, w) AS gi, cv(x, w) AS c FROM t GROUP BY g",
                                        dialect=loaded.dialect, method="bounded"))
    groups = {_plain(g) for g in out["g"]}
    assert groups == {"north", "south", "east", None, *NO_COUNTED_ROW, "filtered"}
    for _, row in out.iterrows():
        values = [_plain(row[c]) for c in ("gi", "gi_lo", "gi_hi", "c", "c_lo", "c_hi")]
        if row["g"] in NO_COUNTED_ROW:
            assert values == [None] * 6, (row["g"], values)
        else:
            assert all(v is not None for v in values[:3]), (row["g"], values)
    filtered = uneven.compile("SELECT g, gini(x) FILTER (WHERE f) AS gi FROM t GROUP BY g",
                              dialect=loaded.dialect, method="bounded")
    out = loaded.execute(filtered)
    row = out[out["g"] == "filtered"]
    assert len(row) == 1 and _plain(row.iloc[0]["gi"]) is None


def test_joined_where_direct_cannot_serve():
    """An ordinary aggregate beside the measure is a column of the main GROUP BY: the joined form."""
    sql = uneven.compile("SELECT g, count(*) AS n, gini(x, w) AS gi FROM t GROUP BY g", method="bounded")
    assert "_uv_agg_1" in sql and "JOIN" in sql
    _, ctx = compile_with_context("SELECT g, count(*) AS n, gini(x, w) AS gi FROM t GROUP BY g",
                                  CompileOptions(method="bounded"))
    assert "count(*) is an ordinary aggregate" in ctx.chosen[0]["reason"], ctx.chosen
    sql = uneven.compile("SELECT g, gini(x, w) AS gi, gini(x) AS gu FROM t GROUP BY g", method="bounded")
    assert "_uv_agg_1" in sql  # two summary passes (weighted and not): joined on the keys
    sql = uneven.compile("SELECT g, gini(x, w) AS gi FROM t GROUP BY g", method="bounded")
    assert "_uv_agg_" not in sql and "JOIN" not in sql


def test_joined_with_count_same_values(loaded):
    """The joined form beside a count(*) gives the direct form's measure values for every group."""
    a = loaded.execute(uneven.compile("SELECT g, count(*) AS n, gini(x, w) AS gi FROM t GROUP BY g",
                                      dialect=loaded.dialect, method="bounded"))
    b = loaded.execute(uneven.compile("SELECT g, gini(x, w) AS gi FROM t GROUP BY g",
                                      dialect=loaded.dialect, method="bounded"))
    got = {_plain(r["g"]): (_plain(r["gi"]), _plain(r["gi_lo"])) for _, r in a.iterrows()}
    ref = {_plain(r["g"]): (_plain(r["gi"]), _plain(r["gi_lo"])) for _, r in b.iterrows()}
    assert got.keys() == ref.keys()
    for k in ref:
        assert (got[k][0] is None) == (ref[k][0] is None), k
        if ref[k][0] is not None:
            assert got[k][0] == pytest.approx(ref[k][0], rel=1e-12) and got[k][1] == pytest.approx(ref[k][1], rel=1e-12)
    counts = {_plain(r["g"]): int(r["n"]) for _, r in a.iterrows()}
    assert counts["filtered"] == 5 and counts["all_null_x"] == 5  # rows of the WHERE, counted by count(*)


def test_strict_names_a_group_with_no_counted_row():
    """strict: the direct form's result CTE carries the keys the error names (DuckDB's error())."""
    import duckdb

    con = duckdb.connect()
    con.register("d", direct_data())
    con.execute("CREATE TABLE t AS SELECT * FROM d")
    sql = uneven.compile("SELECT g, gini(x, w) AS gi FROM t WHERE g = 'all_zero_w' OR g = 'north' GROUP BY g",
                         method="bounded", strict=True)
    assert "_uv_agg_" not in sql
    with pytest.raises(duckdb.Error, match="undefined .NULL. for the group g=all_zero_w"):
        con.execute(sql).fetchall()
