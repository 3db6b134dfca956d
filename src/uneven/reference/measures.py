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
from collections.abc import Callable, Hashable, Sequence
from fractions import Fraction
from typing import Any

import numpy as np

__all__ = [
    "gini", "gini_corrected", "lorenz", "generalized_lorenz", "bottom_share", "top_share",
    "palma", "s80s20", "quantile_w", "percentile_ratio", "lorenz_curve", "theil", "mld", "ge",
    "atkinson", "cv", "hoover", "hhi", "cr", "REFERENCES",
]


# ---------------------------------------------------------------------------------------------
# Input handling
# ---------------------------------------------------------------------------------------------

class Rows:
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
        # Every sum is taken on xs = x / s, s the power of two at or below max |x| (1 when all are
        # 0): a per-group constant that cancels in every scale-free measure, so no product w·x or
        # (x − μ)² overflows while the total itself fits in a double, and (a power of two) exact:
        # xs keeps every digit of x. Ts = Σ w·xs; T = s·Ts is inf when the total does not fit.
        top = float(np.max(np.abs(self.x))) if self.n else 0.0
        self.s: float = math.ldexp(1.0, math.frexp(top)[1] - 1) if top > 0 else 1.0
        self.xs: np.ndarray = self.x / self.s
        self.Ts: float = math.fsum(self.w * self.xs) if self.n else 0.0
        self.T: float = _times(self.Ts, self.s)

    @property
    def empty(self) -> bool:
        return self.n == 0

    @property
    def fits(self) -> bool:
        """The totals W and T are finite doubles (the policy: no measure from an infinite total)."""
        return math.isfinite(self.W) and math.isfinite(self.T)

    @property
    def positive(self) -> bool:
        """Rows present, totals finite and T > 0: the measures that divide by T are defined."""
        return not self.empty and self.fits and self.Ts > 0

    @property
    def mu(self) -> float:
        return self.T / self.W

    @property
    def mu_s(self) -> float:
        """The mean of the scaled values, μ / s."""
        return self.Ts / self.W


def _times(a: float, b: float) -> float:
    """a·b in double precision, inf (with a's sign) past the double range instead of an exception."""
    with np.errstate(over="ignore"):
        return float(np.float64(a) * np.float64(b))


def check_fraction(p: Any, name: str = "p") -> float:
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
    with np.errstate(over="ignore"):
        value = float(np.float64(num) / np.float64(den))
    return value if math.isfinite(value) else None  # past the double range: NULL, as the SQL


# ---------------------------------------------------------------------------------------------
# Gini
# ---------------------------------------------------------------------------------------------

def gini(x, w=None) -> float | None:
    """Gini = sum_i w_i x_i (2 C_i - w_i - W) / (W T); None if empty or T <= 0 (or T overflows).

    Scale-invariant, so it is computed on xs = x / max|x|; dividing by W before T keeps W·T from
    overflowing.
    """
    r = Rows(x, w)
    if not r.positive:
        return None
    C_i = r.C[1:]
    terms = r.w * r.xs * (2.0 * C_i - r.w - r.W)
    return float(math.fsum(terms) / r.W / r.Ts)


def gini_corrected(x, w=None) -> float | None:
    """gini * n / (n - 1), n the number of rows with w > 0; None if n < 2."""
    r = Rows(x, w)
    if r.n < 2:
        return None
    g = gini(r.x, r.w)
    if g is None:
        return None
    return float(g * r.n / (r.n - 1))


# ---------------------------------------------------------------------------------------------
# Lorenz curve, shares, ratios of shares
# ---------------------------------------------------------------------------------------------

def _lorenz_amounts(r: Rows, p: float) -> np.ndarray:
    """Weight of each row that falls below population fraction p: clamp(pW - C_{i-1}, 0, w_i).

    A row wholly below pW (C_i <= pW) counts in full, a row wholly above (C_{i-1} >= pW) not
    at all, and the row that straddles pW counts for pW - C_{i-1}. (Written as three cases
    rather than a clamp so that p = 1 takes every row in full, with no rounding.)
    """
    target = p * r.W
    before, after = r.C[:-1], r.C[1:]
    return np.where(after <= target, r.w, np.where(before >= target, 0.0, target - before))


def _lorenz_numerator(r: Rows, p: float) -> float:
    """sum_i xs_i * clamp(pW - C_{i-1}, 0, w_i), on the scaled values xs = x / s."""
    return math.fsum(r.xs * _lorenz_amounts(r, p))


def lorenz(x, p, w=None) -> float | None:
    """Lorenz ordinate L(p) = sum_i x_i clamp(pW - C_{i-1}, 0, w_i) / T; None if T <= 0."""
    p = check_fraction(p)
    r = Rows(x, w)
    if not r.positive:
        return None
    return float(_lorenz_numerator(r, p) / r.Ts)


def generalized_lorenz(x, p, w=None) -> float | None:
    """Generalized Lorenz ordinate: sum_i x_i clamp(pW - C_{i-1}, 0, w_i) / W; None if empty
    (or if the amount itself does not fit in a double)."""
    p = check_fraction(p)
    r = Rows(x, w)
    if r.empty or not math.isfinite(r.W):
        return None
    value = _times(_lorenz_numerator(r, p) / r.W, r.s)
    return value if math.isfinite(value) else None


def bottom_share(x, p, w=None) -> float | None:
    """Share of the total held by the bottom fraction p: L(p)."""
    return lorenz(x, p, w)


def top_share(x, p, w=None) -> float | None:
    """Share of the total held by the top fraction p: 1 - L(1 - p)."""
    p = check_fraction(p)
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
    r = Rows(x, w)
    if not r.positive:
        return None
    points = []
    for j in range(k + 1):
        p = j / k
        points.append((p, float(_lorenz_numerator(r, p) / r.Ts)))
    return points


# ---------------------------------------------------------------------------------------------
# Quantiles
# ---------------------------------------------------------------------------------------------

def quantile_w(x, p, w=None) -> float | None:
    """Weighted inverted CDF: the first x_i (sorted) with C_i / W >= p; None if empty."""
    p = check_fraction(p)
    r = Rows(x, w)
    if r.empty:
        return None
    cdf = r.C[1:] / r.W  # float division, as numpy does; cdf[-1] == 1.0
    first = int(np.argmax(cdf >= p))  # index of the first True
    return float(r.x[first])


def percentile_ratio(x, hi, lo, w=None) -> float | None:
    """quantile_w(hi) / quantile_w(lo); None if empty or the lower quantile is 0."""
    hi = check_fraction(hi, "hi")
    lo = check_fraction(lo, "lo")
    return _ratio(quantile_w(x, hi, w), quantile_w(x, lo, w))


# ---------------------------------------------------------------------------------------------
# Entropy family and Atkinson: centred forms
# ---------------------------------------------------------------------------------------------
# Each measure is a weighted mean of a term f(r), r = x/μ, that vanishes to second order at r = 1:
#   Theil: r ln r − (r − 1),  MLD: (r − 1) − ln r,  GE(α): r^α − 1 − α(r − 1)  (÷ α(α − 1)).
# The subtracted (r − 1) parts add up to 0 (Σ w (x − μ) = 0), so the means equal the textbook
# forms, but no term cancels against another: a spread of 1e-9 of the mean keeps its digits. Each
# term is taken in d = r − 1 = (x − μ)/μ (formed from x − μ, exact for x near μ): by its Taylor
# series where |d| < 0.1 (the d¹ parts dropped analytically), else by log1p / expm1. All terms of
# one measure have one sign, so math.fsum of them is accurate to an ulp or so. A rounding δ of μ
# changes each mean by a relative O(δ) only (the first-order change of f at r = 1 is 0).

_SERIES_BELOW = 0.1  # |d| below this: the series; 0.1^k shrinks past 1e-20 of the d² term by k = 25
_SERIES_TERMS = 60


def _series_sum(d: np.ndarray, coefficient: Callable[[int], float]) -> np.ndarray:
    """Σ_{k=2..} c_k d^k, highest power first (small terms added first)."""
    out = np.zeros_like(d)
    for k in range(_SERIES_TERMS + 1, 1, -1):
        out = out + coefficient(k) * d ** k
    return out


def _theil_terms(d: np.ndarray, log_r: np.ndarray) -> np.ndarray:
    # (1 + d) ln(1 + d) − d = Σ_{k≥2} (−1)^k d^k / (k (k − 1)); at r = 0 (x = 0): 1
    small = np.abs(d) < _SERIES_BELOW
    out = np.empty_like(d)
    out[small] = _series_sum(d[small], lambda k: (-1.0) ** k / (k * (k - 1)))
    big, lb = d[~small], log_r[~small]
    with np.errstate(invalid="ignore", under="ignore", over="ignore"):
        out[~small] = np.where(np.isfinite(lb), np.exp(lb) * lb - big, 1.0)
    return out


def _mld_terms(d: np.ndarray, log_r: np.ndarray) -> np.ndarray:
    # d − ln(1 + d) = Σ_{k≥2} (−1)^k d^k / k
    small = np.abs(d) < _SERIES_BELOW
    out = np.empty_like(d)
    out[small] = _series_sum(d[small], lambda k: (-1.0) ** k / k)
    out[~small] = d[~small] - log_r[~small]
    return out


def _power_terms(d: np.ndarray, log_r: np.ndarray, a: float) -> np.ndarray:
    # (1 + d)^a − 1 − a d = Σ_{k≥2} binom(a, k) d^k; at r = 0 (x = 0, a > 0): a − 1
    binom = [1.0]
    for k in range(1, _SERIES_TERMS + 2):
        binom.append(binom[-1] * (a - (k - 1)) / k)
    small = np.abs(d) < _SERIES_BELOW
    out = np.empty_like(d)
    out[small] = _series_sum(d[small], lambda k: binom[k])
    big, lb = d[~small], log_r[~small]
    with np.errstate(invalid="ignore", under="ignore", over="ignore"):
        out[~small] = np.where(np.isfinite(lb), np.expm1(a * lb) - a * big, a - 1.0)
    return out


# the centred terms, public for the standard-error reference (reference_se: the scores in r = x/μ)
theil_terms, mld_terms, power_terms = _theil_terms, _mld_terms, _power_terms


def _deviations(r: Rows) -> tuple[np.ndarray, np.ndarray]:
    """d = (x − μ)/μ (from x − μ: exact near the mean), on the scaled values, and ln r = ln x − ln μ
    (−inf where x = 0; r = x/μ itself may underflow when x is far below the mean)."""
    d = (r.xs - r.mu_s) / r.mu_s
    with np.errstate(divide="ignore"):  # from x itself: x/s may be subnormal far below the largest
        log_r = np.log(np.abs(r.x)) - (math.log(r.mu_s) + math.log(r.s))
    return d, log_r


def _weighted_mean(r: Rows, terms: np.ndarray) -> float | None:
    value = math.fsum(r.w * terms) / r.W
    return float(value) if math.isfinite(value) else None


def theil(x, w=None) -> float | None:
    """Theil T = sum w x ln(x / mu) / T; a zero x adds 0. Needs x >= 0 and T > 0.

    Computed as Σ w (r ln r − (r − 1)) / W, r = x/μ (equal, since Σ w (r − 1) = 0)."""
    r = Rows(x, w)
    if not r.positive or np.any(r.x < 0):
        return None
    return _weighted_mean(r, _theil_terms(*_deviations(r)))


def mld(x, w=None) -> float | None:
    """Mean log deviation = sum w ln(mu / x) / W. Needs x > 0.

    Computed as Σ w ((r − 1) − ln r) / W, r = x/μ."""
    r = Rows(x, w)
    if not r.positive or np.any(r.x <= 0):
        return None
    return _weighted_mean(r, _mld_terms(*_deviations(r)))


def ge(x, alpha, w=None) -> float | None:
    """Generalized entropy GE(alpha) = (sum w (x/mu)^alpha / W - 1) / (alpha (alpha - 1)).

    alpha = 0 is the MLD and alpha = 1 the Theil index (the limits). alpha > 0 needs x >= 0,
    alpha <= 0 needs x > 0; mu must be > 0. Computed as Σ w (r^α − 1 − α(r − 1)) / W / (α(α − 1)).
    """
    if isinstance(alpha, bool) or not isinstance(alpha, numbers.Real) or not math.isfinite(alpha):
        raise ValueError(f"alpha must be a finite real number, got {alpha!r}")
    alpha = float(alpha)
    if alpha == 0.0:
        return mld(x, w)
    if alpha == 1.0:
        return theil(x, w)
    r = Rows(x, w)
    if not r.positive:
        return None
    if alpha > 0 and np.any(r.x < 0):
        return None
    if alpha < 0 and np.any(r.x <= 0):
        return None
    mean = _weighted_mean(r, _power_terms(*_deviations(r), alpha))
    return None if mean is None else float(mean / (alpha * (alpha - 1.0)))


def atkinson(x, eps, w=None) -> float | None:
    """Atkinson index A(eps) = 1 - (equally distributed equivalent) / mu.

    eps != 1: ede = (sum w x^(1-eps) / W)^(1/(1-eps)); eps = 1: ede = exp(sum w ln x / W).
    0 <= eps < 1 needs x >= 0, eps >= 1 needs x > 0; mu must be > 0. eps < 0 raises ValueError.
    With β = 1 − ε and u = Σ w (r^β − 1 − β(r − 1)) / W (= Σ w r^β / W − 1, with no cancellation):
    A = −((1 + u)^(1/β) − 1) = −expm1(log1p(u)/β); ε = 1: A = −expm1(−mld).
    """
    if isinstance(eps, bool) or not isinstance(eps, numbers.Real) or not math.isfinite(eps):
        raise ValueError(f"eps must be a finite real number >= 0, got {eps!r}")
    eps = float(eps)
    if eps < 0:
        raise ValueError(f"eps must be >= 0, got {eps!r}")
    r = Rows(x, w)
    if not r.positive:
        return None
    if eps < 1 and np.any(r.x < 0):
        return None
    if eps >= 1 and np.any(r.x <= 0):
        return None
    if eps == 0.0:
        return 0.0  # 1 − μ/μ, exactly (Atkinson's definition at ε = 0)
    d = _deviations(r)
    if eps == 1.0:
        m = _weighted_mean(r, _mld_terms(*d))
        return None if m is None else float(-math.expm1(-m))
    beta = 1.0 - eps
    u = _weighted_mean(r, _power_terms(*d, beta))
    if u is None or u <= -1.0:
        return None
    return float(-math.expm1(math.log1p(u) / beta))


# ---------------------------------------------------------------------------------------------
# Dispersion
# ---------------------------------------------------------------------------------------------

def cv(x, w=None) -> float | None:
    """Coefficient of variation, population form: sqrt(sum w (x - mu)^2 / W) / mu; mu > 0.
    Scale-invariant: computed on xs = x / max|x|."""
    r = Rows(x, w)
    if not r.positive:
        return None
    variance = math.fsum(r.w * (r.xs - r.mu_s) ** 2) / r.W
    return float(math.sqrt(variance) / r.mu_s)


def hoover(x, w=None) -> float | None:
    """Hoover index = 1/2 sum_i |w_i x_i / T - w_i / W|; None if T <= 0."""
    r = Rows(x, w)
    if not r.positive:
        return None
    gaps = np.abs(r.w * r.xs / r.Ts - r.w / r.W)
    return float(0.5 * math.fsum(gaps))


# ---------------------------------------------------------------------------------------------
# Concentration (entities)
# ---------------------------------------------------------------------------------------------

def _exact_sum(values) -> float:
    """The correctly rounded sum, inf (with its sign) past the double range (math.fsum raises)."""
    try:
        return math.fsum(values)
    except OverflowError:
        total = sum((Fraction(v) for v in values), Fraction(0))
        if abs(total) > Fraction(np.finfo(np.float64).max):
            return math.inf if total > 0 else -math.inf
        return float(total)


def _entity_sums(x, entity) -> list[float] | None:
    """Sum x per entity (each row its own entity when entity is None).

    None when there are no rows, the total is <= 0, an entity sum is negative, or an entity sum
    or the total does not fit in a double (the policy: no measure from an infinite total).
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
        sums = [_exact_sum(values) for values in groups.values()]
    if not sums or any(s < 0 for s in sums):
        return None
    total = _exact_sum(sums)
    if not math.isfinite(total) or total <= 0:
        return None
    return sums


def hhi(x, entity=None) -> float | None:
    """Herfindahl-Hirschman index = 10000 * sum_k s_k^2, s_k the share of entity k.
    Shares are taken on sums scaled by the largest (s_k = v_k / Σv = (v_k/m) / Σ(v/m))."""
    sums = _entity_sums(x, entity)
    if sums is None:
        return None
    m = max(sums)
    scaled = [v / m for v in sums]
    total = math.fsum(scaled)
    return float(10000.0 * math.fsum((v / total) ** 2 for v in scaled))


def cr(x, k, entity=None) -> float | None:
    """Concentration ratio: share of the k largest entities; 1.0 if there are at most k."""
    k = _check_count(k)
    sums = _entity_sums(x, entity)
    if sums is None:
        return None
    if len(sums) <= k:
        return 1.0
    m = max(sums)
    scaled = sorted((v / m for v in sums), reverse=True)
    return float(math.fsum(scaled[:k]) / math.fsum(scaled))


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
