"""numpy reference of the poverty-line indicators, the Wolfson polarization index and equivalised
income (the tests' oracle for catalog/poverty.py). Written to be checked by eye, in float64,
with ``math.fsum`` for the sums; same input conventions as ``reference.py`` (NULL rows dropped by
the caller, w = 0 rows dropped, negative weight or non-finite value → ValueError, None where a
measure is undefined, never NaN).

Definitions (docs/poverty.md, docs/polarization.md):

* M = the weighted median, ``quantile_w(x, 0.5, w)`` (the smallest x_i with C_i/W ≥ 0.5).
* A relative line z = frac·M; a group whose median is ≤ 0 has no relative line (None).
* below_line_share(x, frac) = Σ w·1(x < z) / W   (strictly below the line).
* median_gap(x, frac) = (z − M_p) / z, M_p the weighted median of the rows below the line
  (the smallest x_i with C_i ≥ P/2, P = Σ w·1(x < z)); None when nobody is below the line.
* fgt(x, alpha, line) = Σ w·1(x < z)·((z − x)/z)^alpha / W at an absolute line z > 0
  (Foster, Greer and Thorbecke 1984, from memory); fgt_relative the same at z = frac·M.
* wolfson(x) = 2·(μ/M)·(1 − 2·L(0.5) − G) (Wolfson 1994, from memory); None when T ≤ 0 or M ≤ 0.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Callable

import numpy as np

from uneven.reference import linearized
from uneven.reference import measures as R
from uneven.reference.density import density_at_quantile, hall_sheather
from uneven.reference.measures import Rows

__all__ = ["below_line_share", "median_gap", "fgt", "fgt_relative", "wolfson", "equivalised",
           "poverty_line"]


def _check_alpha(alpha) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not math.isfinite(alpha) or alpha < 0:
        raise ValueError(f"alpha must be a finite number of at least 0, got {alpha!r}")
    return float(alpha)


def _check_frac(frac) -> float:
    frac = R.check_fraction(frac, "frac")
    if frac <= 0:
        raise ValueError(f"frac must lie in (0, 1], got {frac!r}")
    return frac


def poverty_line(x, frac, w=None) -> float | None:
    """frac × the weighted median; None when empty or the median is ≤ 0."""
    frac = _check_frac(frac)
    m = R.quantile_w(x, 0.5, w)
    if m is None or m <= 0:
        return None
    return frac * m


def _below(r: Rows, z: float) -> np.ndarray:
    return r.x < z


def below_line_share(x, frac, w=None) -> float | None:
    z = poverty_line(x, frac, w)
    if z is None:
        return None
    r = Rows(x, w)
    return float(math.fsum(r.w[_below(r, z)]) / r.W)


def median_gap(x, frac, w=None) -> float | None:
    z = poverty_line(x, frac, w)
    if z is None:
        return None
    r = Rows(x, w)
    below = _below(r, z)
    if not below.any():
        return None
    C = r.C[1:]
    P = C[below][-1]  # the running weight at the last row below the line (rows are sorted)
    first = int(np.argmax(C >= 0.5 * P))
    return float((z - r.x[first]) / z)


def _fgt_at(r: Rows, alpha: float, z: float) -> float | None:
    if r.empty:
        return None
    below = _below(r, z)
    gaps = (z - r.x[below]) / z
    terms = r.w[below] * (gaps ** alpha if alpha != 0 else np.ones_like(gaps))
    return float(math.fsum(terms) / r.W)


def fgt(x, alpha, line, w=None) -> float | None:
    alpha = _check_alpha(alpha)
    if isinstance(line, bool) or not isinstance(line, numbers.Real) or not math.isfinite(line) or line <= 0:
        raise ValueError(f"line must be a finite number above 0, got {line!r}")
    return _fgt_at(Rows(x, w), alpha, float(line))


def fgt_relative(x, alpha, frac, w=None) -> float | None:
    alpha = _check_alpha(alpha)
    z = poverty_line(x, frac, w)
    if z is None:
        return None
    return _fgt_at(Rows(x, w), alpha, z)


def wolfson(x, w=None) -> float | None:
    r = Rows(x, w)
    if r.empty or not r.positive:
        return None
    m = R.quantile_w(x, 0.5, w)
    if m is None or m <= 0:
        return None
    mu = r.T / r.W
    half, gini = R.lorenz(x, 0.5, w), R.gini(x, w)
    if half is None or gini is None:  # defined wherever the median is positive
        return None
    return float(2.0 * (mu / m) * (1.0 - 2.0 * half - gini))


# equivalence scales ----------------------------------------------------------------------------

def equivalised(income, adults, children, scale="oecd_modified"):
    """income / scale size. ``scale``: 'oecd_modified' (1 + 0.5·(adults − 1) + 0.3·children),
    'sqrt' (√(adults + children)), or a number θ in [0, 1] (size^θ). None when income is None, the
    household has no adult, or a count is negative."""
    if income is None or adults is None or children is None:
        return None
    if adults < 1 or children < 0:
        return None
    size = adults + children
    if scale == "oecd_modified":
        d = 1.0 + 0.5 * (adults - 1) + 0.3 * children
    elif scale == "sqrt":
        d = math.sqrt(size)
    else:
        d = float(size) ** float(scale)
    return float(income) / d


# influence functions (standard errors; the formulas in docs/poverty.md) ------------------------

REFERENCES: dict[str, Callable[..., float | None]] = {
    "below_line_share": below_line_share, "median_gap": median_gap, "fgt": fgt, "fgt_relative": fgt_relative,
    "wolfson": wolfson}
SE_MEASURES = ("below_line_share", "median_gap", "fgt", "fgt_relative", "wolfson")


def _sorted_rows(x, w):
    x = np.asarray(x, dtype=np.float64)
    w = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    o = np.argsort(x, kind="stable")
    return x, w, o


def median_score(x, w):
    """z_k of the weighted median, (0.5 − 1(x_k ≤ M)) / (W f(M)), in input order; None without a density."""
    f = density_at_quantile(x, 0.5, w)
    if f is None:
        return None, None
    M = R.quantile_w(x, 0.5, w)
    x = np.asarray(x, dtype=np.float64)
    W = np.ones_like(x).sum() if w is None else float(np.sum(w))
    return (0.5 - (x <= M)) / (W * f), f


def density_at_line(x, frac, w=None) -> float | None:
    """(p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)), p± = H ± h, h = min(K(0.5)·n^(−1/3), H), H the share below the line."""
    H = below_line_share(x, frac, w)
    if H is None:
        return None
    h = min(hall_sheather(0.5, len(x)), H)
    hi, lo = min(H + h, 1.0), H - h
    q_hi, q_lo = R.quantile_w(x, hi, w), R.quantile_w(x, lo, w)
    if q_hi is None or q_lo is None:  # no rows
        return None
    spread = q_hi - q_lo
    return (hi - lo) / spread if spread > 0 else None


def poor_median(x, frac, w=None) -> float | None:
    """M_p: the weighted median of the rows strictly below frac × the median (None if there are none)."""
    z = poverty_line(x, frac, w)
    if z is None:
        return None
    x = np.asarray(x, dtype=np.float64)
    wv = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    keep = x < z
    if not keep.any():
        return None
    return R.quantile_w(x[keep], 0.5, wv[keep])


def density_at_poor_median(x, frac, w=None) -> float | None:
    """(q⁺ − q⁻)/(Q(q⁺) − Q(q⁻)) over all rows, q± = H/2 ± h clamped to [0, 1], h = K(0.5)·n^(−1/3)."""
    H = below_line_share(x, frac, w)
    if H is None:
        return None
    q = H / 2
    h = hall_sheather(0.5, len(x))
    hi, lo = min(q + h, 1.0), max(q - h, 0.0)
    top, bottom = R.quantile_w(x, hi, w), R.quantile_w(x, lo, w)
    if top is None or bottom is None:
        return None
    spread = top - bottom
    return (hi - lo) / spread if spread > 0 else None


def _median_gap_influence(x, frac, w):
    """G = 1 − M_p/z with z = frac·M and M_p = Q(H/2), H = F(z⁻): by the chain rule (docs/poverty.md)

        IF(H)   = 1(x < z) − H + f(z)·frac·IF(M)
        IF(M_p) = [IF(H)/2 − (1(x ≤ M_p) − H/2)] / f(M_p)
        IF(G)   = −IF(M_p)/z + (M_p/z²)·frac·IF(M)

    and z_k = IF(x_k)/W."""
    G = median_gap(x, frac, w)
    if G is None:
        return None, None
    x = np.asarray(x, dtype=np.float64)
    W = float(len(x)) if w is None else float(math.fsum(w))
    z = poverty_line(x, frac, w)
    H = below_line_share(x, frac, w)
    Mp = poor_median(x, frac, w)
    zM, _ = median_score(x, w)
    f_line, f_poor = density_at_line(x, frac, w), density_at_poor_median(x, frac, w)
    if zM is None or f_line is None or f_poor is None:
        return G, None
    if_M = W * zM
    if_H = (x < z) - H + f_line * frac * if_M
    if_Mp = (if_H / 2 - ((x <= Mp) - H / 2)) / f_poor
    if_G = -if_Mp / z + Mp / z ** 2 * frac * if_M
    return G, if_G / W


def influence(name, x, params=(), w=None):
    """(estimate, z per row in input order), z None where no standard error exists."""
    x = np.asarray(x, dtype=np.float64)
    wv = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    W = wv.sum()
    if name == "fgt":
        alpha, line = params
        F = fgt(x, alpha, line, w)
        g = np.where(x < line, ((line - x) / line) ** alpha if alpha else 1.0, 0.0)
        return F, (g - F) / W
    if name in ("below_line_share", "fgt_relative"):
        alpha, frac = (0.0, params[0]) if name == "below_line_share" else params
        F = fgt_relative(x, alpha, frac, w)
        if F is None or 0 < alpha < 1:
            return F, None
        M = R.quantile_w(x, 0.5, w)
        z = frac * M
        zM, fM = median_score(x, w)
        if zM is None:
            return F, None
        if alpha == 0:
            slope = density_at_line(x, frac, w)
            if slope is None:
                return F, None
        else:
            slope = alpha / z * (fgt_relative(x, alpha - 1, frac, w) - F)
        g = np.where(x < z, ((z - x) / z) ** alpha if alpha else 1.0, 0.0)
        # F(ẑ) with ẑ = frac·M̂: z_k = (g_k − F)/W + ∂F/∂z · frac · z_M,k
        return F, (g - F) / W + slope * frac * zM
    if name == "median_gap":
        return _median_gap_influence(x, params[0], w)
    if name == "wolfson":
        P = wolfson(x, w)
        if P is None:
            return None, None
        T = (wv * x).sum()
        mu, M = T / W, R.quantile_w(x, 0.5, w)
        L, zL = linearized.influence("lorenz", x, (0.5,), w)
        G, zG = linearized.influence("gini", x, (), w)
        zM, _ = median_score(x, w)
        if zM is None or zL is None or zG is None:
            return P, None
        zmu = (x - mu) / W
        # P = 2(μ/M)(1 − 2L − G): chain rule over (μ, M, L, G)
        return P, (P / mu) * zmu - (P / M) * zM - (4 * mu / M) * zL - (2 * mu / M) * zG
    raise KeyError(name)
