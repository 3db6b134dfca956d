"""Plan the passes of one scope: measure calls grouped by pass kind and shared input."""

from __future__ import annotations

from dataclasses import dataclass, field

from sqlglot import exp

from ineqsql.compiler.calls import MeasureCall


@dataclass
class PassPlan:
    kind: str  # "ordered" | "moment" | "entity"
    x: exp.Expression
    trailing: exp.Expression | None  # the weight (ordered, moment) or the entity (entity)
    condition: exp.Expression | None = None  # a FILTER (WHERE …) shared by the pass's calls
    columns: tuple[exp.Expression, ...] = ()  # further row-level arguments (rank_by, subgroup …)
    calls: list[MeasureCall] = field(default_factory=list)


def plan_passes(calls: list[MeasureCall]) -> list[PassPlan]:
    """One pass per (kind, value, weight-or-entity, FILTER condition, further columns), in order of
    first appearance.

    All measures on the same value and weight share one ordered pass, however many there are.
    """
    plans: dict[tuple, PassPlan] = {}
    for call in calls:
        kind = call.pass_kind
        trailing = call.trailing
        cond = call.filter
        x, columns = call.pass_inputs
        key = (kind, x.sql("duckdb"), trailing.sql("duckdb") if trailing is not None else None,
               cond.sql("duckdb") if cond is not None else None, tuple(c.sql("duckdb") for c in columns))
        if key not in plans:
            plans[key] = PassPlan(kind, x, trailing, cond, columns)
        plans[key].calls.append(call)
    return list(plans.values())
