"""Measure objects for the builder, one factory per catalog measure (user-defined ones included).

``uneven.gini("income", weight="w")`` and ``uneven.top_share("income", 0.1)`` return a
:class:`MeasureCall`: the measure's catalog entry, the value column, its checked parameters and the
optional weight/entity column. It becomes a sqlglot call node whose columns are quoted identifiers.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from sqlglot import exp

from uneven import catalog
from uneven.errors import MeasureArgumentError, UnevenError
from uneven.sqltree.constants import ConstantError, evaluate_constant


class UnknownMeasureError(UnevenError, AttributeError):
    """No catalog measure (and no attribute of the package) has this name."""


def column(name) -> exp.Expression:
    """A column given by name (always a quoted identifier, never parsed) or as a sqlglot expression."""
    if isinstance(name, exp.Expression):
        return name.copy()
    if isinstance(name, str) and name:
        return exp.column(name, quoted=True)
    raise MeasureArgumentError(f"expected a column name (a non-empty string), got {name!r}")


# named options whose value is a row-level column (the others are constants: numbers, true/false, text)
COLUMN_OPTIONS = ("strata", "psu", "key")


@dataclass(frozen=True)
class ColumnArg:
    """A column argument of a measure (the ranking variable of ``concentration``, a subgroup …)."""

    value: object

    def __repr__(self) -> str:
        return column(self.value).sql("duckdb")


def _argument(v) -> exp.Expression:
    return column(v.value) if isinstance(v, ColumnArg) else exp.Literal.number(repr(v))


def _option(name: str, v) -> exp.Expression:
    if isinstance(v, ColumnArg):
        value = column(v.value)
    elif isinstance(v, bool):
        value = exp.Boolean(this=v)
    elif isinstance(v, str):
        value = exp.Literal.string(v)
    else:
        value = exp.Literal.number(repr(v))
    return exp.PropertyEQ(this=exp.to_identifier(name), expression=value)


@dataclass(frozen=True)
class MeasureCall:
    name: str
    value: object
    params: tuple = ()  # numbers, or ColumnArg for a column parameter
    trailing: object = None
    options: tuple = ()  # (name, value) pairs: named arguments such as strata, psu, level, strict

    def to_expression(self) -> exp.Anonymous:
        args = [column(self.value)] + [_argument(p) for p in self.params]
        if self.trailing is not None:
            args.append(column(self.trailing))
        args += [_option(n, v) for n, v in self.options]
        return exp.Anonymous(this=self.name, expressions=args)

    def __repr__(self) -> str:
        return self.to_expression().sql("duckdb")


def _read_options(spec, fn: str, named: dict) -> tuple:
    out = []
    for name in [n for n in list(named) if n in spec.options]:
        v = named.pop(name)
        if name in COLUMN_OPTIONS:
            if not isinstance(v, (str, exp.Expression)):
                raise MeasureArgumentError(f"{fn}: {name} must be a column name, got {v!r}", function=spec.name)
            v = ColumnArg(v)
        elif not isinstance(v, (bool, str, numbers.Real)) or (isinstance(v, float) and not math.isfinite(v)):
            raise MeasureArgumentError(f"{fn}: {name} must be a number, true/false or text, got {v!r}",
                                       function=spec.name)
        out.append((name, v))
    return tuple(out)


def _check_param(spec, fn: str, p, v):
    if p.kind == "column":
        if not isinstance(v, (str, exp.Expression)) or (isinstance(v, str) and not v):
            raise MeasureArgumentError(f"{fn}: {p.name} must be a column name, got {v!r}", function=spec.name)
        return ColumnArg(v)
    if isinstance(v, exp.Expression):  # a constant expression (exp.cast(0.5, "int")): its value as DuckDB computes it
        try:
            v = evaluate_constant(v, "duckdb")
        except ConstantError as e:
            raise MeasureArgumentError(f"{fn}: {p.name} {e.reason}", function=spec.name) from None
    if isinstance(v, bool) or not isinstance(v, numbers.Real) or math.isnan(float(v)):
        raise MeasureArgumentError(f"{fn}: {p.name} must be a number, got {v!r}", function=spec.name)
    problem = p.check(float(v))
    if problem is None and p.kind == "count" and spec.max_count and v > spec.max_count:
        problem = f"{p.name} must be at most {spec.max_count}, got {v}"
    if problem:
        raise MeasureArgumentError(f"{fn}: {problem}", function=spec.name)
    return float(v)


def measure_factory(name: str):
    """The builder function of one catalog measure, checking its arguments as the compiler does.

    Column parameters (``concentration("y", "x")``: the ranking variable; ``ge_between("x", 0,
    "region")``: the subgroup) take column names; named options take Python values
    (``gini_se("x", weight="w", strata="h", psu="c")``, ``gini_ci_lo(..., level=0.9)``,
    ``strict=True``), strata/psu/key as column names."""
    spec = catalog.lookup(name)
    if spec is None or name.startswith("_"):
        known = ", ".join(sorted(catalog.MEASURES))
        raise UnknownMeasureError(f"uneven has no measure or attribute {name!r}; measures: {known}")

    def make(value, *params, **named):
        fn = f"{spec.name}()"
        if not isinstance(value, (str, exp.Expression)) or (isinstance(value, str) and not value):
            raise MeasureArgumentError(f"{fn}: the value must be a column name, got {value!r}", function=spec.name)
        trailing = None
        if spec.trailing:
            trailing = named.pop(spec.trailing, None)
            if trailing is not None and not isinstance(trailing, (str, exp.Expression)):
                raise MeasureArgumentError(f"{fn}: {spec.trailing} must be a column name, got {trailing!r}",
                                           function=spec.name)
        for p in spec.params[len(params):]:  # parameters may also be given by name
            if p.name in named:
                params = params + (named.pop(p.name),)
        options = _read_options(spec, fn, named)
        if named:
            allowed = ", ".join(o for o in spec.options) or "none"
            raise MeasureArgumentError(f"{fn}: unknown argument {min(named)!r}; signature: {spec.signature}; "
                                       f"named options: {allowed}", function=spec.name)
        if len(params) != len(spec.params):
            raise MeasureArgumentError(f"{fn} takes {len(spec.params)} parameter(s) after the value "
                                       f"({spec.signature}); got {len(params)}", function=spec.name)
        checked = tuple(_check_param(spec, fn, p, v) for p, v in zip(spec.params, params))
        numbers_only = tuple(v for v in checked if not isinstance(v, ColumnArg))
        if spec.check is not None:  # relations between the constants (lo < hi), as the compiler checks
            problem = spec.check(numbers_only)
            if problem:
                raise MeasureArgumentError(f"{fn}: {problem}", function=spec.name)
        return MeasureCall(spec.name, value, checked, trailing, options)

    make.__name__ = spec.name
    make.__doc__ = f"{spec.signature}: {spec.formula} (domain: {spec.domain or 'any'}). " \
                   f"Trailing argument by name: {spec.trailing}=column." if spec.trailing else spec.formula
    return make
