"""uneven: inequality measures in SQL, compiled to window-function SQL and run in DuckDB.

>>> import uneven
>>> uneven.query("SELECT gini(x) FROM (VALUES (1), (2), (3)) t(x)")  # doctest: +SKIP
"""

from uneven.api import compile, explain, measures, query  # noqa: A004
from uneven.brackets import from_brackets, merge_brackets
from uneven.builder import BuilderError, from_
from uneven.builder.scalars import equivalised, person_weight
from uneven.catalog.kernels import ChunkKernel
from uneven.catalog.user import define_measure, remove_measure
from uneven.duckdb_functions import FunctionConflictError, install, uninstall
from uneven.engine.sqlite import install_sqlite_functions
from uneven.errors import (
    ExecutionError,
    InputDataError,
    MeasureArgumentError,
    MeasureUsageError,
    SqlParseError,
    UndefinedResultError,
    UnevenError,
    UnsupportedDialectError,
    UnsupportedSqlError,
)
from uneven.report import lorenz_points, plot_lorenz, write_report
from uneven.stored import from_summary, merge_summaries, summarize
from uneven.tables import compare, decompose, gini_sources, influence, lorenz_dominance

__version__ = "0.1.0"

__all__ = [
    # SQL text in, results or SQL out
    "compile", "query", "explain", "measures",
    # other front-ends: the builder, functions inside DuckDB, your own measures, SQLite support
    "from_", "equivalised", "person_weight", "install", "uninstall", "define_measure", "ChunkKernel",
    "remove_measure", "install_sqlite_functions",
    # tables: decompositions, income sources, paired comparisons, outlier influence
    "decompose", "gini_sources", "compare", "influence", "lorenz_dominance",
    # bounded measures from stored, mergeable summaries
    "summarize", "merge_summaries", "from_summary",
    # measures with bounds from published bracket tables
    "from_brackets", "merge_brackets",
    # pictures and reports
    "lorenz_points", "plot_lorenz", "write_report",
    # errors (all UnevenError)
    "UnevenError", "SqlParseError", "MeasureUsageError", "MeasureArgumentError", "UnsupportedSqlError",
    "ExecutionError", "InputDataError", "UndefinedResultError", "UnsupportedDialectError", "BuilderError",
    "FunctionConflictError",
]


def __getattr__(name: str):
    """``uneven.gini("income", weight="w")``: one builder measure per catalog entry (see builder/)."""
    from uneven.builder.measures import measure_factory

    return measure_factory(name)
