"""Query shapes drawn from the expression grammar (tests/grammar.py), compiled for each engine of
the matrix, run there, and compared with the oracle (tests/oracle.py: DuckDB selects, joins and
groups the rows, the numpy reference computes each measure; it shares no compiler code path).

The tables: the survey fixture, ``rough`` (invented hostile rows with the same columns: NULL keys,
values and weights, ties, zeros, zero weights, negative values, magnitudes 1e-9 to 1e12) and the
small dimension table ``dim``; every engine loads the same frames, and the expected values for
every engine come from the oracle on DuckDB.

Comparison (``same_value``): NULL equals only NULL, NaN only NaN; numbers agree to 1e-9 relative
(the contract's tolerance), or 1e-12 absolute (``NEAR_ZERO``: an exact zero such as the Gini of
equal values may come out as 1e-17; every measure here lives on a scale of 1 or more, HHI 10,000).
Integers, text and booleans compare exactly (a boolean equals 1/0, SQLite's booleans).

CI: 300 shapes on DuckDB and on SQLite, 40 on PostgreSQL and 15 on Spark (each Spark query takes
seconds). On demand: ``pytest -m slow tests/test_query_shapes.py`` runs UNEVEN_SHAPES (default
20,000) shapes from seed UNEVEN_SEED (default 1) on DuckDB; UNEVEN_SHAPE_ENGINES=sqlite,postgres
adds engines to that run, and UNEVEN_EMISSION_EVERY=4 checks the emission invariant on every 4th shape
only (the oracle comparison still runs on every shape). A mismatch lists the case number, the seed
and the query; one found becomes a golden fixture.

Every query is compiled through ``compile_faithful``: the compiled text, parsed back with its
dialect, must give the tree the compiler built (the emission invariant).
"""

from __future__ import annotations

import math
import os
import random
import time
from decimal import Decimal

import duckdb
import pytest

import uneven
from engines import engine_or_skip
from grammar import ENGINE_FEATURES, Grammar, fuzz_tables
from oracle import install_oracle, oracle_sql

CI_COUNTS = {"duckdb": 300, "sqlite": 300, "postgres": 40, "spark": 15}  # a Spark query takes seconds
CI_SEED = 20261203
CI_MAX_MEASURES = 2  # compiling costs ~0.1 s per measure call; the slow run draws up to 3
REL = 1e-9  # the contract's relative tolerance
NEAR_ZERO = 1e-12  # absolute floor for an expected exact zero (e.g. Gini of equal values: 0 vs 1e-17)
WIDE_PARAMS = os.environ.get("UNEVEN_WIDE_PARAMS", "1") == "1"  # casts, integer division (0 turns off)
SE_MEASURES = os.environ.get("UNEVEN_FUZZ_SE") == "1"  # standard errors too (not exact: see the report)
# the emission invariant on every Nth shape of a long run (1: every shape, as CI does); the oracle
# comparison runs on every shape whatever N is
EMISSION_EVERY = int(os.environ.get("UNEVEN_EMISSION_EVERY", "1"))
# rows per Arrow batch of the stream plan in a long run (e.g. 3: batches cut groups and runs of ties
# anywhere), and UNEVEN_STREAM_SLICES=0 to search every batch's cuts on complex keys (engine/streamcuts.py)
STREAM_BATCH = int(os.environ.get("UNEVEN_STREAM_BATCH", "0")) or None
STREAM_SLICES = os.environ.get("UNEVEN_STREAM_SLICES")


def compile_faithful(sql: str, dialect: str, **options) -> str:
    """Compile ``sql`` for ``dialect`` and check the emission invariant on the way: the compiled
    text, parsed back with its dialect, gives the tree the compiler built (tests/roundtrip.py's
    ``assert_faithful``). Without that helper only the plain compile runs: the hook to fill."""
    try:
        from roundtrip import assert_faithful  # noqa: PLC0415
    except ImportError:
        return uneven.compile(sql, dialect=dialect, pretty=False, **options)
    return assert_faithful(sql, dialect, pretty=False, **options)


# The plan of the ordered measures (docs/plans.md) drawn per shape: the default ("auto": refine where
# every measure on a value is cut-based), the window plan forced, the refine plan forced, and the
# stream plan (on DuckDB, run as query() runs it; elsewhere compile() keeps the window plan). The
# oracle shares no code with any of them, so each plan is checked against it.
PLANS = ({}, {"ordered": "window"}, {"ordered": "refine"}, {"ordered": "stream"})


# --- values ------------------------------------------------------------------------------------

def plain(value):
    """An engine's cell as a plain Python value: Decimal -> float, numpy scalars -> Python."""
    if isinstance(value, Decimal):
        return float(value)
    if hasattr(value, "item") and not isinstance(value, (list, dict, str)):
        return value.item()
    return value


def is_nan(v) -> bool:
    return isinstance(v, float) and math.isnan(v)


def same_value(a, b) -> bool:
    """``a`` (compiled) against ``b`` (oracle): NULL only equals NULL, NaN only NaN."""
    a, b = plain(a), plain(b)
    if a is None or b is None:
        return a is None and b is None
    if is_nan(a) or is_nan(b):
        return is_nan(a) and is_nan(b)
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and (isinstance(a, float) or isinstance(b, float)):
        if math.isinf(a) or math.isinf(b):
            return a == b
        return abs(a - b) <= REL * max(abs(a), abs(b)) or abs(a - b) <= NEAR_ZERO
    return a == b


def row_key(row) -> tuple:
    """Sort key for rows of engines whose text ordering differs (collations) from DuckDB's."""
    out = []
    for v in map(plain, row):
        if v is None:
            out.append((0, ""))
        elif is_nan(v):
            out.append((1, ""))
        elif isinstance(v, (bool, int, float)):
            out.append((2, f"{float(v):.6e}"))
        else:
            out.append((3, str(v)))
    return tuple(out)


def compare_rows(got: list, want: list, ordered: bool) -> str | None:
    if len(got) != len(want):
        return f"{len(got)} rows vs oracle {len(want)}\ncompiled {got[:4]}\noracle   {want[:4]}"
    if not ordered:
        got, want = sorted(got, key=row_key), sorted(want, key=row_key)
    for g, w in zip(got, want):
        if len(g) != len(w) or not all(same_value(a, b) for a, b in zip(g, w)):
            return f"compiled {tuple(map(plain, g))}\noracle   {tuple(w)}"
    return None


# --- running -----------------------------------------------------------------------------------

def load(eng, tables) -> None:
    for name, frame in tables.items():
        eng.load(frame, name)


def fetch(eng, compiled: str) -> list:
    if eng.name == "duckdb":  # fetchall keeps NULL and NaN apart (a DataFrame would not)
        return eng.con.execute(compiled).fetchall()
    frame = eng.execute(compiled)
    return [tuple(plain(v) for v in row) for row in frame.itertuples(index=False, name=None)]


def outcome_streamed(eng, sql: str):
    """The outcome of ``sql`` as query() runs it on DuckDB with the stream plan: the streamed passes
    first (engine/stream.py), then the compiled query joining their results."""
    from uneven.compiler.context import CompileOptions  # noqa: PLC0415
    from uneven.compiler.pipeline import compile_with_context  # noqa: PLC0415
    from uneven.engine.columns import DuckDBSchema  # noqa: PLC0415
    from uneven.engine.stream import streamed  # noqa: PLC0415
    try:  # the key types probed as query() probes them: the direct form where it serves (compiler/direct.py)
        compiled, ctx = compile_with_context(sql, CompileOptions(stream=True, ordered="stream", pretty=False),
                                             DuckDBSchema(eng.con, types=False, ties=False))
    except uneven.UnevenError as e:
        return ("refused", str(e).splitlines()[0])
    import uneven.engine.streamcuts as streamcuts  # noqa: PLC0415
    slices, min_rows = streamcuts.SLICES, streamcuts.MIN_ROWS
    if STREAM_SLICES is not None:  # (and every batch takes the cut search, however short its groups)
        streamcuts.SLICES, streamcuts.MIN_ROWS = int(STREAM_SLICES), 0
    try:
        with streamed(eng.con, ctx.stream_jobs, STREAM_BATCH):
            return ("rows", fetch(eng, compiled))
    except Exception as e:  # noqa: BLE001 (the engine's own error type, or an input policy error)
        return ("error", str(e).splitlines()[0][:300])
    finally:
        streamcuts.SLICES, streamcuts.MIN_ROWS = slices, min_rows


def outcome_compiled(eng, sql: str, faithful: bool = True, **options):
    if options.get("ordered") == "stream" and eng.name == "duckdb":
        return outcome_streamed(eng, sql)
    try:
        if faithful:
            compiled = compile_faithful(sql, eng.dialect, **options)
        else:
            compiled = uneven.compile(sql, dialect=eng.dialect, pretty=False, **options)
    except uneven.UnevenError as e:
        return ("refused", str(e).splitlines()[0])
    except AssertionError as e:  # the emitted text loses the tree's grouping
        return ("unfaithful", str(e)[:500])
    try:
        return ("rows", fetch(eng, compiled))
    except Exception as e:  # noqa: BLE001 (the engine's own error type)
        return ("error", str(e).splitlines()[0][:300])


def outcome_oracle(con, sql: str):
    try:
        return ("rows", con.execute(oracle_sql(sql)).fetchall())
    except Exception as e:  # noqa: BLE001
        return ("error", str(e).splitlines()[0][:300])


def compare_shape(eng, oracle_con, shape, faithful: bool = True, **options) -> str | None:
    sql = shape.sql()
    got, want = outcome_compiled(eng, sql, faithful, **options), outcome_oracle(oracle_con, sql)
    if got[0] != "rows" or want[0] != "rows":
        if got[0] == want[0] == "error":
            return None  # both refuse the same data (e.g. a failing expression): the same outcome
        return f"compiled: {got[0]} {got[1] if got[0] != 'rows' else got[1][:3]}\noracle: {want[0]} {want[1] if want[0] != 'rows' else want[1][:3]}"
    ordered = eng.name == "duckdb" and shape.limit is None
    return compare_rows(got[1], want[1], ordered)


def draw_shapes(seed: int, count: int, engine_name: str, max_measures: int = 3) -> list:
    g = Grammar(random.Random(seed), ENGINE_FEATURES[engine_name], wide_params=WIDE_PARAMS, se_measures=SE_MEASURES,
                max_measures=max_measures)
    return [g.shape() for _ in range(count)]


def check_shapes(eng, oracle_con, seed: int, count: int, max_measures: int = 3) -> dict:
    """Run ``count`` shapes on ``eng``; fail listing every mismatch (case, seed, query)."""
    start = time.monotonic()
    mismatches = []
    for case, shape in enumerate(draw_shapes(seed, count, eng.name, max_measures)):
        options = PLANS[case % len(PLANS)]
        problem = compare_shape(eng, oracle_con, shape, case % EMISSION_EVERY == 0, **options)
        if problem:
            mismatches.append(f"case {case} (seed {seed}, {eng.name}, {options or 'default plan'}): "
                              f"{shape.sql()}\n{problem}")
    elapsed = time.monotonic() - start
    print(f"{eng.name}: {count} shapes, {len(mismatches)} mismatches, {elapsed:.1f} s")
    assert not mismatches, (f"{len(mismatches)} of {count} shapes differ from the oracle on {eng.name}:\n"
                            + "\n\n".join(mismatches[:8]))
    return {"shapes": count, "seconds": elapsed}


@pytest.fixture(scope="module")
def tables():
    return fuzz_tables()


@pytest.fixture(scope="module")
def oracle_con(tables):
    con = duckdb.connect()
    for name, frame in tables.items():
        con.register("_uv_frame", frame)
        con.execute(f'CREATE TABLE "{name}" AS SELECT * FROM _uv_frame')
        con.unregister("_uv_frame")
    install_oracle(con)
    yield con
    con.close()


def test_shapes_match_oracle(engine, oracle_con, tables):
    load(engine, tables)
    check_shapes(engine, oracle_con, seed=CI_SEED, count=CI_COUNTS[engine.name], max_measures=CI_MAX_MEASURES)


@pytest.mark.slow
def test_many_shapes_match_oracle(oracle_con, tables):
    seed = int(os.environ.get("UNEVEN_SEED", "1"))
    count = int(os.environ.get("UNEVEN_SHAPES", "20000"))
    names = ["duckdb"] + [n for n in os.environ.get("UNEVEN_SHAPE_ENGINES", "").split(",") if n and n != "duckdb"]
    for name in names:
        eng = engine_or_skip(name)
        load(eng, tables)
        check_shapes(eng, oracle_con, seed=seed, count=count)


# --- the comparison itself is checked on values whose answer is known by definition ------------

def test_same_value_keeps_null_nan_and_tolerance_apart():
    # NULL vs NaN, the distinction the contract draws (SQL NULL = no value, NaN = a float value)
    assert not same_value(None, float("nan")) and not same_value(float("nan"), None)
    assert same_value(None, None) and same_value(float("nan"), float("nan"))
    # 1e-9 relative: 1 + 2e-9 is outside, 1 + 5e-10 inside (the tolerance's definition)
    assert not same_value(1.0 + 2e-9, 1.0) and same_value(1.0 + 5e-10, 1.0)
    assert not same_value(2501.0, 2500.0)  # an HHI off by a point is a mismatch
    assert same_value(True, 1) and not same_value("North", "north")
    assert same_value(Decimal("0.25"), 0.25)
