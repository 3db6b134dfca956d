"""Front doors on every engine of the matrix (tests/engines.py) that test_front_doors_engines.py and
test_brackets_dominance_engines.py leave out: ``uneven explain --profile --engine URL``, the
``brackets`` and ``dominance`` commands by ``--engine URL``, and the report's Python call
(``write_report`` / ``report_data`` with ``con=`` a connection of the engine).

Each engine's numbers must equal DuckDB's to 1e-9 (the contract's tolerance); the DuckDB numbers
themselves are checked against the numpy reference (``uneven.reference``, tested against exact
fractions and closed forms in test_reference.py) here for the report's Gini and in test_brackets.py
and test_dominance.py for the tables."""

from __future__ import annotations

import json
import math

import duckdb
import numpy as np
import pandas as pd
import pytest

from conftest import make_groups
from test_brackets_dominance_engines import bracket_table, survey_rows
from test_front_doors_engines import engine_url, group_rows
from uneven import reference as R
from uneven.brackets import from_brackets
from uneven.cli.main import main
from uneven.report import report_data, write_report
from uneven.tables.dominance import lorenz_dominance


@pytest.fixture(scope="module")
def loaded(engine):
    engine.load(make_groups(), "t_fd")
    engine.load(bracket_table(), "tab")
    engine.load(survey_rows(), "hh")
    return engine


@pytest.fixture(scope="module")
def duck():
    con = duckdb.connect()
    for name, frame in (("t_fd", make_groups()), ("tab", bracket_table()), ("hh", survey_rows())):
        con.register("_f", frame)
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM _f")
        con.unregister("_f")
    yield con
    con.close()


def con_of(engine):
    return engine.spark if engine.name == "spark" else engine.con


def url_of(engine, tmp_path) -> str:
    """The engine's URL; on SQLite and DuckDB a file holding the three tables of ``loaded``."""
    url = engine_url(engine, tmp_path)  # t_fd
    if engine.name == "sqlite":
        import sqlite3
        lite = sqlite3.connect(url.removeprefix("sqlite:///"))
        bracket_table().to_sql("tab", lite, index=False)
        survey_rows().to_sql("hh", lite, index=False)
        lite.close()
    elif engine.name == "duckdb":
        con = duckdb.connect(url.removeprefix("duckdb:///"))
        for name, frame in (("tab", bracket_table()), ("hh", survey_rows())):
            con.register("_f", frame)
            con.execute(f"CREATE TABLE {name} AS SELECT * FROM _f")
            con.unregister("_f")
        con.close()
    return url


def near(a, b, rel=1e-9) -> bool:
    if a is None or b is None or (isinstance(a, float) and math.isnan(a)) or (isinstance(b, float) and math.isnan(b)):
        return (a is None or a != a) and (b is None or b != b)
    return abs(float(a) - float(b)) <= rel * abs(float(b)) + 1e-12


# -- explain --profile --engine URL -------------------------------------------------------------------

def test_cli_explain_profile_with_engine_url(loaded, tmp_path, capsys):
    url = url_of(loaded, tmp_path)
    sql = "SELECT grp, gini(x, w) AS g FROM t_fd GROUP BY grp"
    assert main(["explain", "--profile", "--engine", url, sql]) == 0
    text = capsys.readouterr().out
    # the pass the planner chose: on DuckDB, which uneven runs itself, auto streams a weighted pass
    # that needs the full order (docs/plans.md); other engines run the compiled window plan
    kind = "stream" if loaded.name == "duckdb" else "ordered"
    assert kind in text
    if loaded.name == "duckdb":
        assert "4 result rows" in text and "s in DuckDB" in text
    else:
        assert "4 result rows" in text and "ran in" in text  # four groups, the NULL key one of them
    if loaded.name == "postgres":
        assert "actual time" in text  # EXPLAIN (ANALYZE, BUFFERS)
    assert main(["explain", "--profile", "--json", "--engine", url, sql]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [p["kind"] for p in doc["passes"]] == [kind]
    assert doc["result_rows"] == 4 and doc["total_seconds"] > 0


# -- brackets and dominance by --engine URL -----------------------------------------------------------

def test_cli_brackets_with_engine_url_equals_duckdb(loaded, duck, tmp_path, capsys):
    url = url_of(loaded, tmp_path)
    assert main(["brackets", "tab", "--by", "region", "-m", "gini", "-m", "top_share(0.1)", "--engine", url,
                 "--format", "json"]) == 0
    got = pd.DataFrame(json.loads(capsys.readouterr().out))
    want = from_brackets("tab", ["gini", "top_share(0.1)"], by="region", con=duck)
    assert list(got["region"]) == list(want["region"]) == ["Harrowdene", "Quillmarsh"]
    for col in want.columns:
        if col != "region":
            assert all(near(u, v) for u, v in zip(got[col], want[col])), col


def test_cli_dominance_with_engine_url_equals_duckdb(loaded, duck, tmp_path, capsys):
    url = url_of(loaded, tmp_path)
    assert main(["dominance", "hh", "income", "--group", "province", "--groups", "Ostrevel", "Brindlemoor",
                 "--weight", "w", "--points", "9", "--engine", url, "--format", "json"]) == 0
    out = capsys.readouterr()
    # Brindlemoor's incomes are a spread of Ostrevel's (Atkinson 1970, from memory): Ostrevel's curve lies above
    assert "A = Ostrevel, B = Brindlemoor: Ostrevel dominates Brindlemoor" in out.err
    got = pd.DataFrame(json.loads(out.out))
    want = lorenz_dominance("hh", "income", "province", ("Ostrevel", "Brindlemoor"), weight="w", points=9,
                            con=duck).table
    assert list(got.columns) == list(want.columns) and len(got) == len(want) == 9
    for col in want.columns:
        assert all(near(u, v) for u, v in zip(got[col], want[col])), col


# -- the report's Python call with con= ---------------------------------------------------------------

def test_write_report_with_engine_connection_equals_duckdb(loaded, duck, tmp_path):
    # Spark plans each of the report's queries for seconds: there the written file is proved by
    # tests/test_cli_spark_report.py (the same report through the CLI on this session), and this test
    # checks the report's numbers only
    if loaded.name != "spark":
        path = write_report("t_fd", "x", tmp_path / "r.md", weight="w", by="grp", points=4, con=con_of(loaded))
        text = path.read_text()
        for key in ("g0", "g1", "g2"):
            x, w = group_rows(key)
            assert f"{key} — Gini {R.gini(x, w):.4f}" in text, key  # the ranking prints Gini to four decimals
        assert (tmp_path / "r-lorenz.svg").exists()
    got = report_data("t_fd", "x", weight="w", by="grp", points=4, dominance="g0,g1", con=con_of(loaded))
    want = report_data("t_fd", "x", weight="w", by="grp", points=4, dominance="g0,g1", con=duck)
    assert [g.label for g in got.groups] == [g.label for g in want.groups]
    for g, h in zip(got.groups + [got.overall], want.groups + [want.overall]):
        assert g.values.keys() == h.values.keys()
        assert all(near(g.values[k], h.values[k]) for k in h.values), (g.label, g.values, h.values)
        assert len(g.curve) == len(h.curve) == 5
        assert all(near(p, q) for a, b in zip(g.curve, h.curve) for p, q in zip(a, b)), g.label
    for g in want.groups:
        if g.label in ("g0", "g1", "g2"):
            x, w = group_rows(g.label)
            assert near(g.values["gini"], R.gini(x, w))  # DuckDB's against the numpy reference
    assert got.dominance is not None and want.dominance is not None
    assert got.dominance.verdict == want.dominance.verdict
    a, b = got.dominance.table, want.dominance.table
    assert list(a.columns) == list(b.columns) and len(a) == len(b)
    for col in b.columns:
        if np.issubdtype(b[col].dtype, np.number):
            assert all(near(u, v) for u, v in zip(a[col], b[col])), col


def test_report_refuses_duckdb_settings_on_another_engine_by_name(loaded, tmp_path):
    if loaded.name == "duckdb":
        pytest.skip("DuckDB takes its own settings")
    from uneven.errors import UnevenError
    label = {"postgres": "PostgreSQL", "spark": "Spark", "sqlite": "SQLite"}[loaded.name]
    with pytest.raises(UnevenError, match=rf"memory_limit= is a DuckDB setting; it does not apply to {label}"):
        write_report("t_fd", "x", tmp_path / "r.html", by="grp", memory_limit="1GB", con=con_of(loaded))
    assert not (tmp_path / "r.html").exists()  # refused before any query or file
    with pytest.raises(UnevenError, match=rf"threads=, temp_directory= are DuckDB settings; .* {label}"):
        report_data("t_fd", "x", threads=2, temp_directory=str(tmp_path), con=con_of(loaded))
