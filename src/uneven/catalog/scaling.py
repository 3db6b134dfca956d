"""Sums that keep their value when a product overflows although the group's totals fit.

On ``[1e308, 1, 2]`` the total T fits in a double, yet x², w·x·2C or (x − μ)² do not. A measure
that is scale-free (Gini, CV, HHI shares) is built twice: on the values as they are, and on the
values times ``DOWN`` = 2⁻⁵¹² (a power of two: the product is exact, so the scaled form keeps
every digit). The plain form is used where it is finite; elsewhere (an overflowed sum is ±inf,
or NaN after inf − inf) the scaled one. The scaled form alone would not do: values below about
1e-154 lose digits there (subnormal products), and those are exactly the groups where the plain
form is finite. Where even the scaled form overflows, the result is NULL (never a made-up number).
"""

from __future__ import annotations

from sqlglot import exp

from uneven.sqltree import build as s

DOWN = 2.0 ** -512  # 7.458340731200207e-155, written exactly by its shortest repr


def finite(e: exp.Expression) -> exp.Expression:
    """e where it is a finite number, else NULL: 1 > e·0 is true for finite e, false for NaN (NaN
    compares above every number in DuckDB and Spark; SQLite has no NaN, PostgreSQL raises first)
    and NULL for NULL."""
    return s.case(s.gt(s.lit(1.0), s.mul(e.copy(), s.lit(0.0))), e)  # e: the caller's new tree, placed once


def plain_or_scaled(build) -> exp.Expression:
    """COALESCE(finite(build(1)), finite(build(DOWN))): ``build(scale)`` returns the measure with
    every value multiplied by ``scale`` (a literal 1.0 disappears from products, see sqltree.build.mul)."""
    return exp.Coalesce(this=finite(build(1.0)), expressions=[finite(build(DOWN))])


def times(e: exp.Expression, scale: float, floor: float = 2.0 ** 100) -> exp.Expression:
    """e·scale; in the scaled form (scale < 1) a magnitude below ``floor`` counts as 0. The scaled
    form is used only where the plain one overflowed, so such terms are below 1e-200 of the largest;
    dropping them keeps every product of the scaled form away from 0 (PostgreSQL raises "underflow"
    when a product of non-zero doubles rounds to 0, and it evaluates both forms)."""
    if scale == 1.0:
        return e
    return s.case(s.lt(s.absval(e.copy()), s.lit(floor)), s.lit(0.0), s.mul(e, s.lit(scale)))
