"""ineqsql: inequality measures in SQL, compiled to window-function SQL and run in DuckDB.

>>> import ineqsql
>>> ineqsql.query("SELECT gini(x) FROM (VALUES (1), (2), (3)) t(x)")  # doctest: +SKIP
"""

from ineqsql.api import compile, measures, query  # noqa: A004
from ineqsql.errors import (ExecutionError, IneqsqlError, InputDataError, MeasureArgumentError,
                            MeasureUsageError, SqlParseError, UndefinedResultError, UnsupportedDialectError,
                            UnsupportedSqlError)

from ineqsql.summary import from_summary, merge_summaries, summarize

__version__ = "0.1.0"

__all__ = ["compile", "query", "measures", "summarize", "merge_summaries", "from_summary", "IneqsqlError", "SqlParseError", "MeasureUsageError",
           "MeasureArgumentError", "UnsupportedSqlError", "ExecutionError", "InputDataError",
           "UndefinedResultError", "UnsupportedDialectError"]
