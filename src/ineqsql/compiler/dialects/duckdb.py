"""DuckDB: the compiler's own dialect; the lowered tree is emitted as it is."""

from ineqsql.compiler.dialects import Dialect

DIALECT = Dialect("duckdb", rules=(), executed=True)
