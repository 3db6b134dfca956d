"""The interfaces a catalog entry's ``build(ctx, params)`` writes against, one per pass kind.

Each pass (compiler/passes) hands its builders an object of one of these shapes; the DuckDB macros
(duckdb_functions/aggregate.py) hand them list-based objects of the same shapes. Every member returns a
sqlglot expression. A builder reads only what its pass's shape declares, so one entry serves every
lowering of that pass.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

from sqlglot import exp


@runtime_checkable
class GroupSums(Protocol):
    """Aggregates over a group's valid rows: W = Σw, T = Σw·x, n, min x, and Σ term."""

    @property
    def W(self) -> exp.Expression: ...

    @property
    def T(self) -> exp.Expression: ...

    @property
    def n(self) -> exp.Expression: ...

    @property
    def min_x(self) -> exp.Expression: ...

    def sum(self, term: exp.Expression) -> exp.Expression: ...


@runtime_checkable
class RowValues(Protocol):
    """Row-level value x and weight w (the literal 1 when unweighted)."""

    @property
    def x(self) -> exp.Expression: ...

    @property
    def w(self) -> exp.Expression: ...


@runtime_checkable
class MomentSums(GroupSums, RowValues, Protocol):
    """The moment pass: sums that ride on the scope's GROUP BY, with the checks of its rows."""

    def min(self, term: exp.Expression) -> exp.Expression: ...

    def max(self, term: exp.Expression) -> exp.Expression: ...

    def checked(self, result: exp.Expression) -> exp.Expression: ...


@runtime_checkable
class Centred(Protocol):
    """The group mean μ and r = x/μ on every row: what a centred measure reads besides its sums
    (the ordered pass a centred call is fused onto has these and ``GroupSums``)."""

    @property
    def mu(self) -> exp.Expression: ...

    @property
    def mu_divisor(self) -> exp.Expression: ...

    @property
    def r(self) -> exp.Expression: ...


@runtime_checkable
class CentredSums(MomentSums, Centred, Protocol):
    """The centred pass: the moment pass's sums with the group mean."""


@runtime_checkable
class SortedRows(RowValues, Protocol):
    """Rows sorted by x per group: running weight C, the group minimum and total weight on every
    row, the weighted median and weight below a line, a Lorenz curve of k points, and W, T, n.
    The compiled passes are also ``GroupSums``; the macros' list context is not (its measures need
    no more), and refuses (NeedsConstant) what a macro cannot compute."""

    @property
    def W(self) -> exp.Expression: ...

    @property
    def T(self) -> exp.Expression: ...

    @property
    def n(self) -> exp.Expression: ...

    @property
    def c(self) -> exp.Expression: ...

    @property
    def min_row(self) -> exp.Expression: ...

    @property
    def W_row(self) -> exp.Expression: ...

    @property
    def median_row(self) -> exp.Expression: ...

    def below_weight_row(self, frac: float) -> exp.Expression: ...

    def poor_median_row(self, frac: float) -> exp.Expression: ...

    def lorenz_grid(self, k: int) -> exp.Expression: ...


@runtime_checkable
class EntityTotals(Protocol):
    """One row per entity: its total v and its rank r from the largest."""

    @property
    def v(self) -> exp.Expression: ...

    @property
    def r(self) -> exp.Expression: ...


@runtime_checkable
class CutMasses(Protocol):
    """The refine pass: W, T and, at a cut p, the value held below or above it and the quantile."""

    @property
    def W(self) -> exp.Expression: ...

    @property
    def T(self) -> exp.Expression: ...

    def below(self, p: float) -> exp.Expression: ...

    def above(self, p: float) -> exp.Expression: ...

    def quantile(self, p: float) -> exp.Expression: ...


@runtime_checkable
class SubgroupSums(RowValues, Protocol):
    """Rows of subgroups: subgroup totals Wg, Tg and Σ term per subgroup; group W, T, min x."""

    @property
    def Wg(self) -> exp.Expression: ...

    @property
    def Tg(self) -> exp.Expression: ...

    def sub_sum(self, term: exp.Expression) -> exp.Expression: ...

    @property
    def W(self) -> exp.Expression: ...

    @property
    def T(self) -> exp.Expression: ...

    @property
    def min_x(self) -> exp.Expression: ...


@runtime_checkable
class RankedTotals(Protocol):
    """Tie groups of the ranking variable: value i, its totals, extremes and concentration."""

    @property
    def w(self) -> exp.Expression: ...

    @property
    def Wg(self) -> exp.Expression: ...

    @property
    def c(self) -> exp.Expression: ...

    @property
    def W(self) -> exp.Expression: ...

    def value(self, i: int) -> exp.Expression: ...

    def total(self, i: int) -> exp.Expression: ...

    def T(self, i: int) -> exp.Expression: ...

    def vmin(self, i: int) -> exp.Expression: ...

    def vmax(self, i: int) -> exp.Expression: ...

    def conc(self, i: int, gini: bool = False) -> exp.Expression: ...


@runtime_checkable
class PairedGinis(Protocol):
    """Two values on the same rows: each one's Gini, their difference and its standard error."""

    @property
    def n(self) -> exp.Expression: ...

    def gini(self, v: str) -> exp.Expression: ...

    @property
    def diff(self) -> exp.Expression: ...

    @property
    def diff_se(self) -> exp.Expression: ...
