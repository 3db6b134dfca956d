"""The table functions on every engine of the matrix (tests/engines.py): decompose, gini_sources,
influence and compare (paired, two groups with a design SE, two groups with independent SEs) take
``con=`` any connection ``query`` takes, compile their SQL for that engine and must give what
DuckDB gives, to 1e-9 (the contract's tolerance). The DuckDB results themselves are checked against
the numpy reference and closed forms in test_structure.py, test_influence_moment.py and
test_compare_groups.py; here one value of each table is also checked against the reference
directly, so a wrong number on every engine alike cannot pass."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import pytest

from uneven import reference as R
from uneven.errors import UnsupportedSqlError
from uneven.tables.compare import compare
from uneven.tables.decompose import decompose, gini_sources
from uneven.tables.influence import influence


def households() -> pd.DataFrame:
    """Invented survey rows of a fictional country: two provinces, three districts, wage and transfer
    income, survey weights, strata and PSUs; ties, a zero weight and NULLs included."""
    rng = np.random.default_rng(404)
    n = 480
    wage = np.round(rng.lognormal(9.6, 0.8, n), 0)
    wage[rng.random(n) < 0.1] = 12000.0  # ties
    transfer = np.round(rng.gamma(2.0, 900.0, n), 0)
    df = pd.DataFrame({
        "province": np.where(np.arange(n) < 260, "Vellmark", "Osterbay"),
        "district": rng.choice(["north", "coast", "hills"], n),
        "wage": wage, "transfer": transfer, "income": wage + transfer,
        "w": rng.choice([0.5, 1.0, 1.5, 4.0], n), "stratum": rng.integers(1, 4, n), "psu": rng.integers(1, 25, n)})
    df.loc[5, "w"] = 0.0
    for col in ("wage", "income", "w"):
        df[col] = df[col].astype("Float64")
    df.loc[7, "income"] = pd.NA
    df.loc[9, "w"] = pd.NA
    return df


@pytest.fixture(scope="module")
def loaded(engine):
    engine.load(households(), "hh")
    return engine


@pytest.fixture(scope="module")
def duck():
    con = duckdb.connect()
    con.register("_f", households())
    con.execute("CREATE TABLE hh AS SELECT * FROM _f")
    con.unregister("_f")
    yield con
    con.close()


def con_of(engine):
    return engine.spark if engine.name == "spark" else engine.con


def _sorted(df: pd.DataFrame) -> pd.DataFrame:
    keys = [c for c in df.columns if not pd.api.types.is_numeric_dtype(df[c]) and not df[c].map(
        lambda v: isinstance(v, (int, float))).all()]
    return df.sort_values(keys, kind="stable", na_position="last").reset_index(drop=True) if keys else df


def same(a: pd.DataFrame, b: pd.DataFrame, rel=1e-9):
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b)
    a, b = _sorted(a), _sorted(b)
    for col in a.columns:
        for u, v in zip(a[col], b[col]):
            if pd.isna(u) or pd.isna(v):
                assert pd.isna(u) and pd.isna(v), (col, u, v)
            elif isinstance(u, str) or isinstance(v, str):
                assert str(u) == str(v), (col, u, v)
            else:
                assert float(u) == pytest.approx(float(v), rel=rel, abs=1e-12), (col, u, v)


def rows_of(province: str):
    d = households()
    d = d[(d["province"] == province) & d["income"].notna() & d["w"].notna() & (d["w"] > 0)]
    return d


@pytest.mark.parametrize("alpha", [0.0, 1.0, 2.0])
def test_decompose(loaded, duck, alpha):
    args = dict(alpha=alpha, weight="w", by="province")
    got = decompose("hh", "income", "district", con=con_of(loaded), **args)
    same(got, decompose("hh", "income", "district", con=duck, **args))
    # outside check: the total row is GE(α) of the province's rows (numpy reference)
    d = rows_of("Vellmark")
    total = got[(got["province"] == "Vellmark") & (got["component"] == "total")]["ge_term"].iloc[0]
    assert float(total) == pytest.approx(R.ge(d["income"].to_numpy(float), alpha, d["w"].to_numpy(float)), rel=1e-9)


def test_gini_sources(loaded, duck):
    got = gini_sources("hh", ["wage", "transfer"], weight="w", by="province", con=con_of(loaded))
    same(got, gini_sources("hh", ["wage", "transfer"], weight="w", by="province", con=duck))
    d = households()
    d = d[(d["province"] == "Osterbay") & d["wage"].notna() & d["w"].notna()]
    total = got[(got["province"] == "Osterbay") & (got["source"] == "total")]["own_gini"].iloc[0]
    want = R.gini((d["wage"] + d["transfer"]).to_numpy(float), d["w"].to_numpy(float))
    assert float(total) == pytest.approx(want, rel=1e-9)


@pytest.mark.parametrize("measure, params", [("gini", ()), ("theil", ()), ("mld", ()), ("top_share", (0.1,))])
def test_influence(loaded, duck, measure, params):
    args = dict(weight="w", by="province", k=2, measure=measure, params=params)
    if loaded.name == "spark":  # the top-k form numbers rows, which Spark may redo per read: refused by name
        with pytest.raises(UnsupportedSqlError, match="cannot run on Spark"):
            influence("hh", "income", con=con_of(loaded), **args)
        args["k"] = 0
    got = influence("hh", "income", con=con_of(loaded), **args)
    same(got, influence("hh", "income", con=duck, **args))
    d = rows_of("Vellmark")
    x, w = d["income"].to_numpy(float), d["w"].to_numpy(float)
    ref = getattr(R, measure)
    row = got[got["province"] == "Vellmark"].iloc[0]
    assert float(row[measure]) == pytest.approx(ref(x, *params, w), rel=1e-9)
    if measure != "top_share":  # exact leave-one-out: the reference without the row the table names
        drop = np.flatnonzero((x == float(row["top_row_value"])) & (w == float(row["top_row_weight"])))[0]
        keep = np.arange(len(x)) != drop
        assert float(row[f"{measure}_without_top_row"]) == pytest.approx(ref(x[keep], w[keep]), rel=1e-9)
    if args["k"] == 0:
        return
    # without the largest row (by value, then weight): the reference on the rest
    top = np.lexsort((-w, -x))[0]
    rest = np.ones(len(x), bool)
    rest[top] = False
    assert float(row[f"{measure}_without_top_1"]) == pytest.approx(ref(x[rest], *params, w[rest]), rel=1e-9)


def test_compare_paired_and_two_groups(loaded, duck):
    c = con_of(loaded)
    same(compare("hh", "income", "wage", weight="w", by="province", con=c),
         compare("hh", "income", "wage", weight="w", by="province", con=duck))
    design = dict(group="district", groups=("north", "coast"), weight="w", strata="stratum", psu="psu", by="province")
    same(compare("hh", "income", con=c, **design), compare("hh", "income", con=duck, **design))
    simple = dict(group="district", groups=("north", "coast"), weight="w")  # no PSU: each row its own
    same(compare("hh", "income", con=c, **simple), compare("hh", "income", con=duck, **simple))
    indep = dict(group="district", groups=("north", "hills"), measure="theil", se="independent", weight="w")
    got = compare("hh", "income", con=c, **indep)
    same(got, compare("hh", "income", con=duck, **indep))
    d = households()
    d = d[(d["district"] == "north") & d["income"].notna() & d["w"].notna()]
    assert float(got["theil_1"].iloc[0]) == pytest.approx(R.theil(d["income"].to_numpy(float), d["w"].to_numpy(float)),
                                                          rel=1e-9)


def _engine_url(engine, tmp_path, monkeypatch) -> str:
    if engine.name == "sqlite":
        import sqlite3
        path = tmp_path / "hh.db"
        lite = sqlite3.connect(path)
        households().astype({"wage": float, "income": float, "w": float}).to_sql("hh", lite, index=False)
        lite.close()
        return f"sqlite:///{path}"
    if engine.name == "duckdb":
        path = tmp_path / "hh.duckdb"
        con = duckdb.connect(str(path))
        con.register("_f", households())
        con.execute("CREATE TABLE hh AS SELECT * FROM _f")
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
    return "spark:local[2]"  # the matrix's session (one per process) is found, with its tables


def test_cli_engine_url(loaded, duck, tmp_path, monkeypatch, capsys):
    from uneven.cli.main import main
    url = _engine_url(loaded, tmp_path, monkeypatch)

    def table(argv) -> pd.DataFrame:
        assert main(argv + ["--engine", url, "--format", "csv"]) == 0, capsys.readouterr().err
        return pd.read_csv(pd.io.common.StringIO(capsys.readouterr().out))

    def close_to(got: pd.DataFrame, want: pd.DataFrame):  # the CSV keeps 17 significant digits or fewer
        assert list(got.columns) == list(want.columns)
        got, want = _sorted(got), _sorted(want)  # groups come in the engine's order
        for col in want.columns:
            if pd.api.types.is_numeric_dtype(got[col]):
                assert np.allclose(got[col].astype(float), want[col].astype(float), rtol=1e-9, equal_nan=True), col

    close_to(table(["decompose", "hh", "--value", "income", "--subgroup", "district", "--alpha", "1", "--weight", "w",
                    "--by", "province"]),
             decompose("hh", "income", "district", alpha=1, weight="w", by="province", con=duck))
    close_to(table(["sources", "hh", "wage", "transfer", "--weight", "w", "--by", "province"]),
             gini_sources("hh", ["wage", "transfer"], weight="w", by="province", con=duck))
    close_to(table(["compare", "hh", "income", "--group", "district", "--groups", "north", "coast", "--weight", "w",
                    "--strata", "stratum", "--psu", "psu"]),
             compare("hh", "income", group="district", groups=("north", "coast"), weight="w", strata="stratum",
                     psu="psu", con=duck))
    k = "0" if loaded.name == "spark" else "2"
    close_to(table(["influence", "hh", "--value", "income", "--weight", "w", "--by", "province", "-k", k]),
             influence("hh", "income", weight="w", by="province", k=int(k), con=duck))
    if loaded.name == "spark":  # a clear refusal naming the engine, never a traceback
        assert main(["influence", "hh", "--value", "income", "-k", "2", "--engine", url]) != 0
        assert "cannot run on Spark" in capsys.readouterr().err
