"""The stream plan's direct form (compiler/direct.py): the final SELECT reads the stream's result table
instead of a second read of the source, a GROUP BY of the keys and a join back.

Every shape is checked against the window plan on the same query (row for row under the query's ORDER
BY, as sets without one) and its measure values against the numpy reference (uneven.reference, tested
against brute force and closed forms in tests/test_reference.py) on the rows DuckDB selects, to 1e-12.
Tiny batches make batches split groups, and runs of rows the pass does not count, anywhere.
"""

from __future__ import annotations

from fractions import Fraction

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

import uneven
import uneven.compiler.plan as plan_module
from test_stream import assert_same_frames, close
from uneven import reference as R
from uneven.engine.stream import KeptGroups


@pytest.fixture(scope="module")
def data():
    """Groups of every kind the direct form must keep: ordinary ones, one whose values are all NULL
    (a = 3), one whose weights are all zero (a = 4), NULL keys in both columns, ties."""
    rng = np.random.default_rng(801)
    n = 600
    a = rng.integers(0, 6, n).astype(float)
    df = pd.DataFrame({"a": a, "b": rng.choice(["n", "s"], n), "x": rng.integers(1, 40, n).astype(float),
                       "w": rng.integers(0, 4, n).astype(float)})
    df.loc[df.a == 3, "x"] = None
    df.loc[df.a == 4, "w"] = 0.0
    df.loc[rng.random(n) < 0.05, "a"] = None
    df.loc[rng.random(n) < 0.05, "b"] = None
    df.loc[rng.random(n) < 0.05, "x"] = None
    con = duckdb.connect()
    con.register("t", df)
    return con, df


def form(sql: str, con) -> str:
    """The stream pass's form as explain reports it ("direct" or "joined"), or "" without a stream;
    checked against the SQL that runs (the direct form reads no main aggregate)."""
    found = uneven.explain(sql, con, ordered="stream")
    streamed = [p for p in found.passes if p["kind"] == "stream"]
    if not streamed:
        return ""
    said = "direct" if "direct:" in streamed[0]["reason"] else "joined"
    assert ("_uv_agg_1" not in found.sql) is (said == "direct"), found.sql
    return said


def same_as_window(sql: str, con, ordered: bool = True) -> pd.DataFrame:
    got, want = (uneven.query(sql, con, ordered=plan) for plan in ("stream", "window"))
    if not ordered:  # no ORDER BY: the same rows in any order
        got, want = (f.sort_values(list(f.columns), na_position="first", kind="stable").reset_index(drop=True)
                     for f in (got, want))
    assert_same_frames(got, want)
    return got


def rows_of(df: pd.DataFrame, **keys) -> pd.DataFrame:
    sel = df
    for name, value in keys.items():
        sel = sel[sel[name].isna() if pd.isna(value) else sel[name] == value]
    return sel


def reference(df: pd.DataFrame, fn, *params, weighted: bool = True) -> float | None:
    """The numpy reference on the rows the measure counts (value not NULL, weight > 0; DESIGN.md)."""
    valid = df.dropna(subset=["x", "w"] if weighted else ["x"])
    if weighted:
        valid = valid[valid.w > 0]
    if valid.empty:
        return None
    return fn(valid.x.to_numpy(), *params, valid.w.to_numpy()) if weighted else fn(valid.x.to_numpy(), *params)


SHAPES = [
    # (query, ordered by the query, direct form expected)
    ("SELECT a, gini(x, w) AS g FROM t GROUP BY a", False, True),
    ("SELECT a, b, gini(x, w) AS g, top_share(x, 0.2, w) AS top FROM t GROUP BY a, b ORDER BY a, b", True, True),
    ("SELECT b, a, 100 * gini(x, w) AS g FROM t GROUP BY a, b ORDER BY b NULLS FIRST, a DESC", True, True),
    ("SELECT a + 1 AS k, coalesce(b, '?') AS bb, gini(x, w) AS g FROM t GROUP BY a, b ORDER BY k, bb", True, True),
    ("SELECT a, gini(x, w) AS g FROM t GROUP BY a HAVING gini(x, w) > 0.2 OR a IS NULL ORDER BY g DESC, a", True,
     True),
    ("SELECT a, gini(x, w) AS g FROM t GROUP BY a ORDER BY g NULLS LAST, a LIMIT 3", True, True),
    ("SELECT DISTINCT b, gini(x, w) IS NULL AS none FROM t GROUP BY a, b", False, True),
    ("SELECT a, b, gini(x, w) AS g FROM t GROUP BY ALL ORDER BY ALL", True, True),
    ("SELECT a, gini(x, w) FILTER (WHERE b = 'n') AS g FROM t GROUP BY a ORDER BY a", True, True),
    ("SELECT a, gini(x) AS g, quantile_w(x, 0.5) AS q FROM t WHERE b <> 's' OR b IS NULL GROUP BY a ORDER BY a",
     True, True),
    ("SELECT a, gini(x, w) AS g, rank() OVER (ORDER BY gini(x, w) DESC NULLS LAST, a) AS r FROM t GROUP BY a "
     "ORDER BY a", True, True),
    ("SELECT gini(x, w) AS g FROM t", True, True),
    ("SELECT gini(x, w) AS g FROM t WHERE a = 3", True, True),  # no group keys, no counted row: one NULL row
    ("SELECT gini(x, w) AS g FROM t WHERE a > 100", True, True),  # no row at all: one NULL row too
    ("WITH s AS (SELECT * FROM t WHERE x > 5) SELECT a, gini(x, w) AS g FROM s GROUP BY a ORDER BY a", True, True),
    # the joined form: the final SELECT reads something the stream's table does not hold
    ("SELECT a, gini(x, w) AS g, count(*) AS n FROM t GROUP BY a ORDER BY a", True, False),
    ("SELECT a, gini(x, w) AS g, theil(x, w) AS th FROM t GROUP BY a ORDER BY a", True, False),
    ("SELECT a, gini(x, w) AS g FROM t GROUP BY a HAVING sum(w) > 10 ORDER BY a", True, False),
    ("SELECT a, gini(x, w) AS g, gini(x) AS gu FROM t GROUP BY a ORDER BY a", True, False),
]


@pytest.mark.parametrize("sql, ordered, direct", SHAPES, ids=range(len(SHAPES)))
def test_each_shape_is_the_window_plans_outcome(data, batch, sql, ordered, direct):
    con, _ = data
    assert form(sql, con) == ("direct" if direct else "joined")
    same_as_window(sql, con, ordered)


@pytest.mark.parametrize("sql, ordered, direct", SHAPES[:2], ids=range(2))
def test_the_joined_form_gives_the_same_rows(data, monkeypatch, sql, ordered, direct):
    con, _ = data
    direct_rows = uneven.query(sql, con, ordered="stream")
    monkeypatch.setattr(plan_module, "STREAM_DIRECT", False)
    assert form(sql, con) == "joined"
    joined = uneven.query(sql, con, ordered="stream")
    if not ordered:
        direct_rows, joined = (f.sort_values("a", na_position="first").reset_index(drop=True)
                               for f in (direct_rows, joined))
    assert_same_frames(direct_rows, joined)


def test_groups_without_a_counted_row_are_kept_with_null_results(data, batch):
    con, df = data
    got = same_as_window("SELECT a, gini(x, w) AS g, quantile_w(x, 0.4, w) AS q FROM t GROUP BY a ORDER BY a", con)
    assert got.a.tolist()[:6] == [0.0, 1.0, 2.0, 3.0, 4.0, 5.0] and pd.isna(got.a.iloc[6])
    assert got.g.isna().tolist() == [False, False, False, True, True, False, False]  # all NULL x; all w = 0
    for row in got.itertuples(index=False):
        sel = rows_of(df, a=row.a)
        assert close(None if pd.isna(row.g) else row.g, reference(sel, R.gini))
        assert close(None if pd.isna(row.q) else row.q, reference(sel, R.quantile_w, 0.4))


def test_a_curve_beside_groups_without_a_counted_row(batch):
    # the curve's list column takes NULL rows for such groups as the float columns do; ordinates
    # against exact fractions: group a's Lorenz points (C/W, S/T) = (1/4, 1/13), (1/2, 3/13), (1, 1),
    # so L(1/2) = 3/13 (DESIGN.md's contract: linear between the points)
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES ('a', 1.0, 1.0), ('a', 2.0, 1.0), ('a', 5.0, 2.0), "
                "('b', NULL, 1.0), ('c', 3.0, 0.0)) v(k, x, w)")
    sql = "SELECT k, lorenz_curve(x, 2, w) AS c, gini(x, w) AS g FROM t GROUP BY k ORDER BY k"
    assert form(sql, con) == "direct"
    got, want = (uneven.query(sql, con, ordered=plan) for plan in ("stream", "window"))
    assert [[p["lorenz"] for p in got.c[0]]] == [[p["lorenz"] for p in want.c[0]]]
    assert close([p["lorenz"] for p in got.c[0]][1], float(Fraction(3, 13)))
    assert got.c[1:].isna().all() and want.c[1:].isna().all() and got.g[1:].isna().all()


def test_a_filter_that_keeps_no_row_of_a_group(data, batch):
    con, df = data
    sql = "SELECT a, b, gini(x, w) FILTER (WHERE x > 30) AS g FROM t GROUP BY a, b ORDER BY a, b"
    got = same_as_window(sql, con)
    assert len(got) == len(df.groupby(["a", "b"], dropna=False))
    for row in got.itertuples(index=False):
        sel = rows_of(df, a=row.a, b=row.b)
        want = reference(sel[sel.x > 30], R.gini)
        assert close(None if pd.isna(row.g) else row.g, want), (row, want)
    assert got.g.isna().sum() >= 5  # (the NULL and zero-weight groups, and some with no x above 30)


def test_multi_column_and_null_keys_match_the_reference(data, batch):
    con, df = data
    sql = "SELECT a, b, gini(x, w) AS g, top_share(x, 0.2, w) AS top, gini(x) AS gu FROM t GROUP BY a, b"
    got = same_as_window(sql.replace(", gini(x) AS gu", ""), con, ordered=False)
    assert got.a.isna().any() and got.b.isna().any()
    for row in got.itertuples(index=False):
        sel = rows_of(df, a=row.a, b=row.b)
        assert close(None if pd.isna(row.g) else row.g, reference(sel, R.gini))
        assert close(None if pd.isna(row.top) else row.top, reference(sel, R.top_share, 0.2))


def test_unweighted_gini_with_null_values(data, batch):
    con, df = data
    got = same_as_window("SELECT b, a, gini(x) AS g FROM t GROUP BY b, a ORDER BY b, a", con)
    for row in got.itertuples(index=False):
        want = reference(rows_of(df, a=row.a, b=row.b), R.gini, weighted=False)
        assert close(None if pd.isna(row.g) else row.g, want)


def test_strict_names_a_group_without_a_counted_row():
    con = duckdb.connect()
    con.register("t", pd.DataFrame({"g": [1, 1, 2], "x": [1.0, 2.0, None], "w": [1.0, 1.0, 1.0]}))
    assert form("SELECT g, gini(x, w) FROM t GROUP BY g", con) == "direct"
    with pytest.raises(uneven.UndefinedResultError, match="the group g=2"):
        uneven.query("SELECT g, gini(x, w) FROM t GROUP BY g", con, ordered="stream", strict=True)


def test_input_policy_errors_in_the_direct_form():
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM (VALUES (1, 1.0, 1.0), (2, 2.0, -1.0)) v(g, x, w)")
    assert form("SELECT g, gini(x, w) FROM t GROUP BY g", con) == "direct"
    with pytest.raises(uneven.InputDataError, match="negative weight.*the group g=2"):
        uneven.query("SELECT g, gini(x, w) FROM t GROUP BY g", con, ordered="stream")
    # a row the FILTER drops is not checked, as in the window plan
    sql = "SELECT g, gini(x, w) FILTER (WHERE g = 1) AS v FROM t GROUP BY g ORDER BY g"
    assert same_as_window(sql, con).v.isna().tolist() == [False, True]


@pytest.mark.parametrize("key, direct", [
    ("g::INTEGER", True), ("g::VARCHAR", True), ("g::DECIMAL(9, 2)", True), ("DATE '2020-01-01' + g::INTEGER", True),
    ("g::HUGEINT", False), ("g::UUID", False), ("[g]", False),
])
def test_key_types_that_arrow_would_change_take_the_joined_form(key, direct):
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT (i % 3)::VARCHAR AS s, i % 3 AS g, i::DOUBLE AS x FROM range(12) r(i)")
    if "UUID" in key:
        key = "('00000000-0000-0000-0000-00000000000' || g)::UUID"
    sql = f"SELECT {key} AS k, gini(x) AS v FROM t GROUP BY 1 ORDER BY 1"
    assert form(sql, con) == ("direct" if direct else "joined")
    got = same_as_window(sql, con)
    assert str(got.dtypes.k) == str(uneven.query(sql, con, ordered="window").dtypes.k)


def test_explain_says_why_the_joined_form_runs(data):
    con, _ = data
    reasons = {sql: [p for p in uneven.explain(sql, con, ordered="stream").passes if p["kind"] == "stream"][0]
               ["reason"] for sql in (
        "SELECT a, gini(x, w), count(*) FROM t GROUP BY a",
        "SELECT a, gini(x, w), theil(x, w) FROM t GROUP BY a",
        "SELECT a::HUGEINT, gini(x, w) FROM t GROUP BY 1")}
    assert [r.split("joined on the keys to the main GROUP BY: ")[1] for r in reasons.values()] == [
        "count(*) is an ordinary aggregate, read from the main GROUP BY",
        "the scope has other passes beside the stream (centred)",
        "the group key CAST(a AS INT128) is HUGEINT, which Arrow would hand back as another type"]


def test_compile_is_unchanged_by_the_direct_form():
    sql = "SELECT a, gini(x, w) FROM t GROUP BY a"
    assert uneven.compile(sql) == uneven.compile(sql, ordered="window")
    assert "_uv_agg_1" in uneven.compile(sql) and "_uv_str" not in uneven.compile(sql)


def _batch(keys, x, w=None) -> pa.RecordBatch:
    cols = {"_uv_k1": pa.array(keys, pa.int64()), "_uv_x": pa.array(x, pa.float64())}
    if w is not None:
        cols["_uv_w"] = pa.array(w, pa.float64())
    return pa.RecordBatch.from_pydict(cols)


def test_kept_groups_across_batch_boundaries():
    # groups 1 (counted), 2 (NULL values only, cut by a batch boundary), 3 (zero weight, then a counted row
    # in the next batch), 4 (zero weights only, the last group), NULL key (NULL value only)
    kept = KeptGroups(["_uv_k1"], weighted=True)
    fed = [kept.take(_batch([1, 1, 2], [1.0, 2.0, None], [1.0, 1.0, None])),
           kept.take(_batch([2, 3], [None, 1.0], [None, 0.0])),
           kept.take(_batch([3, None, 4, 4], [2.0, None, 5.0, 6.0], [1.0, None, 0.0, 0.0]))]
    assert [b.column("_uv_x").to_pylist() for b in fed] == [[1.0, 2.0], [], [2.0]]
    empty = pa.Table.from_batches(kept.finish())
    assert empty.column("_uv_k1").to_pylist() == [2, None, 4]


def test_the_key_type_probe_is_asked_only_when_nothing_else_blocks():
    from uneven.compiler.direct import direct_blocked
    from uneven.compiler.parse import parse_one_statement

    asked = []

    def types():
        asked.append(1)
        return ["BIGINT"]

    select = parse_one_statement("SELECT g, gini(x), count(*) FROM t GROUP BY g", "duckdb")
    keys = [select.args["group"].expressions[0]]
    assert direct_blocked([], select, keys, types) == "count(*) is an ordinary aggregate, read from the main GROUP BY"
    assert direct_blocked(["moment"], select, keys, types).endswith("(moment)")
    assert not asked
    select = parse_one_statement("SELECT g, gini(x), sum(gini(x)) OVER () FROM t GROUP BY g", "duckdb")
    assert direct_blocked([], select, keys, types) is None and asked == [1]  # a window function is no aggregate
    assert direct_blocked([], select, keys, lambda: None) == "the group keys' types are unknown"
    assert direct_blocked([], select, keys, lambda: ["DECIMAL(18,3)"]) is None
