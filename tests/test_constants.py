"""Constant parameters mean what the engine makes of them: casts, integer division, arithmetic and
unary minus in p, k, alpha, epsilon and level, through the three doors (compiled query, builder,
installed DuckDB functions) and on every engine of the matrix, against the numpy reference
evaluated at the parameter DuckDB computes (written below by hand, with its source).

Outside references used here:
* DuckDB facts (DuckDB docs, from memory; also common practice in SQL engines): a DECIMAL literal
  cast to an integer type or to a DECIMAL of smaller scale rounds half away from zero; ``/`` on
  integers gives a DOUBLE; ``//`` is integer division.
* PostgreSQL and SQLite facts (their docs, from memory): ``/`` on two integers truncates toward zero;
  Spark's ``/`` always gives a fraction; Spark and SQLite truncate a fraction cast to INT.
  The engines themselves confirm these in ``test_engine_reads_its_text_as_the_evaluator``.
* Exact rational arithmetic (``fractions``) for the decimal arithmetic DuckDB does exactly.
* The numpy reference (``uneven.reference``) for the measure values.
"""

from __future__ import annotations

import math
from fractions import Fraction
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
import sqlglot

import uneven
from conftest import make_groups
from engines import EngineError
from oracle import install_oracle, oracle_sql
from uneven import reference as R
from uneven.errors import MeasureArgumentError
from uneven.reference import se as RSE
from uneven.sqltree.constants import ConstantError, evaluate_constant

# ---- the evaluator on its own ------------------------------------------------------------------

VALUES = [
    # (text, read dialect, value, source)
    ("0.4", "duckdb", 0.4, "a plain literal: its digits"),
    ("-(0.25)", "duckdb", -0.25, "unary minus around parentheses"),
    ("CAST(0.5 AS INTEGER)", "duckdb", 1.0, "DuckDB: DECIMAL → INTEGER rounds half away from zero"),
    ("CAST(-0.5 AS INTEGER)", "duckdb", -1.0, "DuckDB: half away from zero, also below zero"),
    ("0.4::INT", "duckdb", 0.0, "DuckDB: rounds to the nearest integer"),
    ("CAST(0.25 AS DECIMAL(3,1))", "duckdb", 0.3, "DuckDB: DECIMAL of smaller scale rounds half away from zero"),
    ("CAST(CAST(0.55 AS DECIMAL(3,2)) AS DECIMAL(2,1))", "duckdb", 0.6, "nested casts, each rounding"),
    ("CAST(0.5 AS DOUBLE)", "duckdb", 0.5, "a cast that changes nothing"),
    ("1/2", "duckdb", 0.5, "DuckDB: / on integers gives a DOUBLE"),
    ("1//2", "duckdb", 0.0, "DuckDB: // is integer division"),
    ("7 // 2", "duckdb", 3.0, "DuckDB: // is integer division"),
    ("1/2", "postgres", 0.0, "PostgreSQL: integer / integer truncates"),
    ("-7/2", "postgres", -3.0, "PostgreSQL: truncates toward zero"),
    ("1/2 + 0.25", "postgres", 0.25, "PostgreSQL: the integer division first, then the sum"),
    ("1.0/4", "postgres", 0.25, "PostgreSQL: a numeric operand gives a fraction"),
    ("1/2", "sqlite", 0.0, "SQLite: integer / integer truncates"),
    ("1/2", "spark", 0.5, "Spark: / always gives a fraction"),
    ("CAST(0.5 AS INTEGER)", "postgres", 1.0, "PostgreSQL: numeric → integer rounds half away from zero"),
    ("CAST(0.5 AS INT)", "spark", 0.0, "Spark: a fraction cast to INT truncates"),
    ("CAST(-1.7 AS INTEGER)", "sqlite", -1.0, "SQLite: a fraction cast to INTEGER truncates toward zero"),
    ("(0.1 + 0.2) * 2", "duckdb", float((Fraction("0.1") + Fraction("0.2")) * 2),
     "exact rational arithmetic: DECIMAL sums are exact in DuckDB (Python floats would give 0.6000000000000001)"),
    ("(1 + 2) / 4", "duckdb", 0.75, "parentheses before division"),
    ("1 - 3 // 2 * 2", "duckdb", -1.0, "// and * bind tighter than -, left to right: 1 - (1 * 2)"),
    ("round(0.45, 1)", "duckdb", 0.5, "DuckDB: round of a DECIMAL goes half away from zero"),
    ("power(2, -1) + abs(-0.25)", "duckdb", 0.75, "powers and absolute values"),
    ("least(0.9, 1/4) + greatest(0, -1)", "duckdb", 0.25, "least / greatest"),
    ("sqrt(0.25) * exp(0) + ln(1)", "duckdb", 0.5, "sqrt(1/4) = 1/2, e^0 = 1, ln 1 = 0"),
]


@pytest.mark.parametrize("text,read,value,source", VALUES, ids=[f"{v[1]}:{v[0]}" for v in VALUES])
def test_evaluator_gives_the_engine_meaning(text, read, value, source):
    assert evaluate_constant(sqlglot.parse_one(text, read=read), read) == value, source


REFUSED = [
    # (text, fragment of the reason, the SQL of the offending part)
    ("x", "not the column x", "x"),
    ("random()", "random() gives a different value on each call", "RAND()"),
    ("0.1 + random()", "random() gives a different value on each call", "RAND()"),
    ("(SELECT 0.5)", "not a subquery", "(SELECT 0.5)"),
    ("sum(x)", "not an aggregate", "SUM(x)"),
    ("NULL", "cannot be NULL", "NULL"),
    ("CAST(NULL AS INTEGER)", "cannot be NULL", "CAST(NULL AS INT)"),
    ("'0.5'", "got the text '0.5'", "'0.5'"),
    ("$1", "not the query parameter", ":1"),
    ("log(2)", "the function log() is not allowed", "LOG(2)"),
    ("1/0", "must be a finite number", "1 / 0"),
    ("CAST(1e10 AS INTEGER)", "out of range", "CAST(1e10 AS INT)"),  # DuckDB's conversion error, reworded
    ("1 // 0", "Division by zero", None),
]


@pytest.mark.parametrize("text,fragment,part", REFUSED, ids=[r[0] for r in REFUSED])
def test_evaluator_refuses_what_is_not_a_constant(text, fragment, part):
    with pytest.raises(ConstantError) as info:
        evaluate_constant(sqlglot.parse_one(text, read="duckdb"))
    assert fragment in info.value.reason
    if part is not None:
        assert info.value.node.sql() == part


# ---- three doors -------------------------------------------------------------------------------

# (measure, [(parameter text, the value DuckDB gives it)], trailing column); the DuckDB facts are
# those of VALUES above (DuckDB docs, from memory)
DOORS = [
    ("top_share", [("CAST(0.5 AS INTEGER)", 1.0)], "w"),
    ("top_share", [("CAST(0.25 AS DECIMAL(3,1))", 0.3)], "w"),
    ("lorenz", [("0.4::INT", 0.0)], "w"),
    ("lorenz", [("CAST(CAST(0.55 AS DECIMAL(3,2)) AS DECIMAL(2,1))", 0.6)], "w"),
    ("bottom_share", [("1/2", 0.5)], "w"),
    ("quantile_w", [("(1 + 2) / 4", 0.75)], "w"),
    ("generalized_lorenz", [("-(-0.5) * (0.5 + 0.5)", 0.5)], "w"),
    ("ge", [("CAST(1.6 AS INTEGER)", 2.0)], "w"),
    ("ge", [("1 - 3 // 2 * 2", -1.0)], "w"),
    ("atkinson", [("CAST(0.5 AS DOUBLE) * 3", 1.5)], "w"),
    ("atkinson", [("7 // 2", 3.0)], None),
    ("cr", [("CAST(2.5 AS INTEGER)", 3.0)], "e"),  # 2.5 rounds half away from zero: k = 3
    ("percentile_ratio", [("CAST(0.95 AS DECIMAL(2,1))", 1.0), ("0.1 + 0.1", 0.2)], "w"),
]


def _call(name, params, trailing) -> str:
    return f"{name}(x, {', '.join(t for t, _ in params)}{', ' + trailing if trailing else ''})"


def _ids(cases):
    return [_call(*c) for c in cases]


def _reference(df, name, values, trailing) -> dict:
    """{group: numpy reference at the DuckDB-computed parameters}, NULL values and weights dropped."""
    out = {}
    for k, d in df.groupby("grp", dropna=False, sort=False):
        k = None if pd.isna(k) else k
        d = d[d["x"].notna()]
        x = d["x"].to_numpy(float)
        if trailing == "e":
            out[k] = R.cr(x, int(values[0]), d["e"].to_numpy())
            continue
        if trailing == "w":
            d = d[d["w"].notna()]
            x = d["x"].to_numpy(float)
        w = d["w"].to_numpy(float) if trailing == "w" else None
        out[k] = R.REFERENCES[name](x, *values, w)
    return out


def _agrees(got, want, rel=1e-9, abs_=1e-12) -> bool:
    """NULL equals NULL only; NaN is never a match."""
    if want is None:
        return got is None or got is pd.NA
    if got is None or got is pd.NA or (isinstance(got, float) and math.isnan(got)):
        return False
    return abs(float(got) - want) <= max(rel * abs(want), abs_)


def _by_group(result: pd.DataFrame, column: str = "v") -> dict:
    """{group: value} from an engine's DataFrame (object columns: NULL is None, NaN stays NaN)."""
    return {(None if k is None or k is pd.NA or k != k else k): (None if v is None or v is pd.NA else v)
            for k, v in zip(result["grp"], result[column])}


def _rows(rows) -> dict:
    """{group: value} from (grp, v) tuples as DuckDB returns them (NULL is None, NaN is NaN)."""
    return dict(rows)


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return make_groups(seed=23)


@pytest.fixture(scope="module")
def con(data):
    c = duckdb.connect()
    c.register("frame", data)
    c.execute("CREATE TABLE t AS SELECT * FROM frame")
    c.unregister("frame")
    uneven.install(c)
    yield c
    c.close()


def _builder_call(name, params, trailing):
    args = [sqlglot.parse_one(t, read="duckdb") for t, _ in params]
    named = {} if trailing is None else {("entity" if trailing == "e" else "weight"): trailing}
    return getattr(uneven, name)("x", *args, **named)


@pytest.mark.parametrize("name,params,trailing", DOORS, ids=_ids(DOORS))
def test_three_doors_agree_at_the_engine_value(con, data, name, params, trailing):
    want = _reference(data, name, [v for _, v in params], trailing)
    call = _call(name, params, trailing)
    sql = f"SELECT grp, {call} AS v FROM t GROUP BY grp"
    compiled = _rows(con.execute(uneven.compile(sql)).fetchall())
    built = uneven.from_("t", con=con).group_by("grp").agg(v=_builder_call(name, params, trailing)).arrow()
    built = _rows(zip(built.column("grp").to_pylist(), built.column("v").to_pylist()))
    installed = _rows(con.execute(sql).fetchall())
    for door, got in (("compiled", compiled), ("builder", built), ("installed", installed)):
        assert set(got) == set(want), door
        for k in want:
            assert _agrees(got[k], want[k]), f"{door} {call} group {k}: {got[k]} vs reference {want[k]}"


@pytest.mark.parametrize("dialect", ["duckdb", "postgres", "spark", "sqlite", "trino", "bigquery", "snowflake"])
@pytest.mark.parametrize("name,params,trailing", DOORS, ids=_ids(DOORS))
def test_compiled_sql_carries_the_evaluated_value(dialect, name, params, trailing):
    # the SQL for every engine is that of the plain number DuckDB computes: all engines agree with it
    plain = [(repr(v), v) for _, v in params]
    assert uneven.compile(f"SELECT {_call(name, params, trailing)} AS v FROM t", dialect=dialect) == \
        uneven.compile(f"SELECT {_call(name, plain, trailing)} AS v FROM t", dialect=dialect)


@pytest.mark.parametrize("read,value", [("duckdb", 0.75), ("postgres", 0.25), ("sqlite", 0.25), ("spark", 0.75)])
def test_the_read_dialect_decides_integer_division(read, value):
    # 1/2 is 0.5 in DuckDB and Spark, 0 in PostgreSQL and SQLite (facts listed in the module doc)
    assert uneven.compile("SELECT top_share(x, 1/2 + 0.25) AS v FROM t", read=read) == \
        uneven.compile(f"SELECT top_share(x, {value!r}) AS v FROM t")


# ---- refusals, with position -------------------------------------------------------------------

# (parameter text, fragment of the message, column of the offending part in the query below);
# the installed functions refuse the same inputs with DuckDB's own errors
REFUSALS = [
    ("grp", "p must be a numeric constant, not the column grp", 16),
    ("(SELECT 0.5)", "p must be a numeric constant, not a subquery", 24),  # the first token positioned in it
    ("NULL", "p cannot be NULL", 3),  # sqlglot keeps no position for NULL: the call's is given
    ("CAST(NULL AS DOUBLE)", "p cannot be NULL", 3),
    ("0.25 + CAST(1e10 AS INTEGER)", "p could not be evaluated", 16),
    ("2 * 0.75", "p must be a fraction between 0 and 1, got 1.5 (the value of 2 * 0.75)", 3),
]


@pytest.mark.parametrize("param,fragment,column", REFUSALS, ids=[r[0] for r in REFUSALS])
def test_refusals_are_the_same_at_every_door(con, param, fragment, column):
    sql = f"SELECT grp,\n  top_share(x, {param}, w) AS v FROM t GROUP BY grp"
    with pytest.raises(MeasureArgumentError) as info:
        uneven.compile(sql)
    assert fragment in str(info.value)
    assert (info.value.line, info.value.column) == (2, column)
    with pytest.raises(MeasureArgumentError) as built:
        uneven.top_share("x", sqlglot.parse_one(param, read="duckdb"), weight="w")
    assert fragment.split(" (the value")[0] in str(built.value)
    with pytest.raises(duckdb.Error):
        con.execute(sql).fetchall()


def test_random_is_refused_with_its_position():
    sql = "SELECT grp,\n  ge(x, 1 + random(), w) FROM t GROUP BY grp"
    with pytest.raises(MeasureArgumentError) as info:
        uneven.compile(sql)
    assert "ge(): alpha must be a numeric constant; random() gives a different value on each call" in str(info.value)
    assert (info.value.line, info.value.column) == (2, 13)
    with pytest.raises(MeasureArgumentError, match="random"):
        uneven.ge("x", sqlglot.parse_one("1 + random()"), weight="w")


def test_cr_count_is_checked_on_the_evaluated_value():
    # CAST(0.4 AS INTEGER) is 0 in DuckDB: not a count of at least 1
    with pytest.raises(MeasureArgumentError, match="k must be a whole number of at least 1"):
        uneven.compile("SELECT cr(x, CAST(0.4 AS INTEGER)) FROM t")
    # 1.5 is no whole number, but CAST(1.5 AS INTEGER) is 2 (half away from zero)
    assert uneven.compile("SELECT cr(x, CAST(1.5 AS INTEGER)) AS v FROM t") == \
        uneven.compile("SELECT cr(x, 2) AS v FROM t")


# ---- named options: level, replicates, seed ----------------------------------------------------

def test_level_is_evaluated(con, data):
    # CAST(0.85 AS DECIMAL(2,1)) is 0.9 in DuckDB (half away from zero); the interval is the
    # reference's (reference.se.ci: estimate − z·SE from the published linearization)
    sql = "SELECT grp, gini_ci_lo(x, w, level := CAST(0.85 AS DECIMAL(2,1))) AS v FROM t GROUP BY grp"
    assert uneven.compile(sql) == uneven.compile(sql.replace("CAST(0.85 AS DECIMAL(2,1))", "0.9"))
    got = _rows(con.execute(uneven.compile(sql)).fetchall())
    for k, d in data.groupby("grp", dropna=False):
        d = d[d["x"].notna() & d["w"].notna() & (d["w"] > 0)]  # rows of weight 0 are dropped (the contract)
        want = RSE.ci("gini", d["x"].to_numpy(float), (), d["w"].to_numpy(float), level=0.9)[0]
        assert _agrees(got[None if pd.isna(k) else k], want), (k, got, want)
    with pytest.raises(MeasureArgumentError, match="level must be a number strictly between 0 and 1"):
        uneven.compile("SELECT gini_ci_lo(x, w, level := CAST(0.95 AS INTEGER)) FROM t")  # 0.95 → 1
    with pytest.raises(MeasureArgumentError, match="level must be a numeric constant, not the column w"):
        uneven.compile("SELECT gini_ci_lo(x, w, level := w) FROM t")


def test_bootstrap_counts_are_evaluated():
    same = "SELECT gini_boot_se(x, w, replicates := 20, seed := 2) AS v FROM t"
    assert uneven.compile("SELECT gini_boot_se(x, w, replicates := CAST(20.4 AS INTEGER), seed := 1 + 1) AS v "
                          "FROM t") == uneven.compile(same)
    with pytest.raises(MeasureArgumentError, match="seed must be a numeric constant; random"):
        uneven.compile("SELECT gini_boot_se(x, w, seed := random()) FROM t")


# ---- the oracle evaluates parameters through DuckDB, not through compiler code ------------------

def test_oracle_imports_no_compiler_code():
    source = (Path(__file__).parent / "oracle.py").read_text()
    assert "uneven.compiler" not in source and "sqltree" not in source


def test_oracle_reads_casts_like_duckdb(con, data):
    install_oracle(con)
    sql = "SELECT grp, top_share(x, CAST(0.25 AS DECIMAL(3,1)), w) AS v FROM t GROUP BY grp"
    got = _rows(con.execute(oracle_sql(sql)).fetchall())
    want = _reference(data, "top_share", [0.3], "w")
    assert all(_agrees(got[k], want[k]) for k in want)


# ---- user-defined measures: constants in the result text ---------------------------------------

def test_user_measure_constants_follow_duckdb(con, data):
    from uneven.catalog.user import define_measure, remove_measure
    define_measure("inner_tenth", result="lorenz(CAST(0.25 AS DECIMAL(3,1))) - lorenz(1/5)",
                   reference=lambda x, w=None: R.lorenz(x, 0.3, w) - R.lorenz(x, 0.2, w), replace=True)
    try:
        got = _rows(con.execute(uneven.compile("SELECT grp, inner_tenth(x, w) AS v FROM t GROUP BY grp")).fetchall())
        for k, d in data.groupby("grp", dropna=False):
            d = d[d["x"].notna() & d["w"].notna()]
            x, w = d["x"].to_numpy(float), d["w"].to_numpy(float)
            assert _agrees(got[None if pd.isna(k) else k], R.lorenz(x, 0.3, w) - R.lorenz(x, 0.2, w))
    finally:
        remove_measure("inner_tenth")


# ---- every engine of the matrix ----------------------------------------------------------------

ENGINE_CASES = [c for c in DOORS if c[0] in ("top_share", "lorenz", "ge", "cr", "percentile_ratio")]


def _run(engine, sql: str) -> pd.DataFrame:
    """The compiled query's rows on the engine, NULL as None and NaN as NaN (DuckDB's DataFrames
    would turn NULL into NaN, so its rows are fetched as tuples)."""
    if engine.name == "duckdb":
        cur = engine.con.execute(uneven.compile(sql))
        return pd.DataFrame(cur.fetchall(), columns=[d[0] for d in cur.description], dtype=object)
    return engine.run(sql)


def test_key_cases_on_every_engine(engine, data):
    # one batched query per engine (Spark queries cost seconds); the SQL is compiled for the engine
    engine.load(data)
    cols = ", ".join(f"{_call(*c)} AS c{i}" for i, c in enumerate(ENGINE_CASES))
    got = _run(engine, f"SELECT grp, {cols} FROM t GROUP BY grp")
    for i, (name, params, trailing) in enumerate(ENGINE_CASES):
        want = _reference(data, name, [v for _, v in params], trailing)
        have = _by_group(got, f"c{i}")
        assert set(have) == set(want)
        for k in want:
            assert _agrees(have[k], want[k]), f"{engine.name}: {_call(name, params, trailing)} group {k}"


def test_a_refused_parameter_is_refused_for_every_engine(engine):
    with pytest.raises(MeasureArgumentError, match="not the column w"):
        uneven.compile("SELECT top_share(x, w) FROM t", dialect=engine.dialect)


# expressions written in an engine's own dialect; the engine evaluates them and the evaluator,
# reading the same text in that dialect, must say the same (the engine is the outside reference)
ENGINE_TEXTS = ["1/2", "7/2", "-7/2", "(1 + 2) * 3 / 4", "1.0/4", "CAST(0.5 AS INTEGER)", "CAST(1.5 AS INTEGER)",
                "CAST(-1.5 AS INTEGER)", "CAST(0.25 AS DECIMAL(3,1))", "abs(-3)/2", "2 - -1", "5 % 3"]


def test_engine_reads_its_text_as_the_evaluator(engine):
    exprs = [sqlglot.parse_one(t, read=engine.dialect) for t in ENGINE_TEXTS]
    select = sqlglot.select(*[sqlglot.exp.cast(sqlglot.exp.Paren(this=e.copy()), "double").as_(f"c{i}")
                              for i, e in enumerate(exprs)])
    try:
        row = engine.execute(select.sql(engine.dialect)).iloc[0]
    except EngineError as e:  # pragma: no cover - a failure here is a finding, shown whole
        pytest.fail(f"{engine.name} could not evaluate the constants: {e}")
    for i, (text, e) in enumerate(zip(ENGINE_TEXTS, exprs)):
        assert float(row[f"c{i}"]) == evaluate_constant(e, engine.dialect), f"{engine.name}: {text}"


def test_constant_evaluation_is_thread_safe():
    from concurrent.futures import ThreadPoolExecutor
    texts = [f"CAST({i}.5 AS INTEGER) / 1000" for i in range(200)]
    with ThreadPoolExecutor(4) as pool:
        got = list(pool.map(lambda t: evaluate_constant(sqlglot.parse_one(t)), texts))
    # DuckDB: i.5 rounds half away from zero to i + 1; then a DOUBLE division
    assert got == [(i + 1) / 1000 for i in range(200)]
    assert np.isfinite(got).all()
