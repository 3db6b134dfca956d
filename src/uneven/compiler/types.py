"""Type safety of measure arguments: values and weights must be numbers.

``CAST(x AS DOUBLE)`` (which every pass applies) would read the text '12' as 12 and a boolean as
0/1, so a wrong column could give a plausible number. When an engine can tell the argument types
(``query`` on DuckDB: ``CompileContext.engine``), a value or weight that is not numeric
stops the compile with an error naming the call, the argument and its type. ``compile`` alone
cannot see types: the target engine's CAST decides (text that is not a number fails there).
"""

from __future__ import annotations

import re
from collections.abc import Iterable

from sqlglot import exp

from uneven.compiler.calls import MeasureCall
from uneven.compiler.context import CompileContext, text
from uneven.errors import MeasureArgumentError

# integer, unsigned, decimal and floating types (DuckDB's names; others may be added per engine)
_NUMERIC = re.compile(r"^(TINYINT|SMALLINT|INTEGER|BIGINT|HUGEINT|UTINYINT|USMALLINT|UINTEGER|UBIGINT|UHUGEINT|"
                      r"FLOAT|REAL|DOUBLE|DECIMAL(\(\d+,\s*\d+\))?|NUMERIC(\(\d+,\s*\d+\))?|BIGNUM|INT\d*)$", re.I)
_NULL = ('"NULL"', "NULL")


def is_numeric_type(name: str) -> bool:
    return bool(_NUMERIC.match(name.strip())) or name.strip() in _NULL


def typed_arguments(calls: Iterable[MeasureCall]) -> list[tuple[exp.Expression, str, MeasureCall]]:
    """(expression, role, call) for every argument that must be numeric: the value, and the weight."""
    out: list[tuple[exp.Expression, str, MeasureCall]] = []
    for call in calls:
        out.append((call.x, "value", call))
        if call.trailing is not None and call.measure.trailing == "weight":
            out.append((call.trailing, "weight", call))
    return out


def check_argument_types(select: exp.Select, calls, ctx: CompileContext) -> None:
    """Raise MeasureArgumentError for a value or weight whose type is not numeric (when known)."""
    if ctx.engine is None:
        return
    args = typed_arguments(calls)
    types = ctx.engine.expression_types(select, [a[0] for a in args])
    if types is None:
        return  # the engine could not say: the CAST in the compiled SQL decides
    for (expr, role, call), type_name in zip(args, types):
        if not is_numeric_type(type_name):
            name = call.measure.name
            raise ctx.error(MeasureArgumentError, f"{name}(): the {role} {text(expr)} is of type {type_name}, not a "
                            f"number (values and weights must be numeric; convert it explicitly, e.g. "
                            f"CAST({text(expr)} AS DOUBLE), if it holds numbers)", call.node, name)
