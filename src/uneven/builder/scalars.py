"""Row-level helpers for the builder: equivalised income and person weights, as sqlglot trees a
measure takes in place of a column name (``uneven.gini(uneven.equivalised(…), weight=…)``).

``equivalised`` builds the call the compiler expands (compiler/scalars.py), so the builder, SQL text
and the installed macro share one definition and one set of argument checks.
"""

from __future__ import annotations

import numbers

from sqlglot import exp

from uneven.builder.measures import column
from uneven.errors import MeasureArgumentError


def equivalised(income, adults, children, scale="oecd_modified") -> exp.Expression:
    """income / household size in equivalent adults: scale 'oecd_modified' (1 / 0.5 / 0.3),
    'sqrt' (√size) or a size elasticity θ in [0, 1] (size^θ). Columns by name or as expressions."""
    value: exp.Expression
    if isinstance(scale, str):
        value = exp.Literal.string(scale)
    elif isinstance(scale, numbers.Real) and not isinstance(scale, bool):
        value = exp.Literal.number(repr(float(scale)))
    else:
        raise MeasureArgumentError(f"equivalised(): scale must be 'oecd_modified', 'sqrt' or a number between "
                                   f"0 and 1, got {scale!r}")
    return exp.Anonymous(this="equivalised", expressions=[
        column(income), column(adults), column(children),
        exp.PropertyEQ(this=exp.to_identifier("scale"), expression=value)])


def person_weight(weight, *persons) -> exp.Expression:
    """The household weight times its number of persons (the sum of the given count columns):
    each household then stands for the people in it (docs/equivalence.md)."""
    if not persons:
        raise MeasureArgumentError("person_weight(): give the column(s) counting the household's persons")
    size = column(persons[0])
    for p in persons[1:]:
        size = exp.Add(this=size, expression=column(p))
    return exp.Mul(this=column(weight), expression=exp.Paren(this=size) if len(persons) > 1 else size)
