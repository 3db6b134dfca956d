"""``method="bounded"``: route measure calls to the summary pass and give each measure column its
``<name>_lo`` and ``<name>_hi`` companions.

A measure with a bounded form (bounds/measures.py) runs on the summary pass (one GROUP BY into
bins, no sort). Others (HHI, CR_k: sums per entity) keep their exact pass; their interval is the
exact value twice. ``lorenz_curve`` returns a list and has no interval form: ask ``lorenz(x, p)``
per point instead.
"""

from __future__ import annotations

from sqlglot import exp

from uneven.bounds.measures import BOUNDED
from uneven.catalog.spec import PassKind
from uneven.compiler.calls import MeasureCall, call_key, is_measure
from uneven.compiler.context import CompileContext, text
from uneven.errors import MeasureUsageError
from uneven.sqltree import build as s

METHODS = ("exact", "bounded")


def route_bounded(select: exp.Select, calls: list[MeasureCall], ctx: CompileContext) -> None:
    """Send calls with a bounded form to the summary pass; refuse what cannot carry an interval."""
    for call in calls:
        name = call.measure.name
        if call.measure.returns != "double":
            raise ctx.error(MeasureUsageError, f"{name}() has no interval form with method bounded; ask "
                            "lorenz(x, p) for each point instead", call.node, name)
        if name in BOUNDED:
            call.pass_override = PassKind.SUMMARY
    for item in select.expressions:
        node = item.unalias()
        if _measure_of(node) is not None:
            continue
        for sub in node.find_all(exp.Anonymous):
            if is_measure(sub) and _scope_of(sub) is select:
                raise ctx.error(MeasureUsageError, f"with method bounded, {sub.name.lower()}() must be a whole "
                                f"select item (its interval comes in _lo and _hi columns), not part of "
                                f"{text(node)}; compute the expression in an outer query", sub, sub.name.lower())


def _measure_of(node: exp.Expression) -> exp.Expression | None:
    if isinstance(node, exp.Filter) and is_measure(node.this):
        return node.this
    return node if is_measure(node) else None


def _scope_of(node: exp.Expression) -> exp.Expression | None:
    anc = node.parent
    while anc is not None and not isinstance(anc, exp.Select):
        anc = anc.parent
    return anc


def bounded_items(select: exp.Select, items: list[exp.Expression], results: dict,
                  outputs: list[str]) -> list[exp.Expression]:
    """The final select list with ``<name>_lo``, ``<name>_hi`` after every measure column."""
    out = []
    for item, original, name in zip(items, select.expressions, outputs):
        out.append(item)
        call = _measure_of(original.unalias())
        if call is None:
            continue
        key = call_key(call)
        for side in ("lo", "hi"):
            bound = results.get((key, side), results[key])
            out.append(s.alias(bound.copy(), f"{name}_{side}"))
    return out


def check_method(method: str) -> str:
    name = (method or "").lower()
    if name not in METHODS:
        raise MeasureUsageError(f"method must be one of {', '.join(METHODS)}, got {method!r}")
    return name
