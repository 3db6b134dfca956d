"""Bracket tables and Lorenz dominance on every engine of the matrix (tests/engines.py).

A bracket table is small: ``from_brackets(..., con=<any engine>)`` reads its rows through the
engine's adapter and computes in numpy, so every engine must give exactly what DuckDB gives.
``lorenz_dominance(..., con=<any engine>)`` compiles the ordinates and their standard errors for that
engine: they must equal DuckDB's to 1e-9 (the contract's tolerance), and so must the verdict.
The DuckDB results themselves are checked against closed forms and the numpy reference in
test_brackets.py and test_dominance.py.
"""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

from uneven.brackets import from_brackets, merge_brackets
from uneven.cli.main import main
from uneven.tables.dominance import lorenz_dominance

MEASURES = ["gini", "top_share(0.1)", "bottom_share(0.4)", "palma", "s80s20", "quantile_w(0.5)",
            "percentile_ratio(0.9, 0.1)", "mean"]


def bracket_table() -> pd.DataFrame:
    """An invented tabulation: two regions, two years, an open top bracket, one missing total."""
    rng = np.random.default_rng(31)
    edges = [0.0, 5e3, 1e4, 2e4, 4e4, 8e4]
    rows = []
    for region, (mu, sigma) in {"Harrowdene": (9.9, 0.7), "Quillmarsh": (10.2, 0.9)}.items():
        for year in (2024, 2025):
            x = rng.lognormal(mu + 0.03 * (year - 2024), sigma, 4000)
            for lo, hi in zip(edges, edges[1:] + [None]):
                inside = x[(x >= lo) & (x < hi)] if hi is not None else x[x >= lo]
                rows.append({"region": region, "year": year, "low": lo, "high": hi, "units": float(len(inside)),
                             "total": float(inside.sum())})
    df = pd.DataFrame(rows)
    df.loc[(df.region == "Quillmarsh") & (df.year == 2025) & (df.low == 1e4), "total"] = None  # not published
    for col in ("high", "total"):  # nullable: NULL stays NULL on every engine's loader (NaN is refused)
        df[col] = df[col].astype("Float64")
    return df


def survey_rows() -> pd.DataFrame:
    """Invented microdata: two provinces whose curves differ (a spread of one around its mean)."""
    rng = np.random.default_rng(8)
    base = rng.lognormal(10, 0.5, 1500)
    spread = base.mean() + 1.6 * (rng.lognormal(10, 0.5, 1500) - base.mean())
    x = np.r_[base, np.abs(spread) + 100.0]
    return pd.DataFrame({"province": ["Ostrevel"] * 1500 + ["Brindlemoor"] * 1500, "income": np.round(x, 2),
                         "w": rng.choice([0.5, 1.0, 2.0, 3.5], 3000)})


@pytest.fixture(scope="module")
def loaded(engine):
    engine.load(bracket_table(), "tab")
    engine.load(survey_rows(), "hh")
    return engine


@pytest.fixture(scope="module")
def duck():
    con = duckdb.connect()
    for name, frame in (("tab", bracket_table()), ("hh", survey_rows())):
        con.register("_f", frame)
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM _f")
        con.unregister("_f")
    yield con
    con.close()


def con_of(engine):
    return engine.spark if engine.name == "spark" else engine.con


def _same(a: pd.DataFrame, b: pd.DataFrame, rel=1e-9):
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    for col in a.columns:
        for u, v in zip(a[col], b[col]):
            if isinstance(u, (float, np.floating)) or isinstance(v, (float, np.floating)):
                if pd.isna(u) or pd.isna(v):
                    assert pd.isna(u) and pd.isna(v), (col, u, v)
                else:
                    assert float(u) == pytest.approx(float(v), rel=rel, abs=1e-12), (col, u, v)
            else:
                assert u == v, (col, u, v)


def test_from_brackets_on_the_engine_equals_duckdb(loaded, duck):
    for by in (["region", "year"], ["region"], []):
        got = from_brackets("tab", MEASURES, by=by, con=con_of(loaded))
        want = from_brackets("tab", MEASURES, by=by, con=duck)
        _same(got, want)
    # a query over the engine's table, written in DuckDB's SQL as every uneven entry point takes it
    sub = "(SELECT * FROM tab WHERE year = 2025) t"
    _same(from_brackets(sub, ["gini"], by="region", con=con_of(loaded)), from_brackets(sub, ["gini"], by="region", con=duck))


def test_missing_total_is_flagged_on_the_engine(loaded):
    got = from_brackets("tab", ["gini"], by=["region", "year"], con=con_of(loaded)).set_index(["region", "year"])
    assert int(got.loc[("Quillmarsh", 2025), "missing_totals"]) == 1
    assert int(got.loc[("Harrowdene", 2024), "missing_totals"]) == 0
    assert got["gini_lo"].le(got["gini"]).all() and got["gini"].le(got["gini_hi"]).all()


def test_merge_brackets_on_the_engine_equals_duckdb(loaded, duck):
    parts = ["(SELECT * FROM tab WHERE year = 2024) a", "(SELECT * FROM tab WHERE year = 2025) b"]
    _same(merge_brackets(parts, by="region", con=con_of(loaded)), merge_brackets(parts, by="region", con=duck))


@pytest.mark.parametrize("generalized", [False, True], ids=["lorenz", "generalized"])
def test_dominance_on_the_engine_equals_duckdb(loaded, duck, generalized):
    args = ("hh", "income", "province", ("Ostrevel", "Brindlemoor"))
    got = lorenz_dominance(*args, weight="w", generalized=generalized, points=9, con=con_of(loaded))
    want = lorenz_dominance(*args, weight="w", generalized=generalized, points=9, con=duck)
    assert got.verdict == want.verdict
    if not generalized:  # Brindlemoor's is a spread of Ostrevel's distribution (Atkinson 1970, from memory)
        assert want.verdict == "Ostrevel dominates Brindlemoor"
    _same(got.table, want.table)


def test_cli_on_an_sqlite_file(tmp_path, capsys):
    import sqlite3
    path = tmp_path / "tab.db"
    lite = sqlite3.connect(path)
    bracket_table().to_sql("tab", lite, index=False)
    survey_rows().to_sql("hh", lite, index=False)
    lite.close()
    url = f"sqlite:///{path}"
    assert main(["brackets", "tab", "--by", "region", "-m", "gini", "--engine", url, "--format", "csv"]) == 0
    out = capsys.readouterr()
    got = pd.read_csv(pd.io.common.StringIO(out.out))
    want = from_brackets("tab", ["gini"], by="region", con=sqlite3.connect(path))
    assert list(got["region"]) == list(want["region"])
    assert np.allclose(got["gini"], want["gini"], rtol=1e-9)
    assert main(["dominance", "hh", "income", "--group", "province", "--groups", "Ostrevel", "Brindlemoor",
                 "--weight", "w", "--points", "9", "--engine", url, "--format", "csv"]) == 0
    out = capsys.readouterr()
    assert "A = Ostrevel, B = Brindlemoor: Ostrevel dominates Brindlemoor" in out.err
    table = pd.read_csv(pd.io.common.StringIO(out.out))
    assert len(table) == 9 and (table["difference"] > 0).all()
