"""SQLite (executed in the tests through Python's sqlite3).

- No raising function in SQL: ``error(m)`` → ``uneven_raise(m)``, a function the connection must
  register (``uneven.install_sqlite_functions(con)`` does, with ln, exp, power, sqrt and ceil
  where the SQLite build lacks its math functions). Without it, a query that needs it fails with
  "no such function: uneven_raise", never with a wrong number.
- No arrays or structs: list results (lorenz_curve) are JSON text (json_array of json_object).
- Members of a UNION cannot be parenthesised: their CTEs move to one WITH clause in front.
- No NaN (a NaN stored or computed is NULL, so inf·0 is NULL): the row check x·0 <> 0 becomes
  ABS(x) > 1.7976931348623157e308, true for ±inf only.
- GROUP BY ALL is expanded; exact quantile and arg-min aggregates have no SQLite form: refused.
"""

from sqlglot import exp

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

RAISE_FUNCTION = "uneven_raise"
HASH_FUNCTION = "uneven_hash"  # registered by install_sqlite_functions: a signed 64-bit hash

DIALECT = Dialect(
    "sqlite",
    rules=(
        r.refuse({exp.ArgMin: "arg_min()", exp.ArgMax: "arg_max()", exp.PercentileCont: "an exact quantile aggregate",
                  exp.PercentileDisc: "an exact quantile aggregate", exp.Quantile: "an exact quantile aggregate",
                  exp.Median: "median()", exp.ArrayAgg: "a list aggregate"}),
        r.uniform_from_hash(HASH_FUNCTION, signed=True),
        r.values_columns_by_position,
        r.expand_group_by_all,
        r.hoist_ctes_from_set_operations,
        r.infinity_by_magnitude,
        r.raise_with(RAISE_FUNCTION),
        r.structs_as_json("json_object", "json_array", every_array=True),
    ),
    executed=True,
    notes="needs uneven_raise (and math functions on builds without them) registered; list results are JSON text",
)
