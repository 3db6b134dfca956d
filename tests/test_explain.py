"""``uneven.explain`` and ``uneven explain``: the passes the planner chose, and DuckDB's profile."""

from __future__ import annotations

import json

import duckdb
import numpy as np
import pandas as pd
import pytest

import uneven
from uneven import reference as R
from uneven.cli.main import main

SQL = ("SELECT g, gini(x, w), palma(x, w), theil(x), hhi(x, e), gini(x) FILTER (WHERE w > 1) "
       "FROM t GROUP BY g")


@pytest.fixture()
def con():
    rng = np.random.default_rng(3)
    c = duckdb.connect()
    df = pd.DataFrame({"g": rng.integers(0, 3, 300), "x": rng.lognormal(0, 1, 300),
                       "w": rng.integers(1, 4, 300) * 1.0, "e": rng.integers(0, 5, 300)})
    c.register("frame", df)
    c.execute("CREATE TABLE t AS SELECT * FROM frame")
    yield c
    c.close()


def test_passes_name_kind_inputs_measures_and_ctes(con):
    found = uneven.explain(SQL, con, ordered="window")
    got = [(p["kind"], p["value"], p["weight"], p["entity"], p["filter"], p["measures"]) for p in found.passes]
    assert got == [("ordered", "x", "w", None, None, ["gini(x, w)", "palma(x, w)"]),
                   ("centred", "x", None, None, None, ["theil(x)"]),
                   ("entity", "x", None, "e", None, ["hhi(x, e)"]),
                   ("ordered", "x", None, None, "w > 1", ["gini(x)"])]
    assert found.passes[0]["ctes"] == ["_uv_ord_1_rows", "_uv_ord_1_win", "_uv_ord_1"]
    assert found.passes[0]["variant"] == "rows" and "not probed" in found.passes[0]["reason"]
    # every CTE explain names is in the compiled SQL, which is what query() runs
    for p in found.passes:
        for name in p["ctes"]:
            assert f'"{name}" AS (' in found.sql
    assert found.operators is None
    text = str(found)
    assert "1. ordered [rows]  value: x" in text and "filter: w > 1" in text and "entity: e" in text


def test_profile_lists_operators_and_leaves_profiling_off(con):
    found = uneven.explain(SQL, con, profile=True, ordered="window")
    assert found.result_rows == 3
    names = {o["name"] for o in found.operators}
    assert "WINDOW" in names and any("GROUP_BY" in n for n in names)
    assert all(o["seconds"] >= 0 for o in found.operators) and found.total_seconds > 0
    assert [o["seconds"] for o in found.operators] == sorted((o["seconds"] for o in found.operators), reverse=True)
    assert "profile:" in found.text() and "WINDOW" in found.text()
    # the connection is left as it was: a later query writes no profile
    assert con.execute("SELECT current_setting('enable_profiling')").fetchone()[0] in (None, "", "no_output")
    # and the query explain ran is the one query() runs: same numbers (reference: numpy)
    df = con.execute("SELECT * FROM t WHERE g = 0").fetchdf()
    res = uneven.query("SELECT g, gini(x, w) AS v FROM t GROUP BY g ORDER BY g", con)
    assert res["v"][0] == pytest.approx(R.gini(df.x.to_numpy(), df.w.to_numpy()), rel=1e-12)


def test_cli_explain_text_json_and_errors(con, tmp_path, capsys):
    path = tmp_path / "d.parquet"
    con.execute(f"COPY t TO '{path}' (FORMAT parquet)")
    sql = f"SELECT g, gini(x, w) FROM '{path}' GROUP BY g"
    assert main(["explain", sql]) == 0  # auto streams a weighted Gini when uneven runs it on DuckDB
    out = capsys.readouterr().out
    assert "1. stream  value: x" in out and "gini(x, w)" in out and "compiled SQL" not in out
    assert main(["explain", "--ordered", "window", sql]) == 0
    out = capsys.readouterr().out
    assert "ordered [rows]" in out and "window plan requested" in out
    assert main(["explain", "--show-sql", "--tie-grouping", "on", sql]) == 0
    out = capsys.readouterr().out
    assert "ordered [ties]" in out and "_uv_ord_1_ties" in out and "compiled SQL:" in out
    assert main(["explain", "--json", "--profile", "--top", "3", sql]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["passes"][0]["kind"] == "stream" and doc["result_rows"] == 3 and doc["operators"]
    assert doc["system"]["stream_seconds"] >= 0
    assert main(["explain", "SELECT gini(x FROM t"]) == 2
    err = capsys.readouterr().err
    assert "could not parse" in err and "Traceback" not in err
    assert main(["explain", "--top", "0", sql]) == 2


@pytest.mark.parametrize("source, why, clause", [
    ("t USING SAMPLE 30 PERCENT (bernoulli)", "the rows are sampled", "TABLESAMPLE"),
    ("t WHERE random() < 0.5", "a volatile function gives new values on each read", "RANDOM()"),
    ("(SELECT *, row_number() OVER () AS rn FROM t) s WHERE rn % 2 = 0",
     "a value depends on the order the engine reads rows in", "row_number() OVER ()"),
    ("(SELECT g, e, any_value(x) AS x, 1.0 AS w FROM t GROUP BY g, e) s",
     "a value depends on the order the engine reads rows in", "any_value(x)"),
    ("(SELECT * FROM t LIMIT 100) s", "LIMIT / OFFSET in a source keeps rows of the engine's choosing", "100"),
])
def test_explain_says_which_source_is_read_once_and_why(con, source, why, clause, capsys):
    sql = f"SELECT g, count(*), gini(x, w), theil(x) FROM {source} GROUP BY g"
    found = uneven.explain(sql, con)
    assert [(r["cte"], r["why"]) for r in found.read_once] == [("_uv_src_1", why)]
    assert clause in found.read_once[0]["clause"]
    assert '"_uv_src_1" AS MATERIALIZED (' in found.sql  # the CTE explain names is the one query() runs
    first = str(found).splitlines()[0]
    assert first.startswith(f"rows read once: _uv_src_1 AS MATERIALIZED (…), because {why} (")
    assert clause in first and first.endswith("; every pass below reads these same rows")
    assert main(["explain", "--json", sql]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["read_once"] == found.read_once


def test_explain_of_a_deterministic_source_reads_it_per_pass(con):
    found = uneven.explain("SELECT g, gini(x, w), theil(x) FROM t WHERE x > 0.5 GROUP BY g", con)
    assert found.read_once == [] and "read once" not in str(found)
