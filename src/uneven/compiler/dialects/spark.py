"""Spark SQL (executed in the tests on pyspark in local mode, data read from Parquet).

- ``error(m)`` → ``raise_error(m)``.
- Division by zero raises under ANSI mode (the default since Spark 4): NULLIF on every divisor.
- GROUP BY ALL is expanded (older Spark versions lack it).
- Structs and arrays are native: list results are arrays of structs, as in DuckDB.
"""

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

DIALECT = Dialect(
    "spark",
    rules=(r.uniform_from_hash("xxhash64", signed=True), r.expand_group_by_all, r.raise_with("raise_error"),
           r.null_on_division_by_zero),
    executed=True,
    notes="list results are arrays of structs; negative weights and strict mode raise through raise_error()",
    aliases=("sparksql",),
)
