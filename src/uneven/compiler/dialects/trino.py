"""Trino (emitted, not executed here; golden files in fixtures/golden/dialects/trino).

- ``error(m)`` → ``fail(m)``.
- GROUP BY ALL means something else in Trino (a set quantifier): expanded.
- Named struct fields only through a cast: ``CAST(ROW(…) AS ROW(p DOUBLE, lorenz DOUBLE))``.
- No exact quantile aggregate (PERCENTILE_CONT): refused.
"""

from sqlglot import exp

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

DIALECT = Dialect(
    "trino",
    rules=(
        r.uniform_refused,
        r.refuse({exp.PercentileCont: "an exact quantile aggregate", exp.PercentileDisc: "an exact quantile aggregate",
                  exp.Quantile: "an exact quantile aggregate", exp.Median: "median()"}),
        r.expand_group_by_all,
        r.raise_with("fail"),
        r.structs_as_typed_rows,
    ),
    notes="emitted, not executed here",
)
