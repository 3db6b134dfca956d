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
    calls: list[MeasureCall] = field(default_factory=list)
    options: dict = field(default_factory=dict)  # the pass-shaping named arguments (strata, psu, …)


def plan_passes(calls: list[MeasureCall]) -> list[PassPlan]:
    """One pass per (kind, value, weight-or-entity, FILTER condition), in order of first appearance.

    All measures on the same value and weight share one ordered pass, however many there are.
    """
    plans: dict[tuple, PassPlan] = {}
    for call in calls:
        kind = call.pass_kind
        trailing = call.trailing
        cond = call.filter
        shaping = {k: call.options[k] for k in call.measure.pass_options if k in call.options}
        key = (kind, call.x.sql("duckdb"), trailing.sql("duckdb") if trailing is not None else None,
               cond.sql("duckdb") if cond is not None else None,
               tuple(sorted((k, v.sql("duckdb")) for k, v in shaping.items())))
        if key not in plans:
            plans[key] = PassPlan(kind, call.x, trailing, cond, options=shaping)
        plans[key].calls.append(call)
    return list(plans.values())


SHAREABLE = {"ordered", "moment"}  # plain passes whose measures a linearized pass can also compute


def share_passes(plans: list[PassPlan], can_share) -> list[PassPlan]:
    """Move the calls of an ordered or moment pass onto a linearized pass of the same value, weight
    and FILTER (when ``can_share(call)``), so an estimate and its standard error share one sort."""
    linearized = {}
    for plan in plans:
        if plan.kind == "linearized":
            linearized.setdefault(_rows_key(plan), plan)
    out = []
    for plan in plans:
        target = linearized.get(_rows_key(plan)) if plan.kind in SHAREABLE else None
        if target is None:
            out.append(plan)
            continue
        moved = [c for c in plan.calls if can_share(c)]
        target.calls += moved
        plan.calls = [c for c in plan.calls if not can_share(c)]
        if plan.calls:
            out.append(plan)
    return out


def _rows_key(plan: PassPlan) -> tuple:
    return (plan.x.sql("duckdb"), plan.trailing.sql("duckdb") if plan.trailing is not None else None,
            plan.condition.sql("duckdb") if plan.condition is not None else None)
