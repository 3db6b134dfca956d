"""The stream plan with the input policy's checks in numpy (compiler/passes/stream_checks.py,
engine/stream.py): the same errors, NULLs and values as the window plan, which checks every value and
weight in SQL (docs/input-policy.md). The errors are compared with the window plan's on the same data;
values with the numpy reference (uneven.reference, tested against brute force in
tests/test_reference.py) and the window plan.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest
import sqlglot

import uneven
import uneven.engine.stream as stream_engine
from test_stream import assert_same_frames
from uneven import reference as R
from uneven.compiler.context import CompileOptions
from uneven.compiler.passes.stream_checks import is_check
from uneven.compiler.pipeline import compile_with_context
from uneven.engine.columns import DuckDBSchema


@pytest.fixture(params=[(7, False), (7, True), (None, False)], ids=["batch7", "batch7-reader", "whole"])
def batches(monkeypatch, request):
    rows, ahead = request.param
    if rows:
        monkeypatch.setattr(stream_engine, "BATCH_ROWS", rows)
    monkeypatch.setattr(stream_engine, "PREFETCH", ahead)


def table(bad_x: str | None = None, bad_w: str | None = None, at: int = 40) -> duckdb.DuckDBPyConnection:
    """60 rows in 6 groups; row ``at`` (group 4) gets the bad value or weight, if any."""
    rng = np.random.default_rng(1004)
    df = pd.DataFrame({"i": np.arange(60), "g": np.arange(60) // 10, "x": rng.lognormal(0, 1, 60),
                       "w": rng.uniform(0.5, 2, 60)})
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT * FROM df")  # (a registered frame would read NaN as NULL)
    for column, value in (("x", bad_x), ("w", bad_w)):
        if value is not None:
            con.execute(f"UPDATE t SET {column} = ?::DOUBLE WHERE i = ?", [str(value), at])
    return con


def outcome(sql: str, con, ordered: str):
    try:
        return "rows", uneven.query(sql, con, ordered=ordered)
    except uneven.UnevenError as e:
        return type(e).__name__, str(e)


BAD = [("nan", None), ("inf", None), ("-inf", None), (None, "-1"), (None, "nan"), (None, "inf")]
SQLS = ["SELECT g, gini(x, w) AS a FROM t GROUP BY g ORDER BY g",  # the direct form
        "SELECT g, gini(x, w) AS a, lorenz(x, 0.3, w) AS b, count(*) AS n FROM t GROUP BY g ORDER BY g",  # joined
        "SELECT lorenz(x, 0.3, w) AS b, gini(x) AS c FROM t",  # no keys
        "SELECT g, gini(x) FILTER (WHERE w > 1) AS a FROM t GROUP BY g ORDER BY g"]


@pytest.mark.parametrize("sql", SQLS)
@pytest.mark.parametrize("bad_x, bad_w", BAD)
def test_refused_rows_give_the_window_plans_error(sql, bad_x, bad_w, batches):
    con = table(bad_x, bad_w)
    got, want = outcome(sql, con, "stream"), outcome(sql, con, "window")
    assert got[0] == want[0]
    if got[0] == "rows":  # (the FILTER keeps w > 1 only: a bad weight is no argument of that call)
        assert_same_frames(got[1], want[1])
    else:
        assert got[1] == want[1]
        assert got[0] == "InputDataError"


def test_a_clean_table_streams_without_the_checked_queries(batches, monkeypatch):
    # the checked rows query runs only after a suspect batch; on clean data the numpy checks pass and
    # the values are the numpy reference's
    con = table()
    seen = []
    original = stream_engine.suspect

    def spy(batch, weighted):
        found = original(batch, weighted)
        seen.append(found)
        return found

    monkeypatch.setattr(stream_engine, "suspect", spy)
    got = uneven.query("SELECT g, gini(x, w) AS a FROM t GROUP BY g ORDER BY g", con, ordered="stream")
    assert seen and not any(seen)
    df = con.execute("SELECT g, x, w FROM t").df()
    want = [R.gini(df.x[df.g == g].to_numpy(), df.w[df.g == g].to_numpy()) for g in range(6)]
    assert np.allclose(got.a.to_numpy(), want, rtol=1e-12, atol=0)


def test_zero_and_null_weights_beside_a_bad_value_as_the_window_plan(batches):
    # a NaN value whose weight is 0 or NULL: the window plan's row condition (w > 0) drops the row
    # before its value is checked in the joined form; whatever each form does, the stream does the same
    for w in (0.0, None):
        con = table("nan")
        con.execute("CREATE TABLE u AS SELECT * FROM t")
        con.execute("UPDATE u SET w = ? WHERE i = 40", [w])
        for sql in (s.replace("FROM t", "FROM u") for s in SQLS):
            got, want = outcome(sql, con, "stream"), outcome(sql, con, "window")
            assert got[0] == want[0] and (got[0] == "rows" or got[1] == want[1])
            if got[0] == "rows":
                assert_same_frames(got[1], want[1])


def test_the_unchecked_queries_keep_every_row_the_checks_would_see():
    con = table()
    _, ctx = compile_with_context("SELECT g, lorenz(x, 0.3, w) AS b, count(*) AS n FROM t GROUP BY g",
                                  CompileOptions(ordered="stream", stream=True), DuckDBSchema(con))
    job = ctx.stream_jobs[0]
    for checked, fast in ((job.rows_sql, job.fast_rows_sql), (job.totals_sql, job.fast_totals_sql)):
        assert any(is_check(n) for n in sqlglot.parse_one(checked, read="duckdb").walk())
        tree = sqlglot.parse_one(fast, read="duckdb")
        assert not any(is_check(n) for n in tree.walk()) and "error" not in fast.lower()
        assert any(isinstance(n, sqlglot.exp.NEQ) for n in tree.walk())  # w <> 0: negative weights come through


@pytest.mark.parametrize("where", [
    "(CASE WHEN x > 2 THEN error('a row over 2') ELSE x END) > 0",  # a user's own check in WHERE
    "x > 0 AND CASE WHEN w < 0.6 THEN error('light row') ELSE true END",
])
def test_a_users_own_error_call_is_kept(where, batches):
    # only the input policy's checks (messages "uneven: …") leave the SQL; a user's error() must stop
    # the query as on the window plan, not be dropped with them (a number where the window plan errs)
    con = table()
    sql = f"SELECT g, gini(x, w) AS gi FROM t WHERE {where} GROUP BY g"
    for ordered in ("window", "stream"):
        with pytest.raises(uneven.UnevenError) as info:
            uneven.query(sql, con, ordered=ordered)
        assert ("a row over 2" if "2'" in where else "light row") in str(info.value)
    check = sqlglot.parse_one("SELECT CASE WHEN x > 2 THEN error('no') ELSE x END", read="duckdb").expressions[0]
    assert not is_check(check)
