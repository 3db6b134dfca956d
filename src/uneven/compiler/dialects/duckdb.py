"""DuckDB: the compiler's own dialect; the lowered tree is emitted as it is."""

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

# the bootstrap's draws: hash() is a 64-bit hash returning UBIGINT
DIALECT = Dialect("duckdb", rules=(r.uniform_from_hash("hash", signed=False),), executed=True)
