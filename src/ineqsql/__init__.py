"""ineqsql: inequality measures in SQL, compiled to window-function SQL and run in DuckDB.

>>> import ineqsql
>>> ineqsql.query("SELECT gini(x) FROM (VALUES (1), (2), (3)) t(x)")  # doctest: +SKIP
"""

from ineqsql.api import compile, measures, query  # noqa: A004
from ineqsql.engine.sqlite import install_sqlite_functions
from ineqsql.errors import (ExecutionError, IneqsqlError, InputDataError, MeasureArgumentError,
                            MeasureUsageError, SqlParseError, UndefinedResultError, UnsupportedDialectError,
                            UnsupportedSqlError)

__version__ = "0.1.0"

__all__ = ["compile", "query", "measures", "install_sqlite_functions", "IneqsqlError", "SqlParseError", "MeasureUsageError",
           "MeasureArgumentError", "UnsupportedSqlError", "ExecutionError", "InputDataError",
           "UndefinedResultError", "UnsupportedDialectError"]
