"""ineqsql: inequality measures in SQL, compiled to window-function SQL and run in DuckDB.

>>> import ineqsql
>>> ineqsql.query("SELECT gini(x) FROM (VALUES (1), (2), (3)) t(x)")  # doctest: +SKIP
"""

from ineqsql.api import compile, explain, measures, query  # noqa: A004
from ineqsql.engine.sqlite import install_sqlite_functions
from ineqsql.influence import influence
from ineqsql.structure import compare, decompose, gini_sources
from ineqsql.errors import (ExecutionError, IneqsqlError, InputDataError, MeasureArgumentError,
                            MeasureUsageError, SqlParseError, UndefinedResultError, UnsupportedDialectError,
                            UnsupportedSqlError)

from ineqsql.report import lorenz_points, plot_lorenz, write_report

__version__ = "0.1.0"

__all__ = ["compile", "query", "explain", "measures", "install_sqlite_functions", "decompose", "gini_sources", "compare", "influence", "IneqsqlError", "SqlParseError", "MeasureUsageError",
           "MeasureArgumentError", "UnsupportedSqlError", "ExecutionError", "InputDataError",
           "UndefinedResultError", "UnsupportedDialectError", "lorenz_points", "plot_lorenz", "write_report"]
