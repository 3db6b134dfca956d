"""The Python entry points: ``compile``, ``query`` and the catalog listing."""

from __future__ import annotations

from dataclasses import replace

import pandas as pd

from uneven.catalog import MEASURES
from uneven.compiler import compile_sql
from uneven.compiler.bounded import check_method
from uneven.compiler.context import CompileOptions
from uneven.engine.adapters import Adapter
from uneven.engine.bounded import pick_resolution, run_bounded
from uneven.engine.frames import callers_frame
from uneven.engine.session import session
from uneven.engine.stream import execute_planned
from uneven.explain import Explanation, explain_on, explain_query


def compile(sql: str, dialect: str = "duckdb", *, read: str = "duckdb", pretty: bool = True,  # noqa: A001
            strict: bool = False, tie_grouping: str = "auto", method: str = "exact",
            tolerance: float | None = None, resolution: float | None = None, ordered: str = "auto") -> str:
    """Compile SQL with measure calls into plain SQL for ``dialect`` (no measure calls left).

    ``strict=True``: a measure that is undefined for a group (NULL) stops the query with an error
    naming the group, as ``strict := true`` does for one call.
    ``tie_grouping``: ``"on"`` groups tied values before the ordered pass's window (pays when values
    repeat a lot, e.g. integer counts), ``"off"`` never; ``"auto"`` (default) needs an engine to
    look at the data, so compile() alone keeps one row per input row.

    ``method="bounded"``: no sort; each measure column comes with ``<name>_lo`` and ``<name>_hi``,
    a certified interval from one GROUP BY into log-spaced bins (docs/bounded.md). ``tolerance``
    (a Gini interval width to aim at) or ``resolution`` (the relative bin width, default 0.01)
    picks the bins.

    ``ordered``: the plan of the cut-based measures (Lorenz ordinates, shares, Palma, S80/S20,
    quantiles, a Lorenz curve of up to 20 segments). ``"refine"``: one GROUP BY into log-spaced bins,
    then a sort of only the rows in the bins that hold a cut, exact (docs/refine.md); ``"window"``: a
    sort of every row; ``"auto"`` (default): refine on every engine wherever all measures on a
    (value, weight, FILTER) are cut-based (a Gini beside them needs the sort anyway), and the window
    plan when ``tie_grouping="on"``. ``"stream"`` is for ``query``/``explain`` on DuckDB (compiled
    SQL keeps the window plan: it must run anywhere).
    """
    return compile_sql(sql, CompileOptions(dialect=dialect, read=read, pretty=pretty, strict=strict,
                                           tie_grouping=tie_grouping, method=method,
                                           resolution=pick_resolution(method, tolerance, resolution), ordered=ordered))


def query(sql: str, con=None, *, memory_limit: str | None = None,
          threads: int | None = None, temp_directory: str | None = None,
          progress: bool = False, strict: bool = False, tie_grouping: str = "auto", method: str = "exact",
          tolerance: float | None = None, resolution: float | None = None, read: str = "duckdb",
          ordered: str = "auto") -> pd.DataFrame:
    """Compile ``sql`` and run it on ``con``: a DuckDB connection (default: a new in-memory one), a
    psycopg 3 connection (PostgreSQL), a ``SparkSession``, a ``sqlite3.Connection`` (the functions
    its SQL needs are installed on it), or a SQLAlchemy engine/connection over PostgreSQL or SQLite.
    The SQL is compiled for that engine and the result is a DataFrame with the columns and types
    DuckDB gives (docs/engines.md). ``read``: the dialect ``sql`` is written in (default DuckDB's,
    as for ``compile``). ``memory_limit``, ``threads``, ``temp_directory`` and ``progress`` are
    DuckDB settings.

    Tables the query names may also be pandas DataFrames or Arrow tables held by the calling code
    under that name, as with ``duckdb.sql``. ``tie_grouping``: see ``compile``; with ``"auto"``
    an integer, decimal or boolean value is probed (one scan) and its ties grouped when the
    distinct (group, value) pairs are at most a quarter of the rows.

    ``method="bounded"``: intervals instead of a sort (see ``compile``); the result's
    ``attrs["uneven"]`` tells the resolution used and the widest interval of each measure. With a
    ``tolerance``, a Gini interval wider than it makes the query run once more with finer bins.
    ``ordered``: see ``compile``; on DuckDB also ``"stream"``: DuckDB sorts the pass's rows and numpy
    reduces them batch by batch (docs/plans.md); ``"auto"`` streams a pass whose measures need the
    full order (Gini and its family), weighted or not, where it is measured to be cheaper.
    """
    method = check_method(method)
    chosen = pick_resolution(method, tolerance, resolution)
    options = CompileOptions(read=read, pretty=False, strict=strict, tie_grouping=tie_grouping, method=method,
                             ordered=ordered)
    with session(con, sql, callers_frame(), memory_limit=memory_limit, threads=threads,
                 temp_directory=temp_directory, progress=progress) as target:
        if isinstance(target, Adapter):
            return run_on(target, sql, options, chosen, tolerance)

        def run(res):  # uneven runs it on DuckDB: an ordered pass may be streamed (engine/stream.py)
            return execute_planned(target, sql, replace(options, resolution=res))
        if method == "exact":
            return run(None)
        assert chosen is not None  # a bounded query always has a resolution (pick_resolution)
        return run_bounded(run, chosen, tolerance, sql)


def run_on(adapter: Adapter, sql: str, options: CompileOptions, resolution, tolerance) -> pd.DataFrame:
    """``query`` on an engine other than DuckDB (engine/adapters): compile for its dialect with its
    answers to the compiler's probes (columns, argument types), run, type the result as DuckDB does."""
    def run(res):
        compiled = compile_sql(sql, replace(options, dialect=adapter.dialect, resolution=res), adapter.schema())
        return adapter.execute(compiled)
    if options.method == "exact":
        return run(None)
    return run_bounded(run, resolution, tolerance, sql)


def explain(sql: str, con=None, *, profile: bool = False,
            memory_limit: str | None = None, threads: int | None = None, temp_directory: str | None = None,
            strict: bool = False, tie_grouping: str = "auto", read: str = "duckdb",
            ordered: str = "auto") -> Explanation:
    """The passes the planner chooses for ``sql`` on DuckDB (kind, variant, value, weight, FILTER,
    measures served, CTE names, reason) and, with ``profile=True``, the time DuckDB spends per
    operator when it runs the query once. ``print(explain(...))`` shows a readable summary.
    On another engine (``con`` as for ``query``) the passes are those compiled for it and
    ``engine_plan`` holds the engine's own plan (PostgreSQL's EXPLAIN, with ``profile=True``
    EXPLAIN ANALYZE; Spark's EXPLAIN; SQLite's EXPLAIN QUERY PLAN)."""
    options = CompileOptions(read=read, strict=strict, tie_grouping=tie_grouping, ordered=ordered)
    with session(con, sql, callers_frame(), memory_limit=memory_limit, threads=threads,
                 temp_directory=temp_directory) as target:
        if isinstance(target, Adapter):
            return explain_on(sql, target, options, profile=profile)
        return explain_query(sql, target, options, profile=profile)


def measures() -> list[dict]:
    """One row per catalog measure: name, signature, pass, formula, domain."""
    return [{"name": m.name, "signature": m.signature, "pass": "/".join(m.passes) if isinstance(m.passes, tuple)
             else m.passes, "formula": m.formula, "domain": m.domain} for m in MEASURES.values()]
