"""Measure objects for the builder, one factory per catalog measure (user-defined ones included).

``ineqsql.gini("income", weight="w")`` and ``ineqsql.top_share("income", 0.1)`` return a
:class:`MeasureCall`: the measure's catalog entry, the value column, its checked parameters and the
optional weight/entity column. It becomes a sqlglot call node whose columns are quoted identifiers.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from sqlglot import exp

from ineqsql import catalog
from ineqsql.errors import IneqsqlError, MeasureArgumentError


class UnknownMeasureError(IneqsqlError, AttributeError):
    """No catalog measure (and no attribute of the package) has this name."""


def column(name) -> exp.Expression:
    """A column given by name (always a quoted identifier, never parsed) or as a sqlglot expression."""
    if isinstance(name, exp.Expression):
        return name.copy()
    if isinstance(name, str) and name:
        return exp.column(name, quoted=True)
    raise MeasureArgumentError(f"expected a column name (a non-empty string), got {name!r}")


COLUMN_OPTIONS = ("strata", "psu", "key")  # named arguments naming a column; the others are constants


def option_value(name: str, value) -> exp.Expression:
    if name in COLUMN_OPTIONS:
        return column(value)
    if isinstance(value, bool):
        return exp.Boolean(this=value)
    if isinstance(value, numbers.Real):
        return exp.Literal.number(repr(value))
    if isinstance(value, str):
        return exp.Literal.string(value)
    raise MeasureArgumentError(f"{name} must be a number or a string, got {value!r}")


@dataclass(frozen=True)
class MeasureCall:
    name: str
    value: object
    params: tuple[float, ...]
    trailing: object = None
    options: tuple[tuple[str, object], ...] = ()  # named arguments (name := value), e.g. psu, level

    def to_expression(self) -> exp.Anonymous:
        args = [column(self.value)] + [exp.Literal.number(repr(p)) for p in self.params]
        if self.trailing is not None:
            args.append(column(self.trailing))
        args += [exp.PropertyEQ(this=exp.to_identifier(n), expression=option_value(n, v)) for n, v in self.options]
        return exp.Anonymous(this=self.name, expressions=args)

    def __repr__(self) -> str:
        return self.to_expression().sql("duckdb")


def measure_factory(name: str):
    """The builder function of one catalog measure, checking its arguments as the compiler does."""
    spec = catalog.lookup(name)
    if spec is None or name.startswith("_"):
        known = ", ".join(sorted(catalog.MEASURES))
        raise UnknownMeasureError(f"ineqsql has no measure or attribute {name!r}; measures: {known}")

    def make(value, *params, **named):
        fn = f"{spec.name}()"
        if not isinstance(value, (str, exp.Expression)):
            raise MeasureArgumentError(f"{fn}: the value must be a column name, got {value!r}", function=spec.name)
        trailing = None
        if spec.trailing:
            trailing = named.pop(spec.trailing, None)
            if trailing is not None and not isinstance(trailing, (str, exp.Expression)):
                raise MeasureArgumentError(f"{fn}: {spec.trailing} must be a column name, got {trailing!r}",
                                           function=spec.name)
        for p in spec.params:  # parameters may also be given by name
            if p.name in named:
                params = params + (named.pop(p.name),)
        options = tuple((n, named.pop(n)) for n in list(named) if n in spec.options)
        for n, v in options:
            if n in COLUMN_OPTIONS and not isinstance(v, (str, exp.Expression)):
                raise MeasureArgumentError(f"{fn}: {n} must be a column name, got {v!r}", function=spec.name)
            option_value(n, v)
        if named:
            accepted = ", ".join(o for o in spec.options) or "none"
            raise MeasureArgumentError(f"{fn}: unknown argument {min(named)!r}; signature: {spec.signature}; "
                                       f"named options: {accepted}", function=spec.name)
        if len(params) != len(spec.params):
            raise MeasureArgumentError(f"{fn} takes {len(spec.params)} parameter(s) after the value "
                                       f"({spec.signature}); got {len(params)}", function=spec.name)
        checked = []
        for p, v in zip(spec.params, params):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or math.isnan(float(v)):
                raise MeasureArgumentError(f"{fn}: {p.name} must be a number, got {v!r}", function=spec.name)
            problem = p.check(float(v))
            if problem is None and p.kind == "count" and spec.max_count and v > spec.max_count:
                problem = f"{p.name} must be at most {spec.max_count}, got {v}"
            if problem:
                raise MeasureArgumentError(f"{fn}: {problem}", function=spec.name)
            checked.append(float(v))
        return MeasureCall(spec.name, value, tuple(checked), trailing, options)

    make.__name__ = spec.name
    make.__doc__ = f"{spec.signature}: {spec.formula} (domain: {spec.domain or 'any'}). " \
                   f"Trailing argument by name: {spec.trailing}=column." if spec.trailing else spec.formula
    return make
