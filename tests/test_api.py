"""The Python entry points: query() on connections and data frames, compile()."""

from __future__ import annotations

import duckdb
import pytest

import uneven


def test_dataframe_of_the_caller_is_a_table():
    import pandas as pd
    import pyarrow as pa

    from uneven import reference as R
    frame = pd.DataFrame({"x": [1.0, 2.0, 6.0], "w": [1.0, 2.0, 1.0]})
    arrow_frame = pa.table({"x": [1.0, 5.0]})
    got = uneven.query("SELECT gini(x, w) AS g FROM frame")["g"][0]
    assert got == pytest.approx(R.gini([1.0, 2.0, 6.0], [1.0, 2.0, 1.0]), rel=1e-12)
    # gini of (1, 5): |1 − 5| · 2 / (2 · 2² · 3) = 1/3 (pairwise definition)
    assert uneven.query("SELECT gini(x) AS g FROM arrow_frame")["g"][0] == pytest.approx(1 / 3, rel=1e-12)


def test_query_on_a_given_connection_keeps_it_open_and_sees_its_tables():
    con = duckdb.connect()
    con.execute("CREATE TABLE incomes AS SELECT * FROM (VALUES ('a', 1.0), ('a', 3.0), ('b', 2.0)) t(g, x)")
    df = uneven.query("SELECT g, gini(x) AS gini FROM incomes GROUP BY g ORDER BY g", con)
    # group a = (1, 3): 1/4 by the pairwise definition; group b has one row: 0
    assert df["gini"].tolist() == pytest.approx([0.25, 0.0], abs=1e-15)
    assert con.execute("SELECT count(*) FROM incomes").fetchone()[0] == 3  # still usable


def test_a_table_of_the_connection_wins_over_a_frame_of_the_same_name():
    import pandas as pd
    con = duckdb.connect()
    con.execute("CREATE TABLE incomes AS SELECT * FROM (VALUES (1.0), (3.0)) t(x)")
    incomes = pd.DataFrame({"x": [5.0, 5.0]})  # noqa: F841 - named to test the lookup
    assert uneven.query("SELECT gini(x) AS g FROM incomes", con)["g"][0] == pytest.approx(0.25, rel=1e-12)


def test_queries_without_from():
    df = uneven.query("SELECT gini(2.0) AS g, cv(2.0) AS c, hhi(2.0) AS h")
    # one value: no inequality; one entity holds everything (facts of common practice)
    assert df["g"][0] == 0.0 and df["c"][0] == 0.0 and df["h"][0] == pytest.approx(10000.0, rel=1e-12)


def test_group_by_name_binds_to_a_column_before_an_alias_like_duckdb():
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES ('a', 1.0), ('A', 3.0), ('b', 2.0)) v(g, x)")
    sql = "SELECT upper(g) AS g, count(*) AS n FROM t GROUP BY g ORDER BY 1, 2"
    plain = con.execute(sql).fetchall()  # DuckDB's own grouping is the reference here
    ours = uneven.query(sql.replace("count(*) AS n", "count(*) AS n, gini(x) AS gi"), con)
    assert [tuple(r) for r in ours[["g", "n"]].itertuples(index=False)] == plain == [("A", 1), ("A", 1), ("B", 1)]
    # and an alias that is no column of the source is the aliased expression
    df = uneven.query("SELECT x > 1.5 AS big, count(*) AS n, gini(x) AS gi FROM t GROUP BY big ORDER BY big", con)
    assert df["n"].tolist() == [1, 2]
    # the big group (2, 3): Gini = |2 − 3|·2 / (2·2²·2.5) = 0.1 (pairwise definition)
    assert df["gi"].tolist() == pytest.approx([0.0, 0.1], abs=1e-15)
