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
