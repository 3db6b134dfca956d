"""ineqsql: inequality measures in SQL, compiled to window-function SQL and run in DuckDB.

>>> import ineqsql
>>> ineqsql.query("SELECT gini(x) FROM (VALUES (1), (2), (3)) t(x)")  # doctest: +SKIP
"""

from ineqsql.api import compile, measures, query  # noqa: A004
from ineqsql.errors import (ExecutionError, IneqsqlError, InputDataError, MeasureArgumentError,
                            MeasureUsageError, SqlParseError, UndefinedResultError, UnsupportedDialectError,
                            UnsupportedSqlError)

from ineqsql.builder import BuilderError, from_
from ineqsql.catalog.user import define_measure, remove_measure
from ineqsql.duckdb_functions import FunctionConflictError, install, uninstall

__version__ = "0.1.0"

__all__ = ["compile", "query", "measures", "IneqsqlError", "SqlParseError", "MeasureUsageError",
           "MeasureArgumentError", "UnsupportedSqlError", "ExecutionError", "InputDataError",
           "UndefinedResultError", "UnsupportedDialectError", "install", "uninstall", "FunctionConflictError",
           "define_measure", "remove_measure", "from_", "BuilderError"]


def __getattr__(name: str):
    """``ineqsql.gini("income", weight="w")``: one builder measure per catalog entry (see builder/)."""
    from ineqsql.builder.measures import measure_factory

    return measure_factory(name)
