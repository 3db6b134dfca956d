"""PostgreSQL (executed in the tests on a throwaway server).

- GROUP BY ALL does not exist: expanded.
- No raising function: ``error(m)`` in a CASE branch becomes a failing cast of m to INTEGER, so
  the query stops with ``invalid input syntax for type integer: "uneven: …"``.
- ln(0), ln(−1), sqrt(−1), fractional powers of negatives and division by zero raise: arguments
  outside the domain give NULL instead (the measures guard their own; this covers every call).
- round(x, n) exists for NUMERIC only: a DOUBLE is rounded through NUMERIC and cast back.
- ``IS NOT DISTINCT FROM`` joins are nested loops: joined on the key's text plus a NULL flag.
- No named anonymous structs: list results (lorenz_curve) are jsonb arrays of objects.
- Exact quantile and arg-min aggregates: PERCENTILE_CONT … WITHIN GROUP is written by sqlglot;
  arg_min/arg_max have no PostgreSQL form and are refused.
"""

from sqlglot import exp

from uneven.compiler.dialects import Dialect
from uneven.compiler.dialects import rules as r

DIALECT = Dialect(
    "postgres",
    rules=(
        r.refuse({exp.ArgMin: "arg_min()", exp.ArgMax: "arg_max()"}),
        r.uniform_from_hash("hashtextextended", signed=True, as_text=True),
        r.expand_group_by_all,
        r.raise_by_failed_cast,
        r.guard_math_domain,
        r.null_on_division_by_zero,
        r.round_through_numeric,
        r.null_safe_join_by_text,
        r.structs_as_json("jsonb_build_object", "jsonb_build_array"),
    ),
    executed=True,
    notes="list results are jsonb; negative weights and strict mode stop the query through a failing cast",
    aliases=("postgresql",),
)
