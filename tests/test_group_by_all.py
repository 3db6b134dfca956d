"""GROUP BY ALL with constant select items, on every engine: DuckDB leaves items that read no column
out of the grouping, so a query whose other items are aggregates is one whole-input row, even over no
rows (checked against DuckDB running the plain query without measures, and the Gini against the
numpy reference)."""

from __future__ import annotations

import duckdb
import pandas as pd
import pytest

from uneven import reference as R

DATA = pd.DataFrame({"g": ["a", "a", "b", "b", "b"], "x": [1.0, 4.0, 2.0, 2.0, 9.0]})


def _duckdb_plain(sql: str) -> list[tuple]:
    """The query without measures, as DuckDB itself answers it (the outside reference for grouping)."""
    con = duckdb.connect()
    con.register("t", DATA)
    return con.sql(sql).fetchall()


@pytest.mark.parametrize("where, rows", [("x < 0", 0), ("x > 0", 5)])
def test_constant_items_are_not_keys(engine, where, rows):
    engine.load(DATA)
    plain = _duckdb_plain(f"SELECT 'k' AS k, 1 + 1 AS two, count(*) AS n FROM t WHERE {where} GROUP BY ALL")
    assert plain == [("k", 2, rows)]  # DuckDB: one row even over no rows
    got = engine.run(f"SELECT 'k' AS k, 1 + 1 AS two, count(*) AS n, gini(x) AS gi FROM t WHERE {where} "
                     "GROUP BY ALL")
    assert len(got) == 1
    row = got.iloc[0]
    assert (row["k"], int(row["two"]), int(row["n"])) == plain[0]
    expected = R.gini(DATA.query(where)["x"].tolist()) if rows else None
    if expected is None:
        assert row["gi"] is None or pd.isna(row["gi"])
    else:
        assert row["gi"] == pytest.approx(expected, rel=1e-12)


def test_a_column_item_still_groups(engine):
    engine.load(DATA)
    got = engine.run("SELECT 'k' AS k, g, count(*) AS n, gini(x) AS gi FROM t GROUP BY ALL ORDER BY g")
    assert list(got["g"]) == ["a", "b"] and [int(v) for v in got["n"]] == [2, 3]
    for g, value in zip(got["g"], got["gi"]):
        assert value == pytest.approx(R.gini(DATA[DATA.g == g]["x"].tolist()), rel=1e-12)
