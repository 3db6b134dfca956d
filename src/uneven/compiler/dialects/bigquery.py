"""BigQuery (emitted, not executed here; golden files in fixtures/golden/dialects/bigquery).

- ``error(m)`` is BigQuery's own ERROR(m): kept.
- A window cannot say NULLS LAST: ascending window orders get a leading ``x IS NULL`` key.
- GROUP BY ALL is expanded; FILTER (WHERE …) is written as a conditional argument by sqlglot.
"""

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

DIALECT = Dialect("bigquery", rules=(r.uniform_refused, r.expand_group_by_all, r.window_nulls_last_as_key),
                  notes="emitted, not executed here")
