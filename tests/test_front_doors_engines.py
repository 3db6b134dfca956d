"""Front doors on every engine of the matrix (tests/engines.py) not covered by test_query_engines.py:
``explain(profile=True)``, the builder's bounded and standard-error forms, a Spark DataFrame as the
builder's source, and ``uneven query --engine URL --method bounded``. Expected values come from the
numpy reference (``uneven.reference``; the SE from ``uneven.reference.se``), checked against exact
fractions and closed forms in test_reference.py and test_uncertainty.py."""

from __future__ import annotations

import duckdb
import pandas as pd
import pytest

import uneven
from conftest import make_groups
from uneven import reference as R
from uneven.reference.se import se as reference_se


@pytest.fixture(scope="module")
def loaded(engine):
    engine.load(make_groups(), "t_fd")
    return engine


def con_of(engine):
    return engine.spark if engine.name == "spark" else engine.con


def group_rows(key):
    d = make_groups()
    d = d[(d["grp"] == key) if key is not None else d["grp"].isna()]
    d = d[d["x"].notna() & d["w"].notna()]
    return d["x"].astype(float).to_numpy(), d["w"].astype(float).to_numpy()


def close(a, b, rel=1e-9) -> bool:
    return abs(float(a) - float(b)) <= rel * abs(float(b)) + 1e-12


def test_explain_with_profile_runs_the_query_once(loaded):
    found = uneven.explain("SELECT grp, gini(x, w) FROM t_fd GROUP BY grp", con_of(loaded), profile=True)
    # on DuckDB, which uneven runs itself, auto streams a weighted pass that needs the full order
    assert [p["kind"] for p in found.passes] == ["stream" if loaded.name == "duckdb" else "ordered"]
    assert found.total_seconds is not None and found.total_seconds > 0
    if loaded.name == "duckdb":
        assert found.operators  # DuckDB's profiler: time per operator
    else:
        assert found.result_rows == 4  # four groups, the NULL key one of them
        assert found.engine == loaded.label and found.engine_plan
    if loaded.name == "postgres":
        assert "actual time" in found.engine_plan  # EXPLAIN (ANALYZE, BUFFERS)


def test_builder_bounded_and_standard_error(loaded):
    q = (uneven.from_("t_fd", con=con_of(loaded)).group_by("grp")
         .agg(g=uneven.gini("x", weight="w"), se=uneven.gini_se("x", weight="w")))
    exact = q.df()
    bounded = uneven.from_("t_fd", con=con_of(loaded)).group_by("grp").agg(g=uneven.gini("x", weight="w")).df(
        method="bounded", resolution=0.01)
    assert len(exact) == 4 == len(bounded)
    key = lambda v: v if isinstance(v, str) else None  # noqa: E731
    lows = {key(r["grp"]): (r["g_lo"], r["g_hi"]) for _, r in bounded.iterrows()}
    for _, r in exact.iterrows():
        x, w = group_rows(key(r["grp"]))
        assert close(r["g"], R.gini(x, w))
        assert close(r["se"], reference_se("gini", x, (), w))
        lo, hi = lows[key(r["grp"])]
        # docs/bounded.md: certified bounds hold the exact value
        assert lo - 1e-12 <= R.gini(x, w) <= hi + 1e-12 and hi - lo < 0.01


def test_spark_dataframe_as_the_builders_source(loaded):
    if loaded.name != "spark":
        pytest.skip("a Spark DataFrame exists on Spark only")
    frame = loaded.spark.table("t_fd").where("grp = 'g1'")
    out = uneven.from_(frame).agg(g=uneven.gini("x", weight="w"), top=uneven.top_share("x", 0.1, weight="w")).df()
    x, w = group_rows("g1")
    assert close(out["g"].iloc[0], R.gini(x, w)) and close(out["top"].iloc[0], R.top_share(x, 0.1, w))


def engine_url(engine, tmp_path) -> str:
    data = make_groups()
    if engine.name == "sqlite":
        import sqlite3
        path = tmp_path / "fd.db"
        lite = sqlite3.connect(path)
        data.astype({"x": float, "w": float}).to_sql("t_fd", lite, index=False)
        lite.close()
        return f"sqlite:///{path}"
    if engine.name == "duckdb":
        path = tmp_path / "fd.duckdb"
        con = duckdb.connect(str(path))
        con.register("_f", data)
        con.execute("CREATE TABLE t_fd AS SELECT * FROM _f")
        con.close()
        return f"duckdb:///{path}"
    if engine.name == "postgres":
        import psycopg

        from engines import PostgresEngine
        info = psycopg.conninfo.conninfo_to_dict(PostgresEngine.server.dsn)
        if info.get("password"):
            pytest.skip("the test server has a password; the URL never carries one")
        user = f"{info['user']}@" if info.get("user") else ""
        return f"postgresql://{user}{info.get('host', 'localhost')}:{info.get('port', 5432)}/{info.get('dbname', '')}"
    return "spark:local[2]"  # the matrix's session, with its tables


def test_cli_query_bounded_with_engine_url(loaded, tmp_path, capsys):
    from uneven.cli.main import main
    url = engine_url(loaded, tmp_path)
    assert main(["query", "--engine", url, "--method", "bounded", "--format", "csv",
                 "SELECT grp, gini(x, w) AS g FROM t_fd WHERE grp = 'g2' GROUP BY grp"]) == 0
    out = pd.read_csv(pd.io.common.StringIO(capsys.readouterr().out))
    x, w = group_rows("g2")
    assert {"g_lo", "g_hi"} <= set(out.columns) and out["grp"].iloc[0] == "g2"
    # docs/bounded.md: certified bounds hold the exact value (the CSV prints enough digits for 1e-9)
    assert out["g_lo"].iloc[0] - 1e-9 <= R.gini(x, w) <= out["g_hi"].iloc[0] + 1e-9
    assert 0 <= out["g_hi"].iloc[0] - out["g_lo"].iloc[0] < 0.05
