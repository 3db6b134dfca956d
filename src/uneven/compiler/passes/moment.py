"""Moment pass: weighted sums that ride on the scope's own GROUP BY, with its ordinary aggregates.

One CTE per scope (``_uv_agg_N``): the group keys, every ordinary aggregate the scope uses
(``count(*)``, ``avg(x)`` …) and every sum the moment measures register. Each sum counts only the
rows valid for its (value, weight) pair: ``SUM(CASE WHEN x IS NOT NULL AND w > 0 THEN term END)``.
Measure results are expressions over those sums, placed where the calls were.

The input checks of a pair (NaN or infinite value or weight, negative weight: docs/input-policy.md)
run once per row, inside the pair's weight total W (the sum of the weights of the rows whose value is
not NULL, or an error), and every result of the pair reads W, so no engine prunes it. The other sums
test only NULL and w > 0: with the checks repeated inside each sum's CASE they cost half of a moment
query (engines do not share subexpressions that can raise; bench/README.md, "Moment measures").
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlglot import exp

from uneven.catalog.spec import PassKind
from uneven.compiler.passes.source import Source, finite_or_null, not_finite, row_error, weight_label
from uneven.sqltree import build as s


class MainAggregate:
    """Collects the scope's aggregate columns and lowers them to the main CTE."""

    def __init__(self, name: str, keys: Sequence[exp.Expression] = ()):
        self.name = name
        self.keys = list(keys)  # the scope's group keys (row level), named in data errors
        self.columns: dict[exp.Expression, tuple[str, exp.Expression]] = {}  # tree → (column name, tree)

    def add(self, expr: exp.Expression, prefix: str = "_uv_t") -> exp.Column:
        # keyed by the tree itself (sqlglot compares trees structurally): generating each sum's SQL
        # text as its key took most of a moment query's compile
        key = expr
        if key not in self.columns:
            count = sum(1 for n, _ in self.columns.values() if n.startswith(prefix))
            self.columns[key] = (f"{prefix}{count + 1}", expr)
        return s.col(self.columns[key][0], self.name)

    def lower(self, source: Source) -> exp.CTE:
        # each sum's tree is placed here once (the dict keeps it only as its key, for lookups)
        proj = source.key_projections() + [s.named(e, n) for n, e in self.columns.values()]
        if not proj:
            proj = [s.alias(s.agg_count_star(), "_uv_n")]
        rows = source.rows(proj, group_by=[k.copy() for k in source.keys] or None)
        return exp.CTE(this=rows, alias=exp.TableAlias(this=exp.to_identifier(self.name, quoted=True)))


class MomentContext:
    """Row-level x and w of one (value, weight) pair, and sums over its valid rows."""

    def __init__(self, main: MainAggregate, x: exp.Expression, w: exp.Expression | None,
                 condition: exp.Expression | None = None):
        self.main = main
        self._x, self._w = x, w
        present = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(self.x))
        checks = [exp.If(this=not_finite(self.x), true=row_error(
            f"uneven: NaN or infinite value in the value argument {weight_label(x)}", main.keys))]
        valid = present
        if w is not None:
            checks += [exp.If(this=s.lt(self.w, s.lit(0.0)), true=row_error(
                           f"uneven: negative weight in the weight argument {weight_label(w)}", main.keys)),
                       exp.If(this=not_finite(self.w), true=row_error(
                           f"uneven: NaN or infinite weight in the weight argument {weight_label(w)}", main.keys))]
            valid = s.and_(present, s.gt(self.w, s.lit(0.0)))
        # the weight of every present row unless a check raises (a zero weight adds nothing to W)
        self._checked_weight = s.case(present.copy(), exp.Case(ifs=checks, default=self.w))
        self._valid = valid

    @property
    def x(self):
        return s.cast_double(self._x.copy())

    @property
    def w(self):
        return s.cast_double(self._w.copy()) if self._w is not None else s.lit(1.0)

    def valid_condition(self) -> exp.Expression:
        """The row condition of this pair: FILTER, value not NULL, weight > 0 (the input checks are
        ``checked``'s aggregate, which every result reads)."""
        return self._valid.copy()

    def checked(self, result: exp.Expression) -> exp.Expression:
        """``result``, reading W, the sum that runs the pair's input checks: CASE WHEN W ≥ 0 (or NULL:
        no row) THEN result (W is nothing else: a failed check raises)."""
        if getattr(self, "_checked_weight", None) is None:  # rows checked where they are read (macros)
            return result
        return s.case(exp.GTE(this=exp.Coalesce(this=self.W, expressions=[s.lit(0.0)]), expression=s.lit(0.0)),
                      result)

    # sums as DuckDB's FSUM (compensated: within about 2u·Σ|terms| whatever the row count), for the
    # one-pass forms of the adaptive centred variant (passes/centred.py)
    compensated = False

    def _when_valid(self, term):
        return s.case(self._valid.copy(), term)

    def _sum(self, e: exp.Expression) -> exp.Expression:
        return exp.Anonymous(this="FSUM", expressions=[e]) if self.compensated else s.agg_sum(e)

    def _main_sum(self, term: exp.Expression) -> exp.Expression:
        return self.main.add(self._sum(self._when_valid(term)))

    def sum(self, term: exp.Expression) -> exp.Expression:
        return self._main_sum(term)

    def min(self, term: exp.Expression) -> exp.Expression:
        return self.main.add(s.agg_min(self._when_valid(term)))

    def max(self, term: exp.Expression) -> exp.Expression:
        return self.main.add(exp.Max(this=self._when_valid(term)))

    def _once(self, name: str, make) -> exp.Expression:
        """A group aggregate built once per context (building and hashing a sum's tree on every use
        was most of a moment query's compile time)."""
        cache = self.__dict__.setdefault("_aggregates", {})
        key = (name, self.compensated)
        if key not in cache:
            cache[key] = make()
        return cache[key].copy()

    @property
    def W(self):
        checked = getattr(self, "_checked_weight", None)
        if checked is None:
            return self._once("W", lambda: self._main_sum(self.w))
        return self._once("W", lambda: self.main.add(self._sum(checked.copy())))

    @property
    def T(self):
        return self._once("T", lambda: finite_or_null(self._main_sum(s.mul(self.w, self.x))))

    @property
    def n(self):
        return self._once("n", lambda: self.main.add(exp.Count(this=self._when_valid(s.lit(1)))))

    @property
    def min_x(self):
        return self._once("min_x", lambda: self.min(self.x))


def lower_moment_pass(source: Source, main: MainAggregate, plan, name: str | None = None
                      ) -> tuple[list[exp.CTE], dict[tuple, exp.Expression]]:
    """No CTE of its own: register the pass's sums on the main aggregate; return each call's result."""
    ctx = MomentContext(main, plan.x, plan.trailing, plan.condition)
    return [], {call.key: ctx.checked(call.measure.build(ctx, call.params)) for call in plan.calls}


# the registry's entry (passes/registry.py)
KIND = PassKind.MOMENT
PREFIX = None  # no CTE of its own: the sums ride on the main aggregate


def lower(source: Source, main, plan, name: str | None, settings) -> tuple[list[exp.CTE], dict]:
    return lower_moment_pass(source, main, plan, name)
