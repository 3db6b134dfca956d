"""Centred moment pass: sums of deviations from the group mean, for measures whose plain sums
would cancel (a variance as Σw·x²/W − μ² loses every digit when the spread is small).

mean CTE:    keys, μ = T/W, and μ again where T > 0 (NULL elsewhere: the divisor of r = x/μ, so no
             engine divides by zero)     (T and W ride on the scope's main aggregate)
centred CTE: keys, Σ w·f(x, μ) …  over the scope's rows joined to their group's mean
One extra scan of the source and a hash join on the group keys; no sort.

Adaptive variant (DuckDB; plan.choose_variant): every call also has its one-pass form on compensated
sums of the main aggregate (FSUM), with an error bound (catalog/moment.py); the one CTE holds both
per group. The mean CTE keeps only the groups where some bound exceeds ADAPTIVE_ACCURACY of its
value, so the centred CTE scans and joins for those groups alone, and DuckDB skips that scan when
there are none. Each result is the centred value where its group was centred, else the one-pass
value.
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlglot import exp

from uneven.catalog.moment import ADAPTIVE_ACCURACY
from uneven.catalog.spec import PassKind
from uneven.compiler.passes.moment import MainAggregate, MomentContext
from uneven.compiler.passes.source import Source, cte, join_on_keys, key_name, table
from uneven.sqltree import build as s


class CentredContext(MomentContext):
    """Row-level x, w and the group mean ``mu``; ``sum(term)`` sums over the valid rows of the group in
    the centred CTE, while ``W``, ``T``, ``n`` and ``min_x`` stay on the main aggregate."""

    def __init__(self, main: MainAggregate, x, w, condition, name: str):
        super().__init__(main, x, w, condition)
        self.name = name
        self.terms: dict[exp.Expression, tuple[str, exp.Expression]] = {}
        self.used: set[str] = set()

    row_mean = True  # r = x/μ at row level: the log and power measures take their cancellation-free form

    @property
    def mu(self):
        return s.col("_uv_mu", f"{self.name}_mean")

    @property
    def mu_divisor(self):
        """μ where the group's T > 0, else NULL: the divisor of r = x/μ (no engine divides by 0)."""
        self.used.add("ratio")
        return s.col("_uv_mup", f"{self.name}_mean")

    @property
    def r(self):
        """x/μ at row level (NULL when the group's T ≤ 0)."""
        return s.div(self.x, self.mu_divisor)

    def sum(self, term: exp.Expression) -> exp.Expression:
        # the centred CTE reads only this pass's valid rows (its WHERE), so terms need no CASE
        agg = s.agg_sum(term)
        key = agg  # the tree itself (compared structurally), not its generated text
        if key not in self.terms:
            self.terms[key] = (f"_uv_t{len(self.terms) + 1}", agg)
        return s.col(self.terms[key][0], self.name)


def lower_centred_pass(source: Source, main: MainAggregate, plan, name: str
                       ) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """CTEs of one centred pass and, for each call key, its result expression (final SELECT)."""
    adaptive = plan.variant == "adaptive"
    ctx = CentredContext(main, plan.x, plan.trailing, plan.condition, name)
    ctx.compensated = adaptive  # μ from the same compensated W and T as the one-pass forms
    results = {call.key: call.measure.build(ctx, call.params) for call in plan.calls}
    if not ctx.terms:  # e.g. atkinson(x, 0) alone: exactly 0 from the main aggregate, no centred sum
        return [], results  # (a CTE selecting no column is a syntax error on SQLite)
    nkeys = len(source.keys)
    keys = [s.col(key_name(i)) for i in range(nkeys)]
    means = [s.named(s.div(ctx.T, ctx.W), "_uv_mu")]
    if "ratio" in ctx.used:
        means.append(s.named(s.case(s.gt(ctx.T, s.lit(0.0)), s.div(ctx.T, ctx.W)), "_uv_mup"))
    mean_name = f"{name}_mean"
    ctes = []
    if adaptive:
        one, mean = _one_pass(plan, main, name, keys, means, results)
        ctes.append(one)
    else:
        mean = _from_main(exp.Select(expressions=[*keys, *means]), main)
    results = {key: ctx.checked(value) for key, value in results.items()}
    marker: list[exp.Expression] = [s.alias(s.agg_count_star(), "_uv_rows")] if adaptive else []
    rows = source.rows([*source.key_projections(), *(s.named(e, n) for n, e in ctx.terms.values()), *marker],
                       ctx.valid_condition(), group_by=[k.copy() for k in source.keys] or None,
                       join=join_on_keys(source.keys, mean_name))
    return ctes + [cte(mean, mean_name), cte(rows, name)], results


def _one_pass(plan, main: MainAggregate, name: str, keys: Sequence[exp.Expression], means: Sequence[exp.Expression],
              results: dict) -> tuple[exp.CTE, exp.Select]:
    """The adaptive variant's ``_one`` CTE (per group: μ, and each call's one-pass value and error
    bound over the main aggregate's compensated sums) and the mean SELECT that keeps the groups some
    bound sends to the centred pass. Each result becomes the centred value where its group was
    centred, else the one-pass value (``results`` is updated in place)."""
    one_name = f"{name}_one"
    one = MomentContext(main, plan.x, plan.trailing, plan.condition)
    one.compensated = True
    centred_here = s.gt(exp.Coalesce(this=s.col("_uv_rows", name), expressions=[s.lit(0)]), s.lit(0))
    columns, need = [], None
    for i, call in enumerate(dict((c.key, c) for c in plan.calls).values()):
        value = call.measure.build(one, call.params)
        columns += [s.alias(value, f"_uv_v{i + 1}"),
                    s.alias(call.measure.error_bound(one, call.params, value), f"_uv_b{i + 1}")]
        need = s.or_(need, _needs_centring(s.col(f"_uv_v{i + 1}"), s.col(f"_uv_b{i + 1}")))
        results[call.key] = s.case(centred_here, results[call.key], s.col(f"_uv_v{i + 1}", one_name))
    one_select = _from_main(exp.Select(expressions=[k.copy() for k in keys] + [m.copy() for m in means] + columns),
                            main)
    mean = exp.Select(expressions=[k.copy() for k in keys] + [s.col(m.alias) for m in means]
                      ).from_(table(one_name), copy=False).where(need, copy=False)
    return cte(one_select, one_name), mean


def _from_main(select: exp.Select, main: MainAggregate) -> exp.Select:
    """``select`` FROM the main aggregate, whose columns it reads unqualified."""
    select = select.from_(table(main.name), copy=False)
    # transform is annotated Expr; with copy=False it returns the Select it was given
    return select.transform(lambda n: s.col(n.name) if isinstance(n, exp.Column) and n.table == main.name else n,  # type: ignore[return-value]
                            copy=False)


def _needs_centring(value: exp.Expression, bound: exp.Expression) -> exp.Expression:
    """TRUE where the one-pass value is not finite, or its bound is not finite or exceeds
    ADAPTIVE_ACCURACY·|value|; FALSE where the value is NULL (outside the measure's domain: so is the
    centred value)."""
    finite = lambda e: s.gt(s.lit(1.0), s.mul(e.copy(), s.lit(0.0)))  # noqa: E731 (NULL for NULL)
    ok = s.and_(finite(value), finite(bound),
                exp.LTE(this=bound.copy(), expression=s.mul(s.lit(ADAPTIVE_ACCURACY), s.absval(value.copy()))))
    return exp.Coalesce(this=exp.Not(this=exp.Paren(this=ok)), expressions=[exp.false()])


# the registry's entry (passes/registry.py)
KIND = PassKind.CENTRED
PREFIX = "cen"


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    assert name is not None  # a pass with a PREFIX is given its CTE name
    return lower_centred_pass(source, main, plan, name)
