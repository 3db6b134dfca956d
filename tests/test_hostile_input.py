"""Hostile input: every case of the documented input policy (docs/input-policy.md) asserts its
outcome — a defined value (from the numpy reference, ``uneven.reference``), NULL, or a clear
error — on every engine of the backend matrix (tests/engines.py). The SQL of the cases avoids
engine-specific syntax (NaN and infinity come from CAST('NaN' AS DOUBLE) and
CAST('Infinity' AS DOUBLE); SQLite reads both strings as 0.0, so infinity is the literal 9e999
there, and SQLite has no NaN at all: a NaN stored or computed is NULL). Cases on argument types
run through `uneven.query` (the engine's adapter answers the type probe); a DuckDB-only type runs there only; where an engine's documented
outcome differs (PostgreSQL raises on a double overflow), the case says so per engine."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest

import uneven
from engines import ENGINES, engine_or_skip
from uneven import reference as R
from uneven.engine.runner import translate_error
from uneven.errors import (
    ExecutionError,
    InputDataError,
    MeasureArgumentError,
    MeasureUsageError,
    SqlParseError,
    UndefinedResultError,
    UnevenError,
    UnsupportedSqlError,
)

NULL = object()  # the expected outcome "NULL"

# invented rows: group a is ordinary, b has a NULL value and weight, c a single row; `tag` marks the
# rows a case turns hostile inside its SQL
BASE = pd.DataFrame({
    "g": ["a"] * 6 + ["b"] * 4 + ["c"],
    "x": pd.array([3.0, 1.0, 4.0, 1.0, 5.0, 9.0, 2.0, None, 6.0, 5.0, 7.0], dtype="Float64"),
    "w": pd.array([1.0, 2.0, 1.0, 3.0, 1.0, 2.0, 1.0, 1.0, None, 2.0, 4.0], dtype="Float64"),
    "tag": ["", "bad", "", "", "", "", "", "", "", "", ""],
})
A_X, A_W = np.array([3.0, 1, 4, 1, 5, 9]), np.array([1.0, 2, 1, 3, 1, 2])


def hostile(expr: str) -> str:
    """A source where the row tagged 'bad' holds ``expr`` as its value x."""
    return f"(SELECT g, CASE WHEN tag = 'bad' THEN {expr} ELSE x END AS x, w, tag FROM t) s"


def hostile_w(expr: str) -> str:
    return f"(SELECT g, x, CASE WHEN tag = 'bad' THEN {expr} ELSE w END AS w, tag FROM t) s"


NAN, INF = "CAST('NaN' AS DOUBLE)", "CAST('Infinity' AS DOUBLE)"
# infinity as each engine can write it (SQLite: CAST('Infinity' AS REAL) is 0.0; 9e999 is +inf)
INF_LITERAL = {"sqlite": "9e999"}
NO_NAN = {"sqlite": "SQLite has no NaN (a NaN stored or computed is NULL, skipped like a NULL: "
                    "test_sqlite_nan_is_null)"}
# PostgreSQL raises on double overflow (float8 + and * check the range) where the others give inf
PG_OVERFLOW = {"postgres": (ExecutionError, "PostgreSQL could not run the query: value out of range: overflow")}


@dataclass
class Case:
    id: str
    sql: str
    want: object  # a number, NULL, a list of numbers/NULL (one per row), or an exception class
    match: str = ""  # for errors: text the message must contain
    data: pd.DataFrame | None = None  # default BASE
    only: tuple[str, ...] = ()  # engines the case runs on (empty: all)
    via_query: bool = False  # run through uneven.query (type probing) on the engine's connection
    per_row: bool = False  # want: one value per result row, from the last column (else one row, all columns)
    engines: dict | None = None  # engine → (want, match): that engine's documented outcome differs
    not_on: dict | None = None  # engine → why the case does not apply there

    def outcome(self, engine: str):
        return (self.engines or {}).get(engine, (self.want, self.match))

    def sql_for(self, engine: str) -> str:
        return self.sql.replace(INF, INF_LITERAL[engine]) if engine in INF_LITERAL else self.sql


# a value near the top of the double range whose group total still fits: products such as x², w·x·2C
# and (x − μ)² overflow, the measures do not (docs/input-policy.md)
HUGE = [1e308, 1.0, 2.0]


def replicate(x, w):
    return np.repeat(np.asarray(x, float), np.asarray(w, int))


CASES = [
    # ---- values --------------------------------------------------------------------------------
    Case("null-values-skipped", "SELECT gini(x) FROM t WHERE g = 'b'", R.gini([2.0, 6.0, 5.0])),
    Case("all-null-group-null", "SELECT g, gini(x) FROM t WHERE g = 'b' AND x IS NULL GROUP BY g", [NULL], per_row=True),
    Case("nan-value-error", f"SELECT g, gini(x) FROM {hostile(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)", not_on=NO_NAN),
    Case("inf-value-error", f"SELECT g, theil(x) FROM {hostile(INF)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)"),
    Case("minus-inf-value-error", f"SELECT hhi(x) FROM {hostile('-' + INF)}", InputDataError,
         "NaN or infinite value in the value argument x (the whole input)"),
    Case("nan-value-cv-error", f"SELECT g, cv(x, w) FROM {hostile(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite value", not_on=NO_NAN),
    # the linearized pass (standard errors) checks its values as every pass does (it gave NULL before)
    Case("nan-value-se-error", f"SELECT g, gini_se(x) FROM {hostile(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)", not_on=NO_NAN),
    # the ranked pass too, in the outcome and in the ranking value (it gave NULL before)
    Case("nan-value-ranked-error", f"SELECT g, concentration(x, w) FROM {hostile(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)", not_on=NO_NAN),
    Case("inf-rank-ranked-error", f"SELECT g, kakwani(w, x) FROM {hostile(INF)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)"),
    # the paired and bootstrap passes too (the difference gave NULL; the bootstrap resampled the NaN row
    # unchecked and gave a number)
    Case("nan-value-paired-error", f"SELECT g, gini_diff(w, x) FROM {hostile(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite value in the value argument x (the group g=a)", not_on=NO_NAN),
    Case("inf-value-boot-error", f"SELECT g, gini_boot_se(x, replicates := 20) FROM {hostile(INF)} GROUP BY g",
         InputDataError, "NaN or infinite value in the value argument x (the group g=a)"),
    Case("inf-value-design-se-error", f"SELECT g, theil_se(x, strata := tag) FROM {hostile(INF)} GROUP BY g",
         InputDataError, "NaN or infinite value in the value argument x (the group g=a)"),
    Case("nan-value-cr-entity-error", f"SELECT cr(x, 1, g) FROM {hostile(NAN)}", InputDataError, "NaN or infinite",
         not_on=NO_NAN),
    Case("nan-row-filtered-by-where", f"SELECT gini(x) FROM {hostile(NAN)} WHERE tag <> 'bad' AND g = 'a'",
         R.gini(np.delete(A_X, 1))),
    Case("nan-row-outside-filter", f"SELECT gini(x) FILTER (WHERE tag <> 'bad') FROM {hostile(NAN)} WHERE g = 'a'",
         R.gini(np.delete(A_X, 1))),
    Case("negative-values-gini-defined", f"SELECT gini(x) FROM {hostile('-20.0')} WHERE g = 'a'",
         R.gini(np.where(np.arange(6) == 1, -20.0, A_X))),
    Case("negative-values-share-above-one", f"SELECT top_share(x, 0.5) FROM {hostile('-20.0')} WHERE g = 'a'",
         R.top_share(np.where(np.arange(6) == 1, -20.0, A_X), 0.5)),
    Case("negative-value-theil-null", f"SELECT theil(x) FROM {hostile('-1.0')} WHERE g = 'a'", NULL),
    Case("negative-value-atkinson-null", f"SELECT atkinson(x, 0.5) FROM {hostile('-1.0')} WHERE g = 'a'", NULL),
    Case("zero-value-theil-defined", f"SELECT theil(x) FROM {hostile('0.0')} WHERE g = 'a'",
         R.theil(np.where(np.arange(6) == 1, 0.0, A_X))),
    Case("zero-value-mld-null", f"SELECT mld(x) FROM {hostile('0.0')} WHERE g = 'a'", NULL),
    Case("zero-value-ge-minus-one-null", f"SELECT ge(x, -1) FROM {hostile('0.0')} WHERE g = 'a'", NULL),
    Case("zero-value-atkinson-2-null", f"SELECT atkinson(x, 2) FROM {hostile('0.0')} WHERE g = 'a'", NULL),
    Case("zero-value-atkinson-half", f"SELECT atkinson(x, 0.5) FROM {hostile('0.0')} WHERE g = 'a'",
         R.atkinson(np.where(np.arange(6) == 1, 0.0, A_X), 0.5)),
    Case("zero-total-gini-null", "SELECT gini(x * 0) FROM t", NULL),
    Case("negative-total-gini-null", "SELECT gini(0 - x) FROM t", NULL),
    Case("zero-total-shares-null", "SELECT top_share(x * 0, 0.1), palma(x * 0) FROM t", [NULL, NULL]),
    Case("zero-bottom-share-palma-null", "SELECT palma(CASE WHEN x < 9 THEN 0 ELSE x END) FROM t", NULL),
    Case("single-row-group", "SELECT gini(x), theil(x), cv(x), quantile_w(x, 0.3), gini_corrected(x) FROM t "
         "WHERE g = 'c'", [0.0, 0.0, 0.0, 7.0, NULL]),
    Case("empty-input-one-null-row", "SELECT gini(x), theil(x), hhi(x), count(*) FROM t WHERE 1 = 0",
         [NULL, NULL, NULL, 0]),
    Case("empty-group-no-row", "SELECT g, gini(x) FROM t WHERE 1 = 0 GROUP BY g", [], per_row=True),
    Case("all-equal-values", "SELECT gini(x * 0 + 5), theil(x * 0 + 5), palma(x * 0 + 5) FROM t WHERE g = 'a'",
         [0.0, 0.0, 0.25]),
    Case("overflowing-sum-null", "SELECT gini(x * 1e307), theil(x * 1e307), cv(x * 1e307), top_share(x * 1e307, 0.5) "
         "FROM t WHERE g = 'a'", [NULL, NULL, NULL, NULL], engines=PG_OVERFLOW),
    Case("huge-value-total-fits", "SELECT gini(x), cv(x), hhi(x), hhi(x, e), cr(x, 1, e), theil(x), ge(x, 2), "
         "atkinson(x, 0.5), hoover(x), top_share(x, 0.2) FROM u",
         [R.gini(HUGE), R.cv(HUGE), R.hhi(HUGE), R.hhi(HUGE, ["p", "q", "r"]), R.cr(HUGE, 1, ["p", "q", "r"]),
          R.theil(HUGE), R.ge(HUGE, 2), R.atkinson(HUGE, 0.5), R.hoover(HUGE), R.top_share(HUGE, 0.2)],
         data=pd.DataFrame({"x": HUGE, "e": ["p", "q", "r"]}), engines=PG_OVERFLOW),
    Case("entity-total-overflow-null", "SELECT cr(x, 1, e), hhi(x, e), cr(x, 1), gini(x) FROM u",
         [NULL, NULL, NULL, NULL], data=pd.DataFrame({"x": [1e308, 1e308, 2.0], "e": ["p", "p", "r"]}),
         engines=PG_OVERFLOW),
    Case("tiny-values-defined", "SELECT gini(x * 1e-300) FROM t WHERE g = 'a'", R.gini(A_X * 1e-300)),
    # ---- weights ---------------------------------------------------------------------------------
    Case("null-weight-skipped", "SELECT gini(x, w) FROM t WHERE g = 'b'", R.gini([2.0, 5.0], [1.0, 2.0])),
    Case("zero-weight-drops-row", f"SELECT gini(x, w) FROM {hostile_w('0.0')} WHERE g = 'a'",
         R.gini(np.delete(A_X, 1), np.delete(A_W, 1))),
    Case("all-zero-weights-null", "SELECT gini(x, w * 0), theil(x, w * 0) FROM t WHERE g = 'a'", [NULL, NULL]),
    Case("negative-weight-error", f"SELECT g, gini(x, w) FROM {hostile_w('-1.0')} GROUP BY g", InputDataError,
         "negative weight in the weight argument w (the group g=a)"),
    Case("negative-weight-moment-error", f"SELECT mld(x, w) FROM {hostile_w('-1.0')}", InputDataError,
         "negative weight in the weight argument w"),
    Case("nan-weight-error", f"SELECT g, gini(x, w) FROM {hostile_w(NAN)} GROUP BY g", InputDataError,
         "NaN or infinite weight in the weight argument w (the group g=a)", not_on=NO_NAN),
    Case("inf-weight-error", f"SELECT theil(x, w) FROM {hostile_w(INF)}", InputDataError,
         "NaN or infinite weight"),
    Case("negative-weight-filtered-by-where", f"SELECT gini(x, w) FROM {hostile_w('-1.0')} WHERE tag = ''",
         None),  # filled below: reference over the rows kept
    Case("constant-weight-is-unweighted", "SELECT gini(x, 2) FROM t WHERE g = 'a'", R.gini(A_X)),
    Case("integer-weights-replicate", "SELECT gini(x, w), theil(x, w) FROM t WHERE g = 'a'",
         [R.gini(replicate(A_X, A_W)), R.theil(replicate(A_X, A_W))]),
    # ---- parameters (compile-time errors) --------------------------------------------------------
    Case("p-above-one", "SELECT lorenz(x, 1.5) FROM t", MeasureArgumentError, "p must be a fraction between 0 and 1"),
    Case("p-negative", "SELECT top_share(x, -0.1) FROM t", MeasureArgumentError, "between 0 and 1"),
    Case("p-null", "SELECT quantile_w(x, NULL) FROM t", MeasureArgumentError, "p cannot be NULL"),
    Case("p-column", "SELECT quantile_w(x, w) FROM t", MeasureArgumentError, "p must be a numeric constant"),
    Case("p-bounds-defined", "SELECT lorenz(x, 0), lorenz(x, 1), quantile_w(x, 0), quantile_w(x, 1) FROM t "
         "WHERE g = 'a'", [0.0, 1.0, 1.0, 9.0]),
    Case("eps-negative", "SELECT atkinson(x, -1) FROM t", MeasureArgumentError, "eps must be at least 0"),
    Case("alpha-division-by-zero", "SELECT ge(x, 1 / 0) FROM t", MeasureArgumentError, "alpha must be a finite number"),
    Case("k-zero", "SELECT cr(x, 0, g) FROM t", MeasureArgumentError, "k must be a whole number of at least 1"),
    Case("k-fraction", "SELECT cr(x, 2.5, g) FROM t", MeasureArgumentError, "k must be a whole number"),
    Case("k-too-large", "SELECT lorenz_curve(x, 100000) FROM t", MeasureArgumentError, "k must be at most 1000"),
    Case("too-few-arguments", "SELECT gini() FROM t", MeasureArgumentError, "gini() takes 1 or 2 arguments"),
    Case("null-weight-literal", "SELECT gini(x, NULL) FROM t", MeasureArgumentError, "the weight cannot be NULL"),
    # ---- strict mode ---------------------------------------------------------------------------
    Case("strict-names-group", f"SELECT g, theil(x, strict := true) FROM {hostile('-1.0')} GROUP BY g ORDER BY g",
         UndefinedResultError, "for the group g=a"),
    Case("strict-empty-input", "SELECT gini(x, strict := true) FROM t WHERE 1 = 0", UndefinedResultError,
         "for the whole input"),
    Case("strict-overflow", "SELECT gini(x * 1e307, strict := true) FROM t", UndefinedResultError, "undefined",
         engines=PG_OVERFLOW),
    # ---- types (the DuckDB runner probes argument types) -----------------------------------------
    Case("text-value", "SELECT gini(tag) FROM t", MeasureArgumentError, "the value tag is of type VARCHAR",
         via_query=True),
    Case("boolean-value", "SELECT gini(x > 2) FROM t", MeasureArgumentError, "is of type BOOLEAN",
         via_query=True),
    Case("date-weight", "SELECT gini(x, CAST('2024-01-02' AS DATE)) FROM t", MeasureArgumentError,
         "the weight CAST('2024-01-02' AS DATE) is of type DATE", via_query=True),
    Case("decimal-38-values", "SELECT gini(CAST(x * 1e20 AS DECIMAL(38, 4))), theil(CAST(x * 1e20 AS DECIMAL(38, 4))) "
         "FROM t WHERE g = 'a'", [R.gini(A_X * 1e20), R.theil(A_X * 1e20)]),
    Case("bigint-sum-past-int64", "SELECT gini(CAST(x AS BIGINT) * 1000000000000000000), "
         "hhi(CAST(x AS BIGINT) * 1000000000000000000) FROM t WHERE g = 'a'", [R.gini(A_X), R.hhi(A_X)]),
    Case("hugeint-values", "SELECT gini(CAST(x AS HUGEINT) * CAST('100000000000000000000000000000' AS HUGEINT)) "
         "FROM t WHERE g = 'a'", R.gini(A_X), only=("duckdb",)),
    # ---- SQL text and identifiers -----------------------------------------------------------------
    Case("quoted-identifiers", 'SELECT "gr ""p""", gini("in come", "wé ight") FROM u GROUP BY "gr ""p""" '
         'ORDER BY 1', [R.gini([1.0, 2.0, 4.0], [1.0, 1.0, 2.0])],
         per_row=True, data=pd.DataFrame({'gr "p"': ["z"] * 3, "in come": [1.0, 2.0, 4.0], "wé ight": [1.0, 1.0, 2.0]})),
    Case("reserved-word-columns", 'SELECT "select", gini("from", "group") FROM u GROUP BY "select"',
         [R.gini([1.0, 2.0, 4.0], [1.0, 1.0, 2.0])],
         per_row=True, data=pd.DataFrame({"select": ["z"] * 3, "from": [1.0, 2.0, 4.0], "group": [1.0, 1.0, 2.0]})),
    Case("column-named-like-measure", "SELECT gini(gini) AS gini FROM u ORDER BY gini", R.gini([1.0, 2.0, 4.0]),
         data=pd.DataFrame({"gini": [1.0, 2.0, 4.0]})),
    Case("injection-looking-identifier", 'SELECT gini("x); DROP TABLE u; --") FROM u', R.gini([1.0, 2.0, 4.0]),
         data=pd.DataFrame({"x); DROP TABLE u; --": [1.0, 2.0, 4.0]})),
    Case("unicode-key-literal", "SELECT gini(x) FROM t WHERE g = 'ä' OR g = 'a'", R.gini(A_X)),
    Case("multi-statement", "SELECT 1; SELECT gini(x) FROM t", UnsupportedSqlError, "expected one SQL statement"),
    Case("parse-error-position", "SELECT gini(x\nFROM t", SqlParseError, "at line 2"),
    Case("measure-in-where", "SELECT count(*) FROM t WHERE gini(x) > 0", MeasureUsageError, "cannot be used in WHERE"),
    Case("null-group-key", "SELECT k, gini(x) FROM (SELECT CASE WHEN g = 'a' THEN NULL ELSE g END AS k, x FROM t) s "
         "GROUP BY k ORDER BY k NULLS FIRST", [R.gini(A_X), R.gini([2.0, 6.0, 5.0]), R.gini([7.0])], per_row=True),
]
_kept = BASE[BASE["tag"] == ""]
_kept = _kept[_kept["x"].notna() & _kept["w"].notna()]
next(c for c in CASES if c.id == "negative-weight-filtered-by-where").want = R.gini(
    _kept["x"].to_numpy(float), _kept["w"].to_numpy(float))


def test_at_least_forty_cases():
    assert len(CASES) >= 40 and len({c.id for c in CASES}) == len(CASES)


@pytest.fixture(params=sorted(ENGINES), scope="module")
def engine(request):
    eng = engine_or_skip(request.param)
    yield eng
    eng.close()


def _is_null(v) -> bool:
    """SQL NULL as the engines return it (None; pd.NA from a nullable column). A NaN is not NULL:
    the input policy never gives NaN, so a NaN result fails every comparison."""
    return v is None or v is pd.NA


def _same(got, want) -> bool:
    if isinstance(got, float) and math.isnan(got):
        return False
    if want is NULL:
        return _is_null(got)
    if _is_null(got):
        return False
    return abs(float(got) - want) <= max(1e-9 * abs(want), 1e-12)


def _run(engine, case: Case):
    if case.via_query:  # the type probes run through the engine's adapter (engine/adapters)
        return uneven.query(case.sql, engine.spark if engine.name == "spark" and hasattr(engine, "spark") else engine.con)
    try:
        return engine.run(case.sql_for(engine.name))
    except UnevenError:
        raise
    except Exception as e:  # the engine's own error: the runner's translation (as query() does)
        raise translate_error(e, engine=engine.label) from None


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_hostile_case(engine, case):
    if case.only and engine.name not in case.only:
        pytest.skip(f"{case.id} runs on {', '.join(case.only)} only")
    if engine.name in (case.not_on or {}):
        pytest.skip(f"{case.id} does not apply on {engine.name}: {case.not_on[engine.name]}")
    engine.load(BASE if case.data is None else case.data, "t" if case.data is None else "u")
    want, match = case.outcome(engine.name)
    if isinstance(want, type) and issubclass(want, Exception):
        with pytest.raises(want) as info:
            _run(engine, case)
        assert match in str(info.value), str(info.value)
        return
    df = _run(engine, case)
    if case.per_row:
        got = list(df.iloc[:, -1])
    else:
        assert len(df) == 1, df
        got, want = list(df.iloc[0]), (want if isinstance(want, list) else [want])
    assert len(got) == len(want), (got, want)
    for g, w in zip(got, want):
        assert _same(g, w), f"{case.id}: got {got}, want {want}"
    if case.data is not None:  # source data never modified (the injection-looking name included)
        assert engine.run("SELECT count(*) AS n FROM u").iloc[0, 0] == len(case.data)


def _wide_query(n: int) -> str:
    forms = ["gini(x)", "theil(x, w)", "top_share(x, {p})", "quantile_w(x, {p}, w)", "atkinson(x, {e})", "cv(x)",
             "hhi(x, g)", "cr(x, {k}, g)", "gini(x, strict := true)"]
    items = [forms[i % len(forms)].format(p=(i % 97) / 100, e=(i % 7) / 2, k=1 + i % 5) + f" AS m{i}" for i in range(n)]
    return "SELECT g, " + ", ".join(items) + " FROM t GROUP BY g"


def test_hundreds_of_measures_compile_linearly():
    # a call written many times is one result: its wrappers (finite check, strict guard) are applied
    # once, so the compiled SQL grows linearly with the number of calls
    small, large = uneven.compile(_wide_query(40), pretty=False), uneven.compile(_wide_query(160), pretty=False)
    assert len(large) < 4.5 * len(small)
    con = __import__("duckdb").connect()
    con.register("t", BASE)
    row = con.execute(large).fetchall()
    assert len(row) == 3 and len(row[0]) == 161


def test_sqlite_nan_is_null():
    # SQLite has no NaN: Python's sqlite3 stores float('nan') as NULL (and NaN arithmetic, such as
    # inf·0, gives NULL), so a NaN row is skipped like a NULL there instead of raising the NaN error
    eng = engine_or_skip("sqlite")
    eng.con.execute("DROP TABLE IF EXISTS n")
    eng.con.execute("CREATE TABLE n (g TEXT, x REAL, w REAL)")
    eng.con.executemany("INSERT INTO n VALUES (?, ?, ?)",
                        [("a", float(v), float(w)) for v, w in zip(A_X, A_W)] + [("a", float("nan"), 1.0),
                                                                           ("a", 2.0, float("nan"))])
    assert eng.con.execute("SELECT count(*) FROM n WHERE x IS NULL OR w IS NULL").fetchone()[0] == 2
    df = eng.run("SELECT g, gini(x, w), theil(x, w) FROM n GROUP BY g")
    assert _same(df.iloc[0, 1], R.gini(A_X, A_W)) and _same(df.iloc[0, 2], R.theil(A_X, A_W)), df
    eng.close()


@pytest.mark.parametrize("name", sorted(ENGINES))
def test_engine_errors_name_the_engine(name):
    # an engine's own error (here a missing table) is reported under that engine's name
    eng = engine_or_skip(name)
    with pytest.raises(Exception) as info:
        eng.run("SELECT gini(x) FROM no_such_table_here")
    err = translate_error(info.value, engine=eng.label)
    assert isinstance(err, ExecutionError) and str(err).startswith(f"{eng.label} could not run the query: "), err


# ---- three doors, one outcome (DuckDB) ------------------------------------------------------------
# The same hostile rows go through the compiled query (uneven.query), the builder (uneven.from_) and
# the functions installed in the database (uneven.install): each must give the reference's value
# (1e-9 relative), NULL where the reference gives None, or an error where the reference refuses the
# input (NaN or infinite value or weight): never NaN, never a value where another door gives NULL.

DOOR_DATA = {
    # name: (x as SQL literals, w, e); the reference sees the same rows
    "ordinary": (["3.0", "1.0", "4.0", "1.0", "5.0", "9.0"], [1.0, 2.0, 1.0, 3.0, 1.0, 2.0], list("pqrpqs")),
    "total-fits": (["1e308", "1.0", "2.0"], [1.0, 1.0, 1.0], list("pqr")),
    "total-overflows": (["1e308", "1e308", "2.0"], [1.0, 1.0, 1.0], list("ppr")),
    "small-spread": ([repr(1234.5 * (1 + 3e-6 * k)) for k in range(8)], [1.0, 2.0] * 4, list("pqrsptuv")),
    "negative-value": (["-1.0", "1.0", "2.0"], [1.0, 1.0, 2.0], list("pqr")),
    "zero-value": (["0.0", "1.0", "2.0"], [1.0, 1.0, 2.0], list("pqr")),
    "zero-total": (["0.0", "0.0"], [1.0, 1.0], list("pq")),
    "nan-value": ([NAN, "1.0", "2.0"], [1.0, 1.0, 1.0], list("pqr")),
    "inf-value": ([INF, "1.0", "2.0"], [1.0, 1.0, 1.0], list("pqr")),
    "nan-weight": (["3.0", "1.0", "2.0"], [math.nan, 1.0, 1.0], list("pqr")),
}

# (measure, parameters, trailing argument: None, "w" or "e")
DOOR_CALLS = [("gini", (), None), ("gini", (), "w"), ("gini_corrected", (), None), ("lorenz", (0.4,), "w"),
              ("top_share", (0.2,), None), ("palma", (), None), ("quantile_w", (0.5,), "w"),
              ("generalized_lorenz", (0.5,), None), ("theil", (), None), ("theil", (), "w"), ("mld", (), "w"),
              ("ge", (2.0,), None), ("ge", (-1.0,), None), ("ge", (1.7,), "w"), ("atkinson", (0.5,), None),
              ("atkinson", (1.0,), "w"), ("atkinson", (2.0,), None), ("cv", (), None), ("cv", (), "w"),
              ("hoover", (), None), ("hhi", (), None), ("hhi", (), "e"), ("cr", (1,), "e"), ("cr", (2,), None)]


def _door_reference(name, params, trailing, data):
    xs, ws, es = data
    x = [float(v.replace("CAST('NaN' AS DOUBLE)", "nan").replace("CAST('Infinity' AS DOUBLE)", "inf")) for v in xs]
    args = [x, *params]
    if trailing == "w":
        args.append(ws)
    elif trailing == "e":
        args.append(es)
    try:
        value = R.REFERENCES[name](*args)
    except ValueError:  # the reference refuses NaN / infinite input: the doors must raise
        return Exception
    if name in ("hhi", "cr") and trailing != "w" and not all(math.isfinite(v) for v in ws):
        return value  # the weight column is not read by these calls
    if trailing != "w" and not all(math.isfinite(v) for v in ws):
        return value
    return NULL if value is None else value


def _door_call(name, params, trailing) -> str:
    args = ", ".join(["x", *(repr(float(p)) if not isinstance(p, int) else str(p) for p in params),
                      *([trailing] if trailing else [])])
    return f"{name}({args})"


def _door_outcomes(con, calls):
    """Per door, the outcome of each call in one query: a list of floats, None (NULL) or nan, or
    the exception the whole query raised."""
    texts = [_door_call(*c) for c in calls]
    out = []
    try:  # the compiled query; `IS NULL` beside each value tells NULL from NaN through pandas
        items = [f"{t} AS v{i}, {t} IS NULL AS n{i}" for i, t in enumerate(texts)]
        df = uneven.query(f"SELECT {', '.join(items)} FROM h", con)
        out.append([None if bool(df[f"n{i}"][0]) else float(df[f"v{i}"][0]) for i in range(len(texts))])
    except Exception as e:  # noqa: BLE001 (the outcome is compared, whatever it is)
        out.append(e)
    try:  # the builder, read as Arrow (NULL stays NULL)
        measures = {}
        for i, (name, params, trailing) in enumerate(calls):
            named = {"weight": "w"} if trailing == "w" else ({"entity": "e"} if trailing == "e" else {})
            measures[f"v{i}"] = getattr(uneven, name)("x", *params, **named)
        table = uneven.from_("h", con).agg(**measures).arrow()
        out.append([table.column(f"v{i}").to_pylist()[0] for i in range(len(calls))])
    except Exception as e:  # noqa: BLE001
        out.append(e)
    try:  # the installed functions
        out.append(list(con.execute(f"SELECT {', '.join(texts)} FROM h").fetchone()))
    except Exception as e:  # noqa: BLE001
        out.append(e)
    return texts, out


@pytest.fixture(scope="module")
def door_con():
    import duckdb
    con = duckdb.connect()
    uneven.install(con)
    yield con
    con.close()


@pytest.mark.parametrize("data", sorted(DOOR_DATA))
def test_three_doors_one_outcome(door_con, data):
    xs, ws, es = DOOR_DATA[data]
    rows = ", ".join(f"({x}, CAST({repr(w) if math.isfinite(w) else repr(str(w))} AS DOUBLE), '{e}')"
                     for x, w, e in zip(xs, ws, es))
    door_con.execute(f"CREATE OR REPLACE TABLE h AS SELECT * FROM (VALUES {rows}) v(x, w, e)")
    wants = [_door_reference(*c, DOOR_DATA[data]) for c in DOOR_CALLS]
    problems = []
    # calls the reference refuses (NaN or infinite input) one by one, the others in one query per door
    refused = [c for c, w in zip(DOOR_CALLS, wants) if w is Exception]
    for call in refused[:6]:
        texts, got = _door_outcomes(door_con, [call])
        for door, g in zip(("compiled", "builder", "installed"), got):
            if not (isinstance(g, Exception) and "NaN or infinite" in str(g)):
                problems.append(f"{texts[0]} {door}: got {g!r}, want an error naming NaN or infinite input")
    kept = [(c, w) for c, w in zip(DOOR_CALLS, wants) if w is not Exception]
    if kept:
        texts, got = _door_outcomes(door_con, [c for c, _ in kept])
        for door, values in zip(("compiled", "builder", "installed"), got):
            if isinstance(values, Exception):
                problems.append(f"{door}: the query raised {values!r}")
                continue
            for text, (_, want), g in zip(texts, kept, values):
                if not _same(g, want):
                    problems.append(f"{text} {door}: got {g!r}, want {'NULL' if want is NULL else want}")
    assert not problems, "\n".join(problems)
