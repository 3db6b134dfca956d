"""In-memory numpy reference ("oracle") for every uneven measure.

The test suite runs each measure here and compares it with what the compiled SQL returns.
This module is written to be easy to check by eye, not to be fast: every function follows the
written definition of its measure, in float64, with ``math.fsum`` for the final sums.

Conventions shared by every function
------------------------------------
* ``x`` and ``w`` are 1-D array-likes of floats with no missing values (callers drop NULL rows
  first). ``w=None`` means every weight is 1.
* Rows with ``w == 0`` are dropped before anything else; a negative weight raises ``ValueError``.
  Non-finite values (nan, inf) in ``x`` or ``w`` also raise ``ValueError``.
* The remaining rows are sorted by ``x`` (stable sort). ``n`` is their count,
  ``C_i`` the running sum of ``w`` up to row ``i`` (``C_0 = 0``), ``W = C_n`` the last running sum
  (so the Lorenz polygon ends exactly at (1, 1)), ``T = sum(w*x)`` and ``mu = T / W``.
* A fraction ``p`` (also ``hi`` / ``lo``) must lie in [0, 1], else ``ValueError``.
* The result is a Python ``float``, or ``None`` where the measure is undefined (empty input,
  outside the domain, division by zero). ``nan`` is never returned.
"""

from __future__ import annotations

import math
import numbers
from typing import Any, Callable, Hashable, Sequence

import numpy as np

__all__ = [
    "gini", "gini_corrected", "lorenz", "generalized_lorenz", "bottom_share", "top_share",
    "palma", "s80s20", "quantile_w", "percentile_ratio", "lorenz_curve", "theil", "mld", "ge",
    "atkinson", "cv", "hoover", "hhi", "cr", "REFERENCES",
]


# ---------------------------------------------------------------------------------------------
# Input handling
# ---------------------------------------------------------------------------------------------

class _Rows:
    """The rows of one group after dropping w == 0, sorted by x."""

    def __init__(self, x: Any, w: Any = None):
        xs = np.atleast_1d(np.asarray(x, dtype=np.float64)).reshape(-1)
        if w is None:
            ws = np.ones_like(xs)
        else:
            ws = np.asarray(w, dtype=np.float64).reshape(-1)
            if ws.shape != xs.shape:
                raise ValueError(f"x has {xs.size} rows but w has {ws.size}")
        if not np.all(np.isfinite(xs)):
            raise ValueError("x holds a non-finite value (nan or inf)")
        if not np.all(np.isfinite(ws)):
            raise ValueError("w holds a non-finite value (nan or inf)")
        if np.any(ws < 0):
            raise ValueError("negative weight")
        keep = ws > 0
        xs, ws = xs[keep], ws[keep]
        order = np.argsort(xs, kind="stable")
        self.x: np.ndarray = xs[order]
        self.w: np.ndarray = ws[order]
        self.n: int = int(self.x.size)
        # C[i] = sum of w over rows 1..i, with C[0] = 0 (so C has n + 1 entries).
        self.C: np.ndarray = np.concatenate(([0.0], np.cumsum(self.w)))
        self.W: float = float(self.C[-1]) if self.n else 0.0
        self.T: float = math.fsum(self.w * self.x) if self.n else 0.0

    @property
    def empty(self) -> bool:
        return self.n == 0

    @property
    def mu(self) -> float:
        return self.T / self.W


def _check_fraction(p: Any, name: str = "p") -> float:
    if isinstance(p, bool) or not isinstance(p, numbers.Real):
        raise ValueError(f"{name} must be a real number in [0, 1], got {p!r}")
    p = float(p)
    if not (0.0 <= p <= 1.0):  # also rejects nan
        raise ValueError(f"{name} must lie in [0, 1], got {p!r}")
    return p


def _check_count(k: Any, name: str = "k") -> int:
    if isinstance(k, bool) or not isinstance(k, numbers.Integral) or int(k) < 1:
        raise ValueError(f"{name} must be an integer >= 1, got {k!r}")
    return int(k)


def _ratio(num: float | None, den: float | None) -> float | None:
    if num is None or den is None or den == 0:
        return None
    return float(num / den)


# ---------------------------------------------------------------------------------------------
# Gini
# ---------------------------------------------------------------------------------------------

def gini(x, w=None) -> float | None:
    """Gini = sum_i w_i x_i (2 C_i - w_i - W) / (W T); None if empty or T <= 0."""
    r = _Rows(x, w)
    if r.empty or r.T <= 0:
        return None
    C_i = r.C[1:]
    terms = r.w * r.x * (2.0 * C_i - r.w - r.W)
    return float(math.fsum(terms) / (r.W * r.T))


def gini_corrected(x, w=None) -> float | None:
    """gini * n / (n - 1), n the number of rows with w > 0; None if n < 2."""
    r = _Rows(x, w)
    if r.n < 2:
        return None
    g = gini(r.x, r.w)
    if g is None:
        return None
    return float(g * r.n / (r.n - 1))


# ---------------------------------------------------------------------------------------------
# Lorenz curve, shares, ratios of shares
# ---------------------------------------------------------------------------------------------

def _lorenz_amounts(r: _Rows, p: float) -> np.ndarray:
    """Weight of each row that falls below population fraction p: clamp(pW - C_{i-1}, 0, w_i).

    A row wholly below pW (C_i <= pW) counts in full, a row wholly above (C_{i-1} >= pW) not
    at all, and the row that straddles pW counts for pW - C_{i-1}. (Written as three cases
    rather than a clamp so that p = 1 takes every row in full, with no rounding.)
    """
    target = p * r.W
    before, after = r.C[:-1], r.C[1:]
    return np.where(after <= target, r.w, np.where(before >= target, 0.0, target - before))


def _lorenz_numerator(r: _Rows, p: float) -> float:
    """sum_i x_i * clamp(pW - C_{i-1}, 0, w_i)."""
    return math.fsum(r.x * _lorenz_amounts(r, p))


def lorenz(x, p, w=None) -> float | None:
    """Lorenz ordinate L(p) = sum_i x_i clamp(pW - C_{i-1}, 0, w_i) / T; None if T <= 0."""
    p = _check_fraction(p)
    r = _Rows(x, w)
    if r.empty or r.T <= 0:
        return None
    return float(_lorenz_numerator(r, p) / r.T)


def generalized_lorenz(x, p, w=None) -> float | None:
    """Generalized Lorenz ordinate: sum_i x_i clamp(pW - C_{i-1}, 0, w_i) / W; None if empty."""
    p = _check_fraction(p)
    r = _Rows(x, w)
    if r.empty:
        return None
    return float(_lorenz_numerator(r, p) / r.W)


def bottom_share(x, p, w=None) -> float | None:
    """Share of the total held by the bottom fraction p: L(p)."""
    return lorenz(x, p, w)


def top_share(x, p, w=None) -> float | None:
    """Share of the total held by the top fraction p: 1 - L(1 - p)."""
    p = _check_fraction(p)
    low = lorenz(x, 1.0 - p, w)
    if low is None:
        return None
    return float(1.0 - low)


def palma(x, w=None) -> float | None:
    """Palma ratio: top 10% share / bottom 40% share."""
    return _ratio(top_share(x, 0.1, w), bottom_share(x, 0.4, w))


def s80s20(x, w=None) -> float | None:
    """S80/S20 ratio: top 20% share / bottom 20% share."""
    return _ratio(top_share(x, 0.2, w), bottom_share(x, 0.2, w))


def lorenz_curve(x, k, w=None) -> list[tuple[float, float]] | None:
    """k + 1 points (j/k, L(j/k)), j = 0..k; None if T <= 0."""
    k = _check_count(k)
    r = _Rows(x, w)
    if r.empty or r.T <= 0:
        return None
    points = []
    for j in range(k + 1):
        p = j / k
        points.append((p, float(_lorenz_numerator(r, p) / r.T)))
    return points


# ---------------------------------------------------------------------------------------------
# Quantiles
# ---------------------------------------------------------------------------------------------

def quantile_w(x, p, w=None) -> float | None:
    """Weighted inverted CDF: the first x_i (sorted) with C_i / W >= p; None if empty."""
    p = _check_fraction(p)
    r = _Rows(x, w)
    if r.empty:
        return None
    cdf = r.C[1:] / r.W  # float division, as numpy does; cdf[-1] == 1.0
    first = int(np.argmax(cdf >= p))  # index of the first True
    return float(r.x[first])


def percentile_ratio(x, hi, lo, w=None) -> float | None:
    """quantile_w(hi) / quantile_w(lo); None if empty or the lower quantile is 0."""
    hi = _check_fraction(hi, "hi")
    lo = _check_fraction(lo, "lo")
    return _ratio(quantile_w(x, hi, w), quantile_w(x, lo, w))


# ---------------------------------------------------------------------------------------------
# Entropy family and Atkinson
# ---------------------------------------------------------------------------------------------

def theil(x, w=None) -> float | None:
    """Theil T = sum w x ln(x / mu) / T; a zero x adds 0. Needs x >= 0 and T > 0."""
    r = _Rows(x, w)
    if r.empty or np.any(r.x < 0) or r.T <= 0:
        return None
    positive = r.x > 0  # a zero x adds 0 (the limit of x ln x)
    xp, wp = r.x[positive], r.w[positive]
    terms = wp * xp * np.log(xp / r.mu)
    return float(math.fsum(terms) / r.T)


def mld(x, w=None) -> float | None:
    """Mean log deviation = sum w ln(mu / x) / W. Needs x > 0."""
    r = _Rows(x, w)
    if r.empty or np.any(r.x <= 0):
        return None
    mu = r.mu
    terms = r.w * np.log(mu / r.x)
    return float(math.fsum(terms) / r.W)


def ge(x, alpha, w=None) -> float | None:
    """Generalized entropy GE(alpha) = (sum w (x/mu)^alpha / W - 1) / (alpha (alpha - 1)).

    alpha = 0 is the MLD and alpha = 1 the Theil index (the limits). alpha > 0 needs x >= 0,
    alpha <= 0 needs x > 0; mu must be > 0.
    """
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not math.isfinite(alpha):
        raise ValueError(f"alpha must be a finite real number, got {alpha!r}")
    alpha = float(alpha)
    if alpha == 0.0:
        return mld(x, w)
    if alpha == 1.0:
        return theil(x, w)
    r = _Rows(x, w)
    if r.empty:
        return None
    if alpha > 0 and np.any(r.x < 0):
        return None
    if alpha < 0 and np.any(r.x <= 0):
        return None
    if r.T <= 0:
        return None
    mu = r.mu
    mean_power = math.fsum(r.w * (r.x / mu) ** alpha) / r.W
    return float((mean_power - 1.0) / (alpha * (alpha - 1.0)))


def atkinson(x, eps, w=None) -> float | None:
    """Atkinson index A(eps) = 1 - (equally distributed equivalent) / mu.

    eps != 1: ede = (sum w x^(1-eps) / W)^(1/(1-eps)); eps = 1: ede = exp(sum w ln x / W).
    0 <= eps < 1 needs x >= 0, eps >= 1 needs x > 0; mu must be > 0. eps < 0 raises ValueError.
    The power mean is homogeneous of degree 1, so it is taken on x / mu (same value, no overflow).
    """
    if isinstance(eps, bool) or not isinstance(eps, numbers.Real) or not math.isfinite(eps):
        raise ValueError(f"eps must be a finite real number >= 0, got {eps!r}")
    eps = float(eps)
    if eps < 0:
        raise ValueError(f"eps must be >= 0, got {eps!r}")
    r = _Rows(x, w)
    if r.empty:
        return None
    if eps < 1 and np.any(r.x < 0):
        return None
    if eps >= 1 and np.any(r.x <= 0):
        return None
    if r.T <= 0:
        return None
    rel = r.x / r.mu
    if eps == 1.0:
        ede_over_mu = math.exp(math.fsum(r.w * np.log(rel)) / r.W)
    else:
        power_mean = math.fsum(r.w * rel ** (1.0 - eps)) / r.W
        ede_over_mu = power_mean ** (1.0 / (1.0 - eps))
    return float(1.0 - ede_over_mu)


# ---------------------------------------------------------------------------------------------
# Dispersion
# ---------------------------------------------------------------------------------------------

def cv(x, w=None) -> float | None:
    """Coefficient of variation, population form: sqrt(sum w (x - mu)^2 / W) / mu; mu > 0."""
    r = _Rows(x, w)
    if r.empty or r.T <= 0:
        return None
    mu = r.mu
    variance = math.fsum(r.w * (r.x - mu) ** 2) / r.W
    return float(math.sqrt(variance) / mu)


def hoover(x, w=None) -> float | None:
    """Hoover index = 1/2 sum_i |w_i x_i / T - w_i / W|; None if T <= 0."""
    r = _Rows(x, w)
    if r.empty or r.T <= 0:
        return None
    gaps = np.abs(r.w * r.x / r.T - r.w / r.W)
    return float(0.5 * math.fsum(gaps))


# ---------------------------------------------------------------------------------------------
# Concentration (entities)
# ---------------------------------------------------------------------------------------------

def _entity_sums(x, entity) -> list[float] | None:
    """Sum x per entity (each row its own entity when entity is None).

    None when there are no rows, the total is <= 0, or an entity sum is negative.
    """
    xs = np.asarray(x, dtype=np.float64).reshape(-1)
    if not np.all(np.isfinite(xs)):
        raise ValueError("x holds a non-finite value (nan or inf)")
    if entity is None:
        sums = [float(v) for v in xs]
    else:
        labels: Sequence[Hashable] = list(entity)
        if len(labels) != xs.size:
            raise ValueError(f"x has {xs.size} rows but entity has {len(labels)}")
        groups: dict[Hashable, list[float]] = {}
        for label, value in zip(labels, xs):
            groups.setdefault(label, []).append(float(value))
        sums = [math.fsum(values) for values in groups.values()]
    if not sums or any(s < 0 for s in sums):
        return None
    if math.fsum(sums) <= 0:
        return None
    return sums


def hhi(x, entity=None) -> float | None:
    """Herfindahl-Hirschman index = 10000 * sum_k s_k^2, s_k the share of entity k."""
    sums = _entity_sums(x, entity)
    if sums is None:
        return None
    total = math.fsum(sums)
    return float(10000.0 * math.fsum((s / total) ** 2 for s in sums))


def cr(x, k, entity=None) -> float | None:
    """Concentration ratio: share of the k largest entities; 1.0 if there are at most k."""
    k = _check_count(k)
    sums = _entity_sums(x, entity)
    if sums is None:
        return None
    if len(sums) <= k:
        return 1.0
    total = math.fsum(sums)
    largest = sorted(sums, reverse=True)[:k]
    return float(math.fsum(largest) / total)


REFERENCES: dict[str, Callable[..., Any]] = {
    "gini": gini,
    "gini_corrected": gini_corrected,
    "lorenz": lorenz,
    "generalized_lorenz": generalized_lorenz,
    "bottom_share": bottom_share,
    "top_share": top_share,
    "palma": palma,
    "s80s20": s80s20,
    "quantile_w": quantile_w,
    "percentile_ratio": percentile_ratio,
    "lorenz_curve": lorenz_curve,
    "theil": theil,
    "mld": mld,
    "ge": ge,
    "atkinson": atkinson,
    "cv": cv,
    "hoover": hoover,
    "hhi": hhi,
    "cr": cr,
}
