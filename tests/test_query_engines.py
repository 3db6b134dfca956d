"""One call on every engine: ``uneven.query(sql, con=…)`` with a PostgreSQL (psycopg 3), Spark
(SparkSession), SQLite (sqlite3) or DuckDB connection runs the measure matrix, the hostile-input
table and the golden fixtures with the same outcomes as the compiled SQL does on that engine.

The matrix's own tests are reused (the hostile-input table in test_query_engines_hostile.py) with ``engine`` (and ``fixture_engine``) replaced by the same
engine driven through ``query()`` (tests/engines.py: ThroughQuery): expected values still come
from the numpy reference (``uneven.reference``) and the DuckDB oracle (tests/oracle.py), never
from the engine under test; results must agree to 1e-9 relative. Then: query() on an engine
equals query() on DuckDB for the same rows; explain, bounded, standard errors, bootstrap, the
builder, summaries and the command line's --engine on each engine.
"""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from engines import ENGINES, ThroughQuery, engine_or_skip
from test_dialects import _engine_with_fixture_data, oracle_con, test_golden_runs_like_oracle_on_engine  # noqa: F401

# the matrix's tests, collected here again with the engines below
from test_measures_engines import ALL, batch, data, test_measure_matches_reference, test_query_shape_matches_reference  # noqa: F401
from uneven import reference as R
from uneven.errors import ExecutionError, InputDataError, MeasureArgumentError, UndefinedResultError


@pytest.fixture(params=sorted(ENGINES), scope="module")
def engine(request):
    eng = engine_or_skip(request.param)
    yield ThroughQuery(eng)
    eng.close()


@pytest.fixture(scope="module", params=["duckdb", "postgres", "sqlite", pytest.param("spark", marks=pytest.mark.slow)])
def fixture_engine(request):
    return ThroughQuery(_engine_with_fixture_data(request.param))


def close(a, b, rel=1e-9, abs_=1e-12) -> bool:
    if a is None or b is None:
        return a is None and b is None
    return abs(float(a) - float(b)) <= max(rel * abs(float(b)), abs_)


@pytest.fixture(scope="module")
def duckdb_batch():
    """The batched query (every catalog case as a column) through query() on DuckDB over the
    matrix's rows (make_groups(), as the ``data`` fixture), run once for every engine to compare."""
    duck = ThroughQuery(engine_or_skip("duckdb"))
    duck.load(make_groups())
    calls = ", ".join(f"{call} AS m{i}" for i, (_, call, _, _, _) in enumerate(ALL))
    yield duck.run(f"SELECT grp, {calls} FROM t GROUP BY grp")
    duck.close()


def test_query_on_an_engine_equals_query_on_duckdb(engine, data, batch, duckdb_batch):
    # the same batched query through query() on DuckDB
    if engine.name == "duckdb":
        pytest.skip("the DuckDB path itself")
    want = duckdb_batch
    key = lambda df: {r["grp"]: r for _, r in df.iterrows()}  # noqa: E731
    got, want = key(batch), key(want)
    assert got.keys() == want.keys() and len(got) == 4
    for k in want:
        for i in range(len(ALL)):
            a, b = got[k][f"m{i}"], want[k][f"m{i}"]
            if isinstance(b, list):
                assert len(a) == len(b) and all(close(x["lorenz"], y["lorenz"]) and close(x["p"], y["p"])
                                                for x, y in zip(a, b)), (ALL[i][0], k)
            else:
                assert close(a, b), f"{ALL[i][0]} group {k}: {engine.name} {a} vs DuckDB {b}"


def test_result_types_follow_duckdb(engine, data):
    # column names as written (aliases and the generated name of an unaliased call), numbers as
    # float64, counts as int64, as DuckDB's DataFrame has them
    df = uneven.query("SELECT grp, gini(x, w) AS g, count(*) AS n, theil(x) FROM t GROUP BY grp", engine.con)
    duck = uneven.query("SELECT grp, gini(x, w) AS g, count(*) AS n, theil(x) FROM t GROUP BY grp", _duck(data))
    assert list(df.columns) == list(duck.columns) == ["grp", "g", "n", "theil(x)"]
    assert str(df["g"].dtype) == str(duck["g"].dtype) == "float64"
    assert str(df["n"].dtype) == str(duck["n"].dtype) == "int64"
    assert str(df["theil(x)"].dtype) == "float64"
    assert sorted(df["n"].tolist()) == sorted(data.groupby("grp", dropna=False).size().tolist())


def _duck(df):
    import duckdb
    con = duckdb.connect()
    con.register("_frame", df)
    con.execute("CREATE TABLE t AS SELECT * FROM _frame")
    return con


def test_errors_are_ours_and_name_the_engine(engine, data):
    with pytest.raises(InputDataError, match=r"^negative weight in the weight argument w - 3 \(the group grp="):
        uneven.query("SELECT grp, gini(x, w - 3) FROM t GROUP BY grp", engine.con)
    with pytest.raises(UndefinedResultError, match=r"gini\(x\) is undefined \(NULL\) for the group grp="):
        uneven.query("SELECT grp, gini(x) FILTER (WHERE x > 1e9) FROM t GROUP BY grp", engine.con, strict=True)
    with pytest.raises(ExecutionError, match=f"^{engine.label} could not run the query: "):
        uneven.query("SELECT gini(x) FROM no_such_table_here", engine.con)
    # a text column as the value: refused by name, with our line and column (SQLite: by a typeof scan)
    with pytest.raises(MeasureArgumentError, match=r"gini\(\): the value grp is of type VARCHAR") as info:
        uneven.query("SELECT\n  gini(grp) FROM t", engine.con)
    assert (info.value.line, info.value.column) == (2, 3)


def test_bounded_se_and_bootstrap_on_the_engine(engine, data):
    rows = data[data["grp"] == "g0"]
    x, w = rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy()
    keep = ~np.isnan(x) & ~np.isnan(w)
    x, w = x[keep], w[keep]
    # bounded: the interval holds the reference's exact value (docs/bounded.md: certified bounds)
    df = uneven.query("SELECT gini(x, w) AS g FROM t WHERE grp = 'g0'", engine.con, method="bounded",
                      resolution=0.01)
    exact = R.gini(x, w)
    assert df["g_lo"].iloc[0] - 1e-12 <= exact <= df["g_hi"].iloc[0] + 1e-12
    assert df.attrs["uneven"]["method"] == "bounded" and df["g_hi"].iloc[0] - df["g_lo"].iloc[0] < 0.01
    # the standard error: the same value as the DuckDB path (reference.se is checked in test_uncertainty)
    sql = "SELECT gini_se(x, w) AS se FROM t WHERE grp = 'g0'"
    got = uneven.query(sql, engine.con)
    assert close(got["se"].iloc[0], uneven.query(sql, _duck(data))["se"].iloc[0])
    from uneven.reference.se import se
    assert close(got["se"].iloc[0], se("gini", x, (), w))


def test_bootstrap_without_a_key_on_the_engine(engine, data):
    sql = "SELECT gini_boot_se(x, w, replicates := 50, seed := 3) AS b FROM t WHERE grp = 'g0'"
    first, again = uneven.query(sql, engine.con)["b"].iloc[0], uneven.query(sql, engine.con)["b"].iloc[0]
    # the engine's own hash draws the replicates (test_bootstrap_engines compares them with the
    # linearized SE); here: a positive SE, the same on a rerun to 1e-9 (the seed fixes the draws)
    assert 0 < first < 1 and close(first, again)  # the sums may add in another order (threads)


def test_explain_shows_our_passes_and_the_engines_plan(engine, data):
    found = uneven.explain("SELECT grp, gini(x, w) FROM t GROUP BY grp", engine.con)
    # on DuckDB, where uneven runs the query itself, auto streams a weighted Gini (docs/plans.md)
    assert [p["kind"] for p in found.passes] == ["stream" if engine.name == "duckdb" else "ordered"]
    if engine.name == "duckdb":
        assert found.engine_plan is None
        return
    assert found.engine == engine.label and found.engine_plan
    assert f"{engine.label}'s plan:" in found.text()
    marker = {"postgres": "Sort", "sqlite": "SCAN", "spark": "Window"}[engine.name]
    assert marker in found.engine_plan


def test_builder_and_summaries_on_the_engine(engine, data):
    q = uneven.from_("t", con=engine.con).group_by("grp").agg(g=uneven.gini("x", weight="w"), t=uneven.theil("x"))
    got = {r["grp"] if isinstance(r["grp"], str) else None: r for _, r in q.df().iterrows()}
    for key, rows in data.groupby("grp", dropna=False):
        key = key if isinstance(key, str) else None
        rows = rows[rows["x"].notna() & rows["w"].notna()]
        assert close(got[key]["g"], R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy()))
    # a summary made on the engine, stored there, measured there: the interval holds the exact Gini
    uneven.summarize("t", "x", "w", by=["grp"], con=engine.con, table="uv_test_summary", replace=True)
    out = uneven.from_summary("uv_test_summary", ["gini"], con=engine.con)
    g0 = out[out["grp"] == "g0"].iloc[0]
    rows = data[(data["grp"] == "g0") & data["x"].notna() & data["w"].notna()]
    exact = R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy())
    assert g0["gini_lo"] - 1e-12 <= exact <= g0["gini_hi"] + 1e-12


def test_frames_the_caller_holds_are_read_on_the_engine(engine):
    if engine.name == "duckdb":
        pytest.skip("DuckDB reads the caller's frames itself (test_api)")
    local_frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 10.0]})
    df = uneven.query("SELECT gini(x) AS g FROM local_frame", engine.con)
    # handbook: Gini = Σ|xi − xj| / (2 n² μ); pairs of {1, 2, 3, 10}: 1+2+9+1+8+7 = 28, ×2 = 56; 56/(2·16·4)
    assert close(df["g"].iloc[0], 56 / 128)
    from uneven.engine.adapters import adapt
    assert not adapt(engine.con).has_table("local_frame")  # the temporary table is gone again


# --- connections that are not engines, missing drivers, settings --------------------------------

def test_an_unknown_connection_is_refused_by_name():
    from uneven.errors import EngineUnavailableError
    with pytest.raises(EngineUnavailableError, match="con= must be a DuckDB connection, a psycopg 3 connection"):
        uneven.query("SELECT gini(x) FROM t", object())


def test_duckdb_settings_do_not_apply_elsewhere():
    con = sqlite3.connect(":memory:")
    with pytest.raises(uneven.UnevenError, match="memory_limit is a DuckDB setting; it does not apply to SQLite"):
        uneven.query("SELECT 1", con, memory_limit="1GB")
    with pytest.raises(uneven.UnevenError, match="threads, temp_directory are DuckDB settings; .* SQLite's own"):
        uneven.explain("SELECT 1", con, threads=2, temp_directory="/tmp")


def test_sqlite_functions_installed_on_first_use_and_again_harmlessly():
    con = sqlite3.connect(":memory:")
    con.execute("CREATE TABLE t (x REAL, w REAL)")
    con.executemany("INSERT INTO t VALUES (?, ?)", [(1.0, 1.0), (2.0, 1.0), (3.0, 2.0)])
    for _ in range(2):  # installing twice changes nothing
        with pytest.raises(InputDataError, match="negative weight"):
            uneven.query("SELECT gini(x, w - 2) FROM t", con)
    # weighted Gini by pairs (DESIGN.md): Σ wi wj |xi − xj| / (2 W² μ) with W = 4, μ = 9/4:
    # 2·(1·1·1 + 1·2·2 + 1·2·1) = 14; 14 / (2·16·2.25) = 14/72
    assert close(uneven.query("SELECT gini(x, w) AS g FROM t", con)["g"].iloc[0], 14 / 72)


def test_a_missing_driver_names_the_extra(monkeypatch):
    import builtins

    from uneven.engine.adapters.url import open_url
    from uneven.errors import EngineUnavailableError
    real = builtins.__import__

    def no_psycopg(name, *args, **kwargs):
        if name == "psycopg" or name.startswith("psycopg."):
            raise ImportError("No module named 'psycopg'")
        return real(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_psycopg)
    with pytest.raises(EngineUnavailableError, match=r"pip install 'uneven\[postgres\]'"):
        open_url("postgresql://someone@localhost/db")


@pytest.mark.parametrize("url, message", [
    ("mysql://host/db", "unknown engine URL"),
    ("sqlite://host/file.db", "a sqlite URL names a file"),
    ("sqlite:///no/such/file.db", "no SQLite database file no/such/file.db"),
    ("duckdb:///no/such/file.duckdb", "no DuckDB database file"),
    ("spark:yarn", "write a Spark URL as spark:local"),
])
def test_engine_urls_refused_clearly(url, message):
    from uneven.engine.adapters.url import open_url
    from uneven.errors import EngineUnavailableError
    with pytest.raises(EngineUnavailableError, match=message):
        open_url(url)


# --- the command line's --engine ---------------------------------------------------------------

def _engine_url(engine, tmp_path, data, monkeypatch) -> str:
    """A URL naming the engine under test (its data in table t)."""
    if engine.name == "sqlite":
        path = tmp_path / "survey.db"
        con = sqlite3.connect(path)
        from engines import SQLiteEngine
        loader = SQLiteEngine.__new__(SQLiteEngine)
        loader.con = con
        SQLiteEngine.load(loader, data)
        con.commit()
        con.close()
        return f"sqlite:///{path}"
    if engine.name == "duckdb":
        import duckdb
        path = tmp_path / "survey.duckdb"
        con = duckdb.connect(str(path))
        con.register("_frame", data)
        con.execute("CREATE TABLE t AS SELECT * FROM _frame")
        con.close()
        return f"duckdb:///{path}"
    if engine.name == "postgres":
        import psycopg

        from engines import PostgresEngine
        info = psycopg.conninfo.conninfo_to_dict(PostgresEngine.server.dsn)
        if info.get("password"):  # never on the command line: libpq reads it from the environment
            monkeypatch.setenv("PGPASSWORD", str(info["password"]))
        user = f"{info['user']}@" if info.get("user") else ""
        return f"postgresql://{user}{info.get('host', 'localhost')}:{info.get('port', 5432)}/{info.get('dbname', '')}"
    return "spark:local[2]"  # the session the matrix runs (one per process) is found and left running


def test_cli_engine_query_lorenz_explain(engine, data, tmp_path, monkeypatch, capsys):
    from uneven.cli.main import main
    url = _engine_url(engine, tmp_path, data, monkeypatch)
    assert main(["query", "--engine", url, "--format", "csv",
                 "SELECT grp, gini(x, w) AS g FROM t WHERE grp = 'g1' GROUP BY grp"]) == 0
    out = capsys.readouterr().out.strip().splitlines()
    rows = data[(data["grp"] == "g1") & data["x"].notna() & data["w"].notna()]
    assert out[0] == "grp,g" and out[1].startswith("g1,")
    assert close(float(out[1].split(",")[1]), R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy()))

    assert main(["lorenz", "--engine", url, "t", "--value", "x", "--points", "2"]) == 0
    text = capsys.readouterr().out.strip().splitlines()
    kept = data["x"].dropna().astype(float).to_numpy()
    middle = text[2].split()  # p = 0.5: L(0.5) of all rows, unweighted (handbook: the Lorenz ordinate)
    # the table prints 6 significant digits
    assert float(middle[0]) == 0.5 and close(float(middle[1]), R.lorenz(kept, 0.5), rel=1e-5)

    assert main(["explain", "--engine", url, "SELECT gini(x) FROM t"]) == 0
    shown = capsys.readouterr().out
    # on DuckDB, run by uneven, the Gini streams (docs/plans.md); elsewhere the window plan's ordered pass
    assert ("stream" if engine.name == "duckdb" else "ordered") in shown
    assert engine.name == "duckdb" or f"{engine.label}'s plan:" in shown


def test_cli_engine_report(engine, data, tmp_path, monkeypatch):
    if engine.name == "spark":
        pytest.skip("on Spark the report runs on the matrix session in tests/test_cli_spark_report.py (a URL would start its own)")
    from uneven.cli.main import main
    url = _engine_url(engine, tmp_path, data, monkeypatch)
    out = tmp_path / "report.md"
    assert main(["report", "--engine", url, "t", "--value", "x", "--weight", "w", "--by", "grp", "-o", str(out)]) == 0
    text = out.read_text()
    rows = data[(data["grp"] == "g2") & data["x"].notna() & data["w"].notna()]
    want = R.gini(rows["x"].astype(float).to_numpy(), rows["w"].astype(float).to_numpy())
    assert f"{want:.3f}" in text  # the report's table prints Gini to three decimals


def test_cli_engine_refusals(capsys, tmp_path):
    from uneven.cli.main import main
    assert main(["query", "--engine", "sqlite:///no_such_file.db", "SELECT 1"]) != 0
    assert "no SQLite database file no_such_file.db" in capsys.readouterr().err
    assert main(["query", "--engine", "duckdb://", "--database", "x.duckdb", "SELECT 1"]) != 0
    assert "give either --engine or --database" in capsys.readouterr().err
    path = tmp_path / "empty.db"
    sqlite3.connect(path).close()
    assert main(["query", "--engine", f"sqlite:///{path}", "--threads", "2", "SELECT 1"]) != 0
    assert "--threads is a DuckDB setting; it does not apply to SQLite" in capsys.readouterr().err


def test_cli_help_documents_the_engine_spellings(capsys):
    from uneven.cli.main import main
    with pytest.raises(SystemExit):
        main(["query", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    for spelling in ("duckdb:///FILE.duckdb", "postgresql://[USER@]HOST[:PORT]/DBNAME", "sqlite:///RELATIVE.db",
                     "spark:local[N]", "spark://HOST:PORT", "service"):
        assert spelling in text, spelling


# --- SQLAlchemy (the optional `sqlalchemy` extra): its driver connection is used -----------------

def test_sqlalchemy_engine_and_connection(tmp_path):
    sqlalchemy = pytest.importorskip("sqlalchemy")
    path = tmp_path / "s.db"
    raw = sqlite3.connect(path)
    raw.execute("CREATE TABLE t (x REAL)")
    raw.executemany("INSERT INTO t VALUES (?)", [(1.0,), (2.0,), (3.0,), (10.0,)])
    raw.commit()
    raw.close()
    eng = sqlalchemy.create_engine(f"sqlite:///{path}")
    # handbook: Gini = Σ|xi − xj| / (2 n² μ) = 56 / 128 for {1, 2, 3, 10} (pairs: 1+2+9+1+8+7 = 28, twice)
    assert close(uneven.query("SELECT gini(x) AS g FROM t", eng)["g"].iloc[0], 56 / 128)
    with eng.connect() as c:
        assert close(uneven.query("SELECT gini(x) AS g FROM t", c)["g"].iloc[0], 56 / 128)
    assert eng.pool.checkedout() == 0  # the connection taken from the pool went back
    # the report takes its connection from the pool the same way, and gives it back
    from uneven.report import report_data
    data = report_data("t", "x", points=4, con=eng)
    assert close(data.groups[0].values["gini"], 56 / 128)
    assert eng.pool.checkedout() == 0
    raw = sqlite3.connect(path)  # the caller's own driver connection stays open after the report
    report_data("t", "x", points=4, con=raw)
    assert raw.execute("SELECT count(*) FROM t").fetchone()[0] == 4
    raw.close()


def test_sqlalchemy_over_postgres():
    sqlalchemy = pytest.importorskip("sqlalchemy")
    pg = engine_or_skip("postgres")  # the matrix's server; the matrix's rows in a table of their own
    data = make_groups()
    pg.load(data, "t_sqlalchemy")
    import psycopg

    from engines import PostgresEngine
    info = psycopg.conninfo.conninfo_to_dict(PostgresEngine.server.dsn)
    url = sqlalchemy.engine.URL.create("postgresql+psycopg", username=info.get("user"), password=info.get("password"),
                                       host=info.get("host"), port=int(info.get("port", 5432)),
                                       database=info.get("dbname"))
    eng = sqlalchemy.create_engine(url)
    got = uneven.query("SELECT grp, theil(x) AS t FROM t_sqlalchemy WHERE grp = 'g0' GROUP BY grp", eng)
    rows = data[(data["grp"] == "g0") & data["x"].notna()]
    assert close(got["t"].iloc[0], R.theil(rows["x"].astype(float).to_numpy()))
    eng.dispose()
    pg.close()
