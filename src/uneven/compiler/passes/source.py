"""The rows a scope aggregates: its FROM, joins and WHERE, plus its resolved group keys."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from sqlglot import exp

from uneven.sqltree import build as s
from uneven.sqltree.build import cte, grouped, table  # noqa: F401  (re-exported to the passes)


def key_name(i: int) -> str:
    return f"_uv_k{i + 1}"


@dataclass
class Source:
    select: exp.Select  # the scope's original SELECT (read only)
    keys: list[exp.Expression]  # resolved GROUP BY expressions, in order

    def key_projections(self) -> list[exp.Expression]:
        return [s.named(k.copy(), key_name(i)) for i, k in enumerate(self.keys)]

    def key_columns(self, table: str | None = None) -> list[exp.Column]:
        return [s.col(key_name(i), table) for i in range(len(self.keys))]

    def rows(self, projections: Sequence[exp.Expression], condition: exp.Expression | None = None,
             group_by: Sequence[exp.Expression] | None = None, join: exp.Join | None = None) -> exp.Select:
        """SELECT projections FROM <scope's FROM and joins [+ join]> WHERE <scope's WHERE AND condition>."""
        out = exp.Select(expressions=projections)
        for arg in ("from_", "joins", "laterals"):
            value = self.select.args.get(arg)
            if value:
                out.set(arg, [v.copy() for v in value] if isinstance(value, list) else value.copy())
        if join is not None and out.args.get("from_") is None:
            out.set("from_", exp.From(this=join.this.copy()))  # no FROM (SELECT cv(2.0)): read the joined table
        elif join is not None:
            out.append("joins", join)
        where = self.select.args.get("where")
        cond = s.and_(where.this.copy() if where else None, condition)
        if cond is not None:
            out.set("where", exp.Where(this=cond))
        if group_by:
            out.set("group", exp.Group(expressions=group_by))
        return out


def checked_weight(w: exp.Expression, keys: Sequence[exp.Expression] = ()) -> exp.Expression:
    """The weight as DOUBLE, aborting the query on a negative, NaN or infinite one (DuckDB ``error``);
    the message names the argument and, when ``keys`` are given, the group of the row."""
    label = weight_label(w)
    wd = s.cast_double(w.copy())
    return exp.Case(ifs=[
        exp.If(this=s.lt(wd.copy(), s.lit(0.0)),
               true=row_error(f"uneven: negative weight in the weight argument {label}", keys)),
        exp.If(this=not_finite(wd), true=row_error(f"uneven: NaN or infinite weight in the weight argument "
                                                    f"{label}", keys)),
    ], default=wd.copy())


def checked_value(x: exp.Expression, keys: Sequence[exp.Expression] = ()) -> exp.Expression:
    """The value as DOUBLE, aborting the query on NaN or ±infinity (a sum over them would be NaN or
    infinite, never a usable measure); the message names the argument and the group of the row."""
    xd = s.cast_double(x.copy())
    return s.case(not_finite(xd), row_error(f"uneven: NaN or infinite value in the value argument {weight_label(x)}",
                                            keys), xd.copy())


def checked_rows(source: Source, x: exp.Expression, w: exp.Expression | None,
                 condition: exp.Expression | None) -> tuple[list[exp.Expression], exp.Expression]:
    """(projections, row condition) of a pass that orders its rows by value (ordered, refine, stream):
    ``checked_values`` of x alone, as ``_uv_x``."""
    proj, cond, _ = checked_values(source, [(x, "_uv_x")], w, condition)
    return proj, cond


def checked_values(source: Source, values: Sequence[tuple[exp.Expression, str]], w: exp.Expression | None,
                   condition: exp.Expression | None, leading: Sequence[exp.Expression] = (),
                   present: Sequence[exp.Expression] = ()) -> tuple[list[exp.Expression], exp.Expression,
                                                                    exp.Expression]:
    """(projections, row condition, kept) of a pass's rows under the input policy (docs/input-policy.md):
    the group keys, the ``leading`` projections as they are, each (value, name) of ``values`` checked (NaN
    or ±infinity stops the query with the error naming the row's group) and w checked as ``_uv_w``;
    ``kept`` the FILTER ``condition`` with every value and each of ``present`` not NULL, the row
    condition ``kept`` and the weight > 0."""
    proj = source.key_projections() + list(leading) + [s.named(checked_value(v, source.keys), n) for v, n in values]
    kept = s.and_(s.paren(condition.copy()) if condition is not None else None,
                  *[s.not_null(v.copy()) for v, _ in values], *[s.not_null(p.copy()) for p in present])
    cond = kept.copy()
    if w is not None:
        cw = checked_weight(w, source.keys)
        proj.append(s.named(cw, "_uv_w"))
        cond = s.and_(cond, s.gt(cw.copy(), s.lit(0.0)))
    return proj, cond, kept


def binned_rows(source: Source, x: exp.Expression, w: exp.Expression | None, condition: exp.Expression | None,
                key: exp.Expression, key_alias: str) -> exp.Select:
    """SELECT keys, _uv_x, _uv_w, ``key`` AS ``key_alias`` FROM (the checked rows) AS _uv_v: a pass
    that groups its rows into bins of the value (refine, summary). ``key`` reads ``_uv_x``, the
    checked value, so a NaN or infinite value stops the query with the input policy's message before
    a LN or a cast in the key can fail on it."""
    proj, cond = checked_rows(source, x, w, condition)
    checked = exp.Subquery(this=source.rows(proj, cond),
                           alias=exp.TableAlias(this=exp.to_identifier("_uv_v", quoted=True)))
    cols = source.key_columns() + [s.col("_uv_x")] + ([s.col("_uv_w")] if w is not None else [])
    return exp.Select(expressions=cols + [s.alias(key, key_alias)]).from_(checked)


def value_weight_rows(x: exp.Expression, w: exp.Expression | None, condition: exp.Expression | None,
                      weight_name: str = "_uv_w", keys: Sequence[exp.Expression] | None = None
                      ) -> tuple[list[exp.Expression], exp.Expression]:
    """(projections, row condition) of a pass that reads (value, weight) rows: x as DOUBLE ``_uv_x``
    and the checked weight as ``weight_name``; rows within ``condition`` (a FILTER or WHERE) whose
    value is not NULL and whose weight is > 0. With ``keys`` (the group keys, possibly none), x is
    checked too (NaN and ±infinity stop the query) and the errors name the row's group."""
    xd = s.cast_double(x.copy()) if keys is None else checked_value(x, keys)
    proj: list[exp.Expression] = [s.alias(xd, "_uv_x")]
    cond = s.and_(s.paren(condition.copy()) if condition is not None else None, s.not_null(x.copy()))
    if w is not None:
        cw = checked_weight(w, keys or ())
        proj.append(s.alias(cw, weight_name))
        cond = s.and_(cond, s.gt(cw.copy(), s.lit(0.0)))
    return proj, cond


def valid_value(x: exp.Expression, keys: Sequence[exp.Expression] = ()) -> exp.Expression:
    """Row condition: the value is not NULL, and (checked) finite."""
    return s.not_null(checked_value(x, keys))


def not_finite(xd: exp.Expression) -> exp.Expression:
    """x·0 <> 0: true for NaN and ±infinity (their product with 0 is NaN), false for every finite x.
    Portable: ``x <> x`` does not find NaN where NaN equals itself (DuckDB, PostgreSQL, Spark), and
    isnan/isinf are not in every engine."""
    return s.neq(s.mul(xd.copy(), s.lit(0.0)), s.lit(0.0))


def finite_or_null(e: exp.Expression) -> exp.Expression:
    """e where it is a finite number, else NULL (a sum past the DOUBLE range, about 1.8e308, is
    infinite or NaN: no measure is defined from it)."""
    return s.case(s.gt(s.lit(1.0), s.mul(e.copy(), s.lit(0.0))), e.copy())


def row_error(message: str, keys: Sequence[exp.Expression] = ()) -> exp.Expression:
    """error('<message> (the group k1=…, k2=…)') with the row's key values; the group is left out
    when the scope has no keys (one group: the whole input)."""
    if not keys:
        return s.raise_error(f"{message} (the whole input)")
    parts: list[exp.Expression] = [s.lit(f"{message} (")]
    for i, key in enumerate(keys):
        shown = exp.Coalesce(this=exp.cast(key.copy(), "varchar"), expressions=[s.lit("NULL")])
        parts += [s.lit(("the group " if i == 0 else ", ") + f"{key.sql('duckdb')}="), shown]
    parts.append(s.lit(")"))
    return s.raise_error_expr(exp.Concat(expressions=parts))


def weight_label(w: exp.Expression) -> str:
    return w.sql("duckdb")


def build_results(calls: list, ctx, name: str) -> tuple[list[exp.Expression], dict[tuple, exp.Expression]]:
    """One aggregate column per distinct call (``_uv_r1`` …) and, per call key, its column in ``name``."""
    columns: list[exp.Expression] = []
    results: dict[tuple, exp.Expression] = {}
    for call in calls:
        if call.key in results:
            continue
        built = call.measure.build(ctx, call.params)
        if isinstance(built, exp.Column) and built.table:
            results[call.key] = built  # already a column of a CTE of its own (e.g. a Lorenz grid)
            continue
        column = f"_uv_r{len(columns) + 1}"
        columns.append(s.named(built, column))  # built for this column alone
        results[call.key] = s.col(column, name)
    return columns, results


def join_on_keys(keys: Sequence[exp.Expression], other: str, left: str | None = None) -> exp.Join:
    """JOIN other ON each key IS NOT DISTINCT FROM other._uv_kN (a NULL key is a group); CROSS JOIN
    without keys. Keys are columns of ``left`` when given, else the scope's key expressions."""
    if not keys:
        return exp.Join(this=table(other), kind="CROSS")
    cond = s.and_(*[exp.NullSafeEQ(this=s.col(key_name(i), left) if left else k.copy(),
                                   expression=s.col(key_name(i), other)) for i, k in enumerate(keys)])
    return exp.Join(this=table(other), side="LEFT" if left else None, on=cond)
