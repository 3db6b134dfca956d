"""When the final SELECT of a streamed scope can read the stream's own result table (the direct form).

The stream plan's results are a table registered on the connection (``_uv_str_N``: the group keys
``_uv_k1`` … and one ``_uv_rN`` per call). In the *joined* form the final SELECT reads the main
aggregate (``_uv_agg_N``: a second read of the source and a GROUP BY of every key) and joins the
table on the keys. In the *direct* form the table is the grouped relation itself: one row per group,
the stream keeping every group of the user's WHERE (rows the pass does not count come as NULL
values, sorted last, and make a group of NULL results: passes/stream.py, engine/stream.py).

The direct form serves a scope when everything its final SELECT reads per group is in the table:

- the scope has one pass after the plan rules, the stream pass (a moment, centred, refine or other
  pass, or a second stream pass on another value, weight or FILTER: joined);
- no ordinary aggregate (``count(*)``, ``sum(x)`` …) in SELECT, HAVING, ORDER BY, QUALIFY or
  DISTINCT ON (they are columns of the main aggregate); window functions over the grouped rows are
  fine, the table has the same rows;
- every group key has a type that comes back from Arrow as it went (``KEY_TYPES``; HUGEINT, ENUM,
  UUID, BIT … come back as another type, and so would the key column of the result).

The bounded method's summary pass has a direct form too (``summary_direct_blocked``): its result CTE
is the grouped relation (one row per group of the user's WHERE: passes/summary.py keeps a placeholder
bin for a group's uncounted rows), under the first two conditions (no other pass, no ordinary
aggregate); its keys never leave the engine, so their types do not matter.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator

from sqlglot import exp

from uneven.compiler.calls import is_aggregate, is_measure
from uneven.compiler.context import text

# DuckDB types whose values survive the trip to Arrow and back on a registered table unchanged (checked
# in tests/test_stream_direct.py); DECIMAL(p, s), TIMESTAMP(…) and VARCHAR … by their first word
KEY_TYPES = ("BOOLEAN", "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "UTINYINT", "USMALLINT", "UINTEGER",
             "UBIGINT", "FLOAT", "DOUBLE", "DECIMAL", "VARCHAR", "DATE", "TIMESTAMP", "TIMESTAMP_NS",
             "TIMESTAMP_MS", "TIMESTAMP_S", "TIME", "BLOB")

CLAUSES = ("expressions", "having", "order", "qualify", "distinct")


def _outer_nodes(select: exp.Select) -> Iterator[exp.Expression]:
    """The nodes of the clauses the final SELECT rebuilds, outside measure calls and other scopes."""
    for arg in CLAUSES:
        value = select.args.get(arg)
        for part in (value if isinstance(value, list) else [value] if value is not None else []):
            yield from part.walk(prune=lambda n: isinstance(n, (exp.Select, exp.Subquery)) or is_measure(n))


def plain_aggregate(select: exp.Select) -> exp.Expression | None:
    """The first ordinary aggregate the scope's final SELECT would read from the main aggregate."""
    for node in _outer_nodes(select):
        if is_aggregate(node) and not is_measure(node):
            return node
    return None


def key_type_blocked(types: list[str] | None, keys: list[exp.Expression]) -> str | None:
    """Why a group key cannot come back from the stream's table as it is, or None."""
    if not keys:
        return None
    if types is None or len(types) != len(keys):
        return "the group keys' types are unknown"
    for key, name in zip(keys, types):
        word = name.split("(")[0].strip().upper()
        if word not in KEY_TYPES:
            return f"the group key {text(key)} is {name}, which Arrow would hand back as another type"
    return None


def direct_blocked(others: list[str], select: exp.Select, keys: list[exp.Expression],
                   types: Callable[[], list[str] | None]) -> str | None:
    """Why the scope's final SELECT must join the stream's table to the main aggregate, or None.
    ``others``: the kinds of the scope's other passes after the plan rules; ``types()`` the group
    keys' type names (an engine probe, asked last, only when nothing else blocks)."""
    return _scope_blocked("stream", others, select) or key_type_blocked(types() if keys else [], keys)


def summary_direct_blocked(others: list[str], select: exp.Select) -> str | None:
    """Why the scope's final SELECT must join the summary pass's result CTE to the main aggregate, or None."""
    return _scope_blocked("summary", others, select)


def _scope_blocked(kind: str, others: list[str], select: exp.Select) -> str | None:
    """The conditions both direct forms share: no other pass, no ordinary aggregate."""
    if others:
        return f"the scope has other passes beside the {kind} (" + ", ".join(dict.fromkeys(others)) + ")"
    found = plain_aggregate(select)
    if found is not None:
        return f"{text(found)} is an ordinary aggregate, read from the main GROUP BY"
    return None
