"""Snowflake (emitted, not executed here; golden files in fixtures/golden/dialects/snowflake).

- No raising function: ``error(m)`` in a CASE branch becomes a failing cast, as for PostgreSQL.
- GROUP BY ALL is expanded; structs are OBJECT_CONSTRUCT and arrays ARRAY_CONSTRUCT (sqlglot).
"""

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

DIALECT = Dialect("snowflake", rules=(r.uniform_refused, r.expand_group_by_all, r.raise_by_failed_cast),
                  notes="emitted, not executed here")
