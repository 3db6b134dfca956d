"""Golden SQL fixtures (fixtures/golden/*.sql): the compiled SQL is compared to the checked-in text,
and both the compiled query and the oracle (DuckDB grouping + numpy reference, tests/oracle.py)
are executed on the fixture data and compared number by number.

Refresh the expected text after an intended change: UNEVEN_UPDATE_GOLDEN=1 pytest tests/test_golden.py
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import duckdb
import numpy as np
import pytest

import uneven
from oracle import install_oracle, oracle_sql

ROOT = Path(__file__).resolve().parents[1]
GOLDEN = sorted((ROOT / "fixtures" / "golden").glob("*.sql"))
MARK = "-- expected:\n"


def read_fixture(path: Path) -> tuple[str, str]:
    text = path.read_text()
    head, _, expected = text.partition(MARK)
    query = "\n".join(line for line in head.splitlines() if not line.startswith("--")).strip().rstrip(";")
    return query, expected.strip()


@pytest.fixture(scope="module")
def con():
    c = duckdb.connect()
    before = os.getcwd()
    os.chdir(ROOT)  # fixtures name Parquet files relative to the project root
    c.execute("CREATE TABLE survey AS SELECT * FROM 'fixtures/data/survey.parquet'")
    c.execute("CREATE TABLE sellers AS SELECT * FROM 'fixtures/data/sellers.parquet'")
    install_oracle(c)
    yield c
    c.close()
    os.chdir(before)


@pytest.mark.parametrize("path", GOLDEN, ids=[p.stem for p in GOLDEN])
def test_golden_sql(path):
    query, expected = read_fixture(path)
    got = uneven.compile(query)
    if os.environ.get("UNEVEN_UPDATE_GOLDEN") == "1":
        head = path.read_text().partition(MARK)[0]
        path.write_text(head + MARK + got + "\n")
        return
    assert got == expected, f"compiled SQL of {path.name} changed; see the diff (refresh if intended)"


def _same(a, b) -> bool:
    if isinstance(a, np.ndarray):
        a = list(a)
    if isinstance(b, np.ndarray):
        b = list(b)
    if any(isinstance(v, float) and math.isnan(v) for v in (a, b)):
        return False  # a NaN is never a result (docs/input-policy.md), nor equal to NULL
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, (float, int, np.floating, np.integer)) and not isinstance(a, bool):
        return abs(float(a) - float(b)) <= 1e-9 * max(abs(float(b)), 1e-300) + 1e-12
    return a == b


@pytest.mark.parametrize("path", GOLDEN, ids=[p.stem for p in GOLDEN])
def test_golden_executes_like_oracle(path, con):
    query, _ = read_fixture(path)
    got = con.execute(uneven.compile(query)).fetchall()
    want = con.execute(oracle_sql(query)).fetchall()
    assert len(got) == len(want) and len(want) > 0
    if "order by" not in query.lower():
        got, want = sorted(got, key=repr), sorted(want, key=repr)
    for g, w in zip(got, want):
        assert len(g) == len(w)
        for a, b in zip(g, w):
            assert _same(a, b), f"{path.name}: compiled {g} vs oracle {w}"


def test_compiled_sql_has_no_measure_calls():
    import sqlglot

    from uneven.compiler.calls import find_calls
    for path in GOLDEN:
        tree = sqlglot.parse_one(read_fixture(path)[1], read="duckdb")
        assert not find_calls(tree), path.name


@pytest.mark.parametrize("path", GOLDEN, ids=[p.stem for p in GOLDEN])
def test_golden_emission_is_faithful_in_every_dialect(path):
    """The emitted SQL of every fixture parses back, in each dialect we write, to the tree we built
    (tests/roundtrip.py) and, in the executed dialects, holds no measure call; and its
    method="bounded" form on DuckDB. (One compile per dialect serves both checks.)"""
    import sqlglot

    from roundtrip import DIALECTS, assert_faithful
    from uneven.compiler.calls import find_calls
    from uneven.compiler.dialects import EXECUTED_DIALECTS
    query, _ = read_fixture(path)
    for dialect in DIALECTS:
        text = assert_faithful(query, dialect)
        assert not text.lstrip().startswith("--") and len(text) > len(query) // 2
        if dialect in EXECUTED_DIALECTS:  # the emitted ones: test_dialects.test_emitted_dialect_golden
            assert not find_calls(sqlglot.parse_one(text, read=dialect)), f"{path.name} ({dialect})"
    try:
        assert_faithful(query, "duckdb", method="bounded")
    except uneven.MeasureUsageError as e:  # shapes the bounded method refuses by design
        assert path.stem in BOUNDED_REFUSED and "method bounded" in str(e), str(e)


# a measure inside an expression or a window, lorenz_curve: no interval form (compiler/bounded.py)
BOUNDED_REFUSED = {"08_expressions_around_measures", "18_lorenz_curve", "20_window_over_measure"}
