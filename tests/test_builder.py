"""The Python builder: every source kind gives the SQL front-end's numbers (itself checked against
the numpy reference in test_measures_engines.py), column names are identifiers, bad input raises
UnevenError subclasses naming function and argument."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

import uneven
from uneven import reference as R

ODD = 'x"; DROP TABLE t; --'


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(11)  # invented data, fixed seed
    n = 400
    return pd.DataFrame({"province": rng.choice(["Arquimbel", "Bozzlevar", "Coxquarrin"], n),
                         "income": np.round(rng.lognormal(10, 0.7, n), 2), "w": rng.integers(1, 6, n).astype(float),
                         "year": rng.choice([2023, 2024], n)})


def _built(q):
    return q.group_by("province").agg(g=uneven.gini("income", weight="w"), t=uneven.top_share("income", 0.1),
                                      th=uneven.theil("income", weight="w"))


def _sql_front_end(frame, source="frame"):
    # uneven.query reads the DataFrame named in the SQL from its caller's variables
    return uneven.query(f"SELECT province, gini(income, w) AS g, top_share(income, 0.1) AS t, theil(income, w) AS th "
                         f"FROM {source} WHERE year = 2024 GROUP BY province ORDER BY province")


def _same(a: pd.DataFrame, b: pd.DataFrame):
    assert list(a["province"]) == list(b["province"])
    for c in ("g", "t", "th"):
        assert np.allclose(a[c].to_numpy(float), b[c].to_numpy(float), rtol=1e-12, atol=0)


def test_every_source_kind_matches_the_sql_front_end(frame, tmp_path):
    want = _sql_front_end(frame)
    frame.to_parquet(tmp_path / "a.parquet")
    frame.to_csv(tmp_path / "a.csv", index=False)
    frame.to_json(tmp_path / "a.json", orient="records", lines=True)
    half = len(frame) // 2
    frame.iloc[:half].to_parquet(tmp_path / "part1.parquet")
    frame.iloc[half:].to_parquet(tmp_path / "part2.parquet")
    con = duckdb.connect()
    con.register("tmp", frame)
    con.execute("CREATE TABLE households AS SELECT * FROM tmp")
    sources = [frame, pa.Table.from_pandas(frame), str(tmp_path / "a.parquet"), str(tmp_path / "a.csv"),
               str(tmp_path / "a.json"), str(tmp_path / "part*.parquet"), con.sql("SELECT * FROM households")]
    for src in sources:
        _same(_built(uneven.from_(src).filter("year = 2024")).df(), want)
    _same(_built(uneven.from_("households", con=con).filter("year = 2024")).df(), want)
    # against the numpy reference directly too
    d = frame[(frame.year == 2024) & (frame.province == "Arquimbel")]
    got = _built(uneven.from_(frame).filter("year = 2024")).df().set_index("province")
    assert got.loc["Arquimbel", "g"] == pytest.approx(R.gini(d.income, d.w), rel=1e-9)


def test_arrow_and_sql_outputs(frame):
    q = _built(uneven.from_(frame))
    table = q.arrow()
    assert isinstance(table, pa.Table) and table.column_names == ["province", "g", "t", "th"]
    text = q.sql(dialect="duckdb")
    assert "gini" not in text.lower().replace('"g"', "") or "_uv_" in text
    assert "OVER" in text


def test_a_hostile_column_name_is_just_a_column():
    df = pd.DataFrame({ODD: [1.0, 2.0, 3.0, 10.0], "k": [1, 1, 2, 2]})
    con = duckdb.connect()
    con.execute("CREATE TABLE t AS SELECT 1 AS a")
    con.register("src", df)
    out = uneven.from_("src", con=con).group_by("k").agg(g=uneven.gini(ODD)).df()
    assert out["g"].tolist() == pytest.approx([R.gini([1, 2]), R.gini([3, 10])], rel=1e-9)
    assert con.execute("SELECT a FROM t").fetchone() == (1,)  # still there


def test_filter_takes_expressions_and_user_defined_measures_appear():
    from sqlglot import exp
    df = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0]})
    cond = exp.column("x", quoted=True) > 1
    assert uneven.from_(df).filter(cond).agg(g=uneven.gini("x")).df()["g"][0] == pytest.approx(R.gini([2, 3, 4]), rel=1e-9)


@pytest.mark.parametrize("make,words", [
    (lambda: uneven.top_share("x", 1.5), ["top_share", "p", "fraction"]),
    (lambda: uneven.top_share("x"), ["top_share", "1 parameter"]),
    (lambda: uneven.gini("x", 0.5), ["gini", "0 parameter"]),
    (lambda: uneven.gini(3), ["gini", "value"]),
    (lambda: uneven.gini("x", wieght="w"), ["gini", "wieght"]),
    (lambda: uneven.atkinson("x", "high"), ["atkinson", "eps", "number"]),
    (lambda: uneven.ginni("x"), ["ginni", "measures"]),
    (lambda: uneven.from_(pd.DataFrame({"x": [1.0]})).filter("x >>> 1"), ["filter", "parse"]),
    (lambda: uneven.from_("nope/*.parquet"), ["no file"]),
    (lambda: uneven.from_("households"), ["con="]),
    (lambda: uneven.from_(pd.DataFrame({"x": [1.0]})).agg(g="gini(x)"), ["agg", "g="]),
    (lambda: uneven.from_(pd.DataFrame({"x": [1.0], "w": ["a"]})).agg(g=uneven.gini("x", weight="w")).df(),
     ["gini"]),
    (lambda: uneven.from_(pd.DataFrame({"x": [1.0, 2.0], "w": [1.0, -1.0]})).agg(g=uneven.gini("x", weight="w")).df(),
     ["negative weight", "w"]),
])
def test_bad_input_raises_uneven_errors(make, words):
    with pytest.raises(uneven.UnevenError) as err:
        make()
    for word in words:
        assert word in str(err.value)


def test_named_options_reach_the_compiler():
    # design and interval options by name, as in SQL (name := value); the compiled query is the SQL one
    call = uneven.gini_se("x", weight="w", strata="h", psu="c")
    assert call.to_expression().sql("duckdb") == 'GINI_SE("x", "w", strata := "h", psu := "c")'
    lo = uneven.gini_ci_lo("x", weight="w", level=0.9)
    assert lo.to_expression().sql("duckdb") == 'GINI_CI_LO("x", "w", level := 0.9)'
    with pytest.raises(uneven.UnevenError, match="unknown argument 'bogus'"):
        uneven.gini_se("x", bogus=1)
    with pytest.raises(uneven.UnevenError, match="psu must be a column name"):
        uneven.gini_se("x", psu=3)


# --- method="bounded" through the builder (intervals checked against the numpy reference) ----------

def _inside_reference(df, frame):
    for _, row in df.iterrows():
        sub = frame[frame["province"] == row["province"]]
        x, w = sub["income"].to_numpy(float), sub["w"].to_numpy(float)
        for col, exact in (("g", R.gini(x, w)), ("t", R.top_share(x, 0.1)), ("th", R.theil(x, w))):
            assert row[f"{col}_lo"] <= exact <= row[f"{col}_hi"], (row["province"], col)
            assert row[f"{col}_lo"] <= row[col] <= row[f"{col}_hi"]


def test_bounded_df_gives_intervals_around_the_reference(frame):
    df = _built(uneven.from_(frame)).df(method="bounded")
    assert list(df.columns) == ["province", "g", "g_lo", "g_hi", "t", "t_lo", "t_hi", "th", "th_lo", "th_hi"]
    assert sorted(df["province"]) == ["Arquimbel", "Bozzlevar", "Coxquarrin"]
    _inside_reference(df, frame)
    assert df.attrs["uneven"]["method"] == "bounded" and df.attrs["uneven"]["resolution"] == 0.01


def test_bounded_method_with_tolerance_reaches_it(frame):
    q = _built(uneven.from_(frame)).method("bounded", tolerance=1e-6)
    df = q.df()
    _inside_reference(df, frame)
    assert (df["g_hi"] - df["g_lo"]).max() <= 1e-6 and df.attrs["uneven"]["tolerance"] == 1e-6
    table = q.arrow()
    assert table.column_names == list(df.columns)
    assert q.df(method="exact").columns.tolist() == ["province", "g", "t", "th"]  # a run's own option wins
    assert "uv_bin" in q.sql() and "_uv_ord" not in q.sql()  # bins, no sorted pass
    assert "uv_bin" in _built(uneven.from_(frame)).sql("postgres", method="bounded", resolution=0.1)


def test_bounded_builder_errors(frame):
    q = _built(uneven.from_(frame))
    with pytest.raises(uneven.MeasureUsageError, match="method must be"):
        q.method("approximate")
    with pytest.raises(uneven.UnevenError, match="bounded' only"):
        q.df(tolerance=1e-3)
    with pytest.raises(uneven.UnevenError, match="resolution must"):
        q.method("bounded", resolution=5)


def test_df_streams_as_query_does_and_explain_says_so(frame, tmp_path, monkeypatch):
    # the builder's exact run on DuckDB plans like uneven.query: the weighted Gini streams (docs/plans.md);
    # its numbers are the window plan's (to 1e-12) and the numpy reference's (uneven.reference)
    import uneven.engine.stream as stream_engine
    frame.to_parquet(tmp_path / "a.parquet")
    ran = []
    original = stream_engine.run_job

    def counting(con, job, batch_rows=None):
        ran.append(job.table)
        return original(con, job, batch_rows)
    monkeypatch.setattr(stream_engine, "run_job", counting)
    for src in (frame, str(tmp_path / "a.parquet")):
        q = uneven.from_(src).filter("year = 2024").group_by("province").agg(
            g=uneven.gini("income", weight="w"), q=uneven.quantile_w("income", 0.5, weight="w"))
        found = q.explain()
        assert [p["kind"] for p in found.passes] == ["stream"], found.passes
        assert "stream plan" in found.passes[0]["reason"]
        ran.clear()
        got = q.df()
        assert ran == ["_uv_str_1"]  # the stream job ran, then the compiled query
        con = duckdb.connect()
        con.register("f", frame)
        want = uneven.query("SELECT province, gini(income, w) AS g, quantile_w(income, 0.5, w) AS q FROM f "
                            "WHERE year = 2024 GROUP BY province ORDER BY province", con, ordered="window")
        assert list(got["province"]) == list(want["province"])
        assert np.allclose(got["g"], want["g"], rtol=1e-12, atol=0) and list(got["q"]) == list(want["q"])
        for province, g in zip(got["province"], got["g"]):
            rows = frame[(frame.year == 2024) & (frame.province == province)]
            assert abs(g - R.gini(rows.income.to_numpy(), rows.w.to_numpy())) <= 1e-12 * g
    relation = duckdb.connect().sql("SELECT 1.0 AS x, 2.0 AS w UNION ALL SELECT 3.0, 1.0")
    kept = uneven.from_(relation).agg(g=uneven.gini("x", weight="w"))
    assert [p["kind"] for p in kept.explain().passes] == ["ordered"]  # read through the relation: window plan
    assert abs(kept.df()["g"][0] - R.gini(np.array([1.0, 3.0]), np.array([2.0, 1.0]))) <= 1e-12
    import sqlite3
    on_sqlite = uneven.from_(frame, con=sqlite3.connect(":memory:")).agg(g=uneven.gini("income", weight="w"))
    assert [p["kind"] for p in on_sqlite.explain().passes] == ["ordered"]  # compiled for SQLite: never streamed
