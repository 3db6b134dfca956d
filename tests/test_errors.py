"""Bad queries get an UnevenError subclass naming the function, with line and column."""

from __future__ import annotations

import duckdb
import pytest

import uneven
from uneven.errors import (
    ExecutionError,
    InputDataError,
    MeasureArgumentError,
    MeasureUsageError,
    SqlParseError,
    UndefinedResultError,
    UnsupportedSqlError,
)


@pytest.mark.parametrize("sql,cls,fragment,line,col", [
    ("SELECT a FROM t WHERE gini(x) > 0.3", MeasureUsageError, "gini() cannot be used in WHERE", 1, 23),
    ("SELECT gini(x) OVER (PARTITION BY g) FROM t", MeasureUsageError, "window function", 1, 8),
    ("SELECT gini(theil(x)) FROM t", MeasureUsageError, "theil() cannot be nested inside gini()", 1, 13),
    ("SELECT avg(gini(x)) FROM t", MeasureUsageError, "cannot be nested inside avg()", 1, 12),
    ("SELECT gini(avg(x)) FROM t", MeasureUsageError, "row-level expression", 1, 8),
    ("SELECT g FROM t GROUP BY g, gini(x)", MeasureUsageError, "GROUP BY", 1, 29),
    ("SELECT gini() FROM t", MeasureArgumentError, "gini() takes 1 or 2 arguments", 1, 8),
    ("SELECT gini(x, w, z) FROM t", MeasureArgumentError, "gini() takes 1 or 2 arguments", 1, 8),
    ("SELECT top_share(x) FROM t", MeasureArgumentError, "top_share() takes 2 or 3 arguments", 1, 8),
    # the position is that of the offending argument (the column p), not of the call
    ("SELECT top_share(x, p) FROM t", MeasureArgumentError, "p must be a numeric constant", 1, 21),
    ("SELECT top_share(x, 1.5) FROM t", MeasureArgumentError, "between 0 and 1", 1, 8),
    ("SELECT atkinson(x, -1) FROM t", MeasureArgumentError, "eps must be at least 0", 1, 8),
    ("SELECT cr(x, 2.5) FROM t", MeasureArgumentError, "k must be a whole number", 1, 8),
    ("SELECT lorenz_curve(x, 5000) FROM t", MeasureArgumentError, "at most 1000", 1, 8),
    ("SELECT gini(DISTINCT x) FROM t", MeasureArgumentError, "does not take DISTINCT", 1, 8),
    ("SELECT gini(x ORDER BY y) FROM t", MeasureArgumentError, "does not take ORDER BY", 1, 8),
    ("SELECT gini(x) FILTER (WHERE avg(y) > 1) FROM t", MeasureUsageError, "FILTER condition", 1, 8),
    ("SELECT gini(x) FILTER (WHERE y > 1) OVER () FROM t", MeasureUsageError, "window function", 1, 8),
    ("SELECT mld(x, strict := 1) FROM t", MeasureArgumentError, "strict must be true or false", 1, 8),
    ("SELECT gini(x, strata := h) FROM t", MeasureArgumentError, "unknown named argument 'strata'", 1, 8),
    ("SELECT g, gini(x) FROM t GROUP BY ROLLUP (g)", UnsupportedSqlError, "ROLLUP", None, None),
    ("SELECT *, gini(x) FROM t", UnsupportedSqlError, "SELECT *", None, None),
    ("SELECT g, h, gini(x) FROM t GROUP BY g", UnsupportedSqlError, "column h must appear in GROUP BY", None, None),
    ("SELECT g FROM o WHERE o.v > (SELECT gini(x) FROM t WHERE t.g = o.g)", MeasureUsageError,
     "correlated subquery", 1, 37),
    ("SELECT gini(x FROM t", SqlParseError, "could not parse", 1, None),
    ("SELECT 1; SELECT 2", UnsupportedSqlError, "one SQL statement", None, None),
    ("   ", SqlParseError, "empty", None, None),
])
def test_compile_errors(sql, cls, fragment, line, col):
    with pytest.raises(cls) as info:
        uneven.compile(sql)
    err = info.value
    assert fragment in str(err)
    assert isinstance(err, uneven.UnevenError)
    if line is not None:
        assert err.line == line
    if col is not None:
        assert err.column == col


def test_error_shows_snippet_with_caret():
    sql = "SELECT region,\n       gini(income, w, extra)\nFROM t GROUP BY region"
    with pytest.raises(MeasureArgumentError) as info:
        uneven.compile(sql)
    text = str(info.value)
    assert info.value.line == 2 and info.value.column == 8
    assert "gini(income, w, extra)" in text
    assert "       ^^^^" in text
    assert info.value.function == "gini"


def test_unknown_dialect_lists_supported():
    with pytest.raises(uneven.UnevenError, match="supported: duckdb"):
        uneven.compile("SELECT gini(x) FROM t", dialect="nosuchsql")


def test_negative_weight_is_an_input_error():
    with pytest.raises(InputDataError, match="negative weight"):
        uneven.query("SELECT gini(x, w) FROM (VALUES (1.0, 1.0), (2.0, -1.0)) t(x, w)")
    with pytest.raises(InputDataError, match="negative weight"):
        uneven.query("SELECT theil(x, w) FROM (VALUES (1.0, 1.0), (2.0, -1.0)) t(x, w)")


def test_text_value_is_refused_before_running():
    # query() asks DuckDB for the argument types first (compiler/types.py)
    with pytest.raises(MeasureArgumentError, match="the value x is of type VARCHAR, not a number"):
        uneven.query("SELECT gini(x) FROM (VALUES ('a'), ('b')) t(x)")


def test_text_value_with_compile_alone_fails_in_the_engine():
    # compile() cannot see types: the engine's CAST refuses text that is not a number
    with pytest.raises(duckdb.ConversionException):
        duckdb.sql(uneven.compile("SELECT gini(x) FROM (VALUES ('a'), ('b')) t(x)")).fetchall()


def test_missing_table_is_an_execution_error():
    with pytest.raises(ExecutionError, match="no_such_table"):
        uneven.query("SELECT gini(x) FROM no_such_table")


def test_bad_setting_is_reported():
    with pytest.raises(ExecutionError, match="memory_limit"):
        uneven.query("SELECT gini(x) FROM (VALUES (1.0)) t(x)", memory_limit="lots")
    with pytest.raises(ExecutionError, match="threads"):
        uneven.query("SELECT gini(x) FROM (VALUES (1.0)) t(x)", threads=0)


def test_measure_names_as_column_names_are_fine():
    df = uneven.query("SELECT gini(gini) AS gini FROM (VALUES (1.0), (3.0)) t(gini)")
    # two values 1 and 3: Σ|xi−xj| over ordered pairs = 4, 2·n²·μ = 2·4·2 = 16 → 0.25 (pairwise definition)
    assert df["gini"][0] == pytest.approx(0.25, rel=1e-12)



STRICT_DATA = "(VALUES ('a', 1.0), ('a', 0.0), ('b', 2.0), ('b', 4.0), (NULL, -1.0)) t(g, x)"


def test_strict_call_names_the_group():
    # mld needs x > 0 (DESIGN domain rule): group 'a' holds a zero
    with pytest.raises(UndefinedResultError, match=r"mld\(x, strict := TRUE\) is undefined \(NULL\) for the group g=a"):
        uneven.query(f"SELECT g, mld(x, strict := true) FROM {STRICT_DATA} WHERE g IS NOT NULL GROUP BY g")
    # gini needs T > 0: the NULL group sums to −1
    with pytest.raises(UndefinedResultError, match="for the group g=NULL"):
        uneven.query(f"SELECT g, gini(x) FROM {STRICT_DATA} GROUP BY g", strict=True)


def test_strict_passes_defined_groups_and_can_be_turned_off_per_call():
    df = uneven.query(f"SELECT g, mld(x) AS m FROM {STRICT_DATA} WHERE g = 'b' GROUP BY g", strict=True)
    # (2, 4): μ = 3, MLD = ln 3 − (ln 2 + ln 4)/2 (definition)
    import math
    assert df["m"][0] == pytest.approx(math.log(3) - (math.log(2) + math.log(4)) / 2, rel=1e-12)
    df = uneven.query(f"SELECT g, mld(x, strict := false) AS m FROM {STRICT_DATA} GROUP BY g ORDER BY g",
                       strict=True)
    assert df["m"].isna().tolist() == [True, False, True]
    with pytest.raises(UndefinedResultError, match="the whole input"):
        uneven.query("SELECT theil(x) FROM (VALUES (-1.0), (2.0)) t(x)", strict=True)
