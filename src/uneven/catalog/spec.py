"""The shape of one catalog entry: everything the compiler and the tests need to know about a measure."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from enum import StrEnum
from typing import Literal

from sqlglot import exp


class PassKind(StrEnum):
    """The kinds of pass (compiler/passes): a catalog entry names the one its measure needs; the
    planner may turn an ordered pass into a refine pass, and method="bounded" uses the summary pass.
    Members equal their names as text, so an entry may write ``passes="ordered"``."""

    MOMENT = "moment"
    CENTRED = "centred"
    ORDERED = "ordered"
    REFINE = "refine"
    STREAM = "stream"
    ENTITY = "entity"
    SUBGROUP = "subgroup"
    RANKED = "ranked"
    PAIRED = "paired"
    LINEARIZED = "linearized"
    BOOTSTRAP = "bootstrap"
    SUMMARY = "summary"


@dataclass(frozen=True)
class Param:
    """A positional argument after the value: a numeric constant (p, k, alpha, eps ...), checked at
    compile time, or (kind ``"column"``) a further row-level expression such as the variable a
    concentration index ranks by or the subgroup of a decomposition. Constants reach ``build`` as
    ``params``; columns reach the pass (``MeasureCall.columns``), which keys on them."""

    name: str
    kind: Literal["fraction", "number", "nonnegative", "count", "column"]
    doc: str = ""

    def check(self, value: float) -> str | None:
        """Return a problem description, or None when ``value`` is acceptable."""
        if not math.isfinite(value):
            return f"{self.name} must be a finite number, got {value!r}"
        if self.kind == "fraction" and not 0.0 <= value <= 1.0:
            return f"{self.name} must be a fraction between 0 and 1, got {value!r}"
        if self.kind == "nonnegative" and value < 0:
            return f"{self.name} must be at least 0, got {value!r}"
        if self.kind == "count" and (value != int(value) or value < 1):
            return f"{self.name} must be a whole number of at least 1, got {value!r}"
        return None


@dataclass(frozen=True)
class Measure:
    """One measure: its SQL name, arguments, pass, result expression and numpy reference.

    ``build(ctx, params)`` returns the sqlglot expression of the result, written against the
    context of its pass, whose shape catalog/contexts.py declares: for ordered and entity passes an
    aggregate over the pass's rows, for the moment pass an expression over sums the context registers.
    """

    name: str
    # (without, with) the trailing argument; a kind may be written as its string (PassKind is a StrEnum)
    passes: PassKind | str | tuple[PassKind | str, PassKind | str]
    params: tuple[Param, ...]
    trailing: Literal["weight", "entity"] | None
    formula: str
    build: Callable[..., exp.Expression]
    reference: Callable[..., object]
    returns: Literal["double", "lorenz_points"] = "double"
    domain: str = ""
    max_count: int | None = None  # cap for a "count" parameter (e.g. lorenz_curve points)
    options: tuple[str, ...] = ("strict",)  # named arguments the measure accepts
    value: str = "x"  # the value argument's name in the signature
    # which of (value, *column arguments) the pass sorts or groups by: the pass receives it as its x
    # and the other column arguments, in order, as its columns (concentration(y, rank_by) sorts by 1)
    sort_arg: int = 0
    check: Callable[[tuple[float, ...]], str | None] | None = None  # relations between constants (lo < hi)
    # named arguments that shape the pass (calls differing in them get passes of their own)
    pass_options: tuple[str, ...] = ()
    # read_options(options, read=dialect) -> settings: checks the named arguments' values (constants
    # through sqltree/constants.py, in the read dialect), raises ValueError
    read_options: Callable[..., dict] | None = None
    # error_bound(ctx, params, value) -> a bound on |value − exact| of the one-pass form ``value`` built
    # on a moment context with compensated sums; with it a centred measure may skip the centred
    # pass where the bound is small enough (the "adaptive" variant, compiler/passes/centred.py)
    error_bound: Callable[..., exp.Expression] | None = None
    # stream(acc, params) -> per-group numpy results from the streamed ordered pass's group
    # quantities (catalog/kernels.py); with it an ordered measure may run as a stream on DuckDB
    stream: Callable[..., object] | None = None

    def pass_for(self, has_trailing: bool) -> PassKind:
        if isinstance(self.passes, tuple):
            return PassKind(self.passes[1] if has_trailing else self.passes[0])
        return PassKind(self.passes)

    @property
    def constants(self) -> tuple[Param, ...]:
        return tuple(p for p in self.params if p.kind != "column")

    @property
    def signature(self) -> str:
        args = ", ".join([self.value, *(p.name for p in self.params)])
        if self.trailing:
            args += f"[, {'w' if self.trailing == 'weight' else 'entity'}]"
        return f"{self.name}({args})"
