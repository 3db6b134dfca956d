"""When a linearized variance is indistinguishable from 0: the same rule on every plan.

Every plan forms a standard error's variance as a sum of products that cancel: the window plan
(compiler/passes/linearized.py) as Σ_jl c_j c_l K_jl with K_jl = (n·Q_jl − S_j·S_l)/(n − 1) from raw
sums over n units, the refine plan (compiler/passes/refine_se.py) as (n·Σu² − (Σu)²)/(n − 1), the
stream (catalog/kernels_se.py) as n/(n − 1)·cᵀMc from centred cross sums. Where the scores cancel
exactly (a Palma whose top tenth and bottom four tenths are each one tied value is a constant of the
weights; groups of two to four rows) the exact variance is 0, but the computed one keeps a rounding
residue of its terms, and the square root lifts a residue of 1e-16 to a standard error of 1e-8.

The rounding bound. A sum of n floating-point terms is off by at most γ_n·Σ|terms|, γ_n ≈ n·eps
(Higham 2002, Accuracy and Stability of Numerical Algorithms, §3.1; from memory), and by the
Cauchy–Schwarz inequality |Q_jl|, |S_j·S_l|/n and |M_jl| are at most sqrt(Q_jj·Q_ll) (or
sqrt(M_jj·M_ll)). So the computed variance is off the exact one by a multiple of eps·B,

    B = (Σ_j |c_j|·sqrt(A_j))²,  A_j = n/(n − 1)·Q_jj (raw sums) or n/(n − 1)·M_jj (centred),

and the row terms themselves, formed to a relative eps, move an exactly vanishing form by eps², not
eps. The multiple: k = 2·(K + √n), K the form's row terms. Rounding errors of independent operations
add as a random walk (Higham's rule of thumb, §2.8: common practice), so the K² products of the form
add about K·eps·B and each cross sum over n units about √n·eps of its size; 2 for the two parts
that cancel (n·Q and S·S of the raw sums, the products and their sum). The worst case (K² + n)
would zero real variances that still have two or three digits. On groups of three or four rows
(tests/test_zero_variance.py) the residue of an exact 0 measured 0.04 … 0.2·eps·B, and a real
variance of 50·eps·B (1e-12 of the estimate's square) came out on the stream right to 2e-3. A
variance at or below k·eps·B (or below 0) has no digit that rounding could not have made: it is
returned as exactly 0; above it, it is kept as computed.

Underflow. The bound above is relative; a product that rounds into the subnormal range (below 2⁻¹⁰²²)
is off by up to 2⁻¹⁰⁷⁵ whatever its size, and one below that rounds to 0. On values near 1e-300 (or
weights so small) the terms' cross sums underflow, while the coefficients (1/(W·T) for the Gini) are
near 1e300: the computed form is then 0, NaN or a rounding residue, and "exactly 0" would be a made-up
number (every measure with an error here is scale-free: the same rows times 2¹⁰⁰⁰ have a real error).
So where the terms' scale, sqrt(B) over Σ_j |c_j| (their root mean squares weighted by |c_j|), is below
2⁻⁵⁰⁰ (3e-151: their squares below 2⁻¹⁰⁰⁰, 2²² above the subnormal range, so n·2⁻¹⁰⁷⁵ stays below eps
of the sums for n up to 2²²), or a coefficient is not finite, the error is NULL, as for a group where
the variance cannot be formed (docs/input-policy.md); the exactly equal values' 0 comes first. B here
reads the raw second moments A_j = n/(n − 1)·Σ t_j² (a constant term has its size, not 0), and a term
that is 0 on every row (Σ t_j² = Σ t_j = 0: the Lorenz ordinate's terms at p = 0) counts in neither sum.
"""

from __future__ import annotations

import numpy as np
from sqlglot import exp

from uneven.sqltree import build as s

EPS = float(np.finfo(np.float64).eps)


def factor(terms: int, units):
    """k·eps of a form in ``terms`` row terms summed over ``units`` units (a number or an array)."""
    return 2.0 * (terms + np.sqrt(units)) * EPS


def bound(coefs: np.ndarray, diag: np.ndarray) -> np.ndarray:
    """B = (Σ_j |c_j|·sqrt(A_j))² per group, ``coefs`` and ``diag`` (groups, K)."""
    return np.square(np.sum(np.abs(coefs) * np.sqrt(np.abs(diag)), axis=-1))


UNDERFLOW = 2.0 ** -500


def lost(coefs: np.ndarray, raw: np.ndarray, sums: np.ndarray) -> np.ndarray:
    """Whether each group's terms lie below the scale where their cross sums keep their digits, or a
    coefficient is not finite: sqrt(B) < 2⁻⁵⁰⁰·Σ_j |c_j| over the terms not 0 on every row, ``raw`` the
    A_j = n/(n − 1)·Σ t_j², ``sums`` the Σ t_j (each (groups, K))."""
    with np.errstate(invalid="ignore", over="ignore"):
        weight = np.where((raw != 0) | (sums != 0), np.abs(coefs), 0.0)
        finite = np.isfinite(np.sum(np.abs(coefs), axis=-1))
        return ~finite | (np.sqrt(bound(coefs, raw)) < UNDERFLOW * np.sum(weight, axis=-1))


def negligible(v: np.ndarray, coefs: np.ndarray, diag: np.ndarray, units) -> np.ndarray:
    """Whether each group's computed variance ``v`` is within the rounding of 0 (or below it)."""
    return v <= factor(coefs.shape[-1], units) * bound(coefs, diag)


def sql_root_bound(coefs: list[exp.Expression], diag: list[exp.Expression]) -> exp.Expression:
    """sqrt(B) = Σ_j |c_j|·sqrt(|A_j|) as a tree from the coefficient and diagonal trees (owned)."""
    total: exp.Expression | None = None
    for c, a in zip(coefs, diag):
        part = s.mul(s.absval(c), s.sqrt(s.absval(a)))
        total = part if total is None else s.add(total, part)
    assert total is not None
    return total


def sql_within(v: exp.Expression, bound_: exp.Expression, terms: int, units: exp.Expression) -> exp.Expression:
    """v ≤ 2·(terms + √n)·eps·B as a tree, B given (all owned, placed once)."""
    k = s.mul(s.lit(2.0 * EPS), s.paren(s.add(s.lit(float(terms)), s.sqrt(s.cast_double(units)))))
    return s.lte(v, s.mul(k, bound_))


def sql_lost(root: exp.Expression, coefs: list[exp.Expression], present: list[exp.Expression]) -> exp.Expression:
    """NOT (Σ|c_j| finite) OR sqrt(B) < 2⁻⁵⁰⁰·Σ_{j present}|c_j| as a tree, ``root`` sqrt(B) and ``present``
    each term's "not 0 on every row" (all owned, placed once; a NaN compares above every number in DuckDB
    and Spark, so 1 > NaN·0 is false)."""
    total: exp.Expression | None = None
    weighted: exp.Expression | None = None
    for c, here in zip(coefs, present):
        part = s.case(here, s.absval(c.copy()), s.lit(0.0))
        total = s.absval(c) if total is None else s.add(total, s.absval(c))
        weighted = part if weighted is None else s.add(weighted, part)
    assert total is not None and weighted is not None
    finite = s.gt(s.lit(1.0), s.mul(total, s.lit(0.0)))
    return s.or_(exp.Not(this=s.paren(finite)), s.lt(root, s.mul(s.paren(weighted), s.lit(UNDERFLOW))))
