"""Certified bounds from a bracket table (proofs: docs/brackets.md).

Each bracket b has n_b units with values in [a_b, c_b] (c_b = +inf: open top) and a mean m_b known
to lie in [ml_b, mh_b]: one value when its total is given, [a_b, c_b] when it is not, and in between
when a rolled-up bracket has a total for some of its units only. Brackets do not overlap, so every
comparison between two units of different brackets is known. What is unknown is how the units spread
inside their bracket, and the mean within [ml_b, mh_b].

    lower bounds put every unit of a bracket at its mean, upper bounds split its units between the
    two ends so that the mean is kept (Gastwirth 1972, from memory); the unknown means are then
    chosen, within their ranges, to give the least and the largest value.

Every function returns (lo, hi) floats; ``inf`` where a bound is unlimited. Intervals are widened
by SLACK·(1 + |bound|) for rounding, as in the bounded summaries.
"""

from __future__ import annotations

import math

import numpy as np

from uneven.brackets.table import Brackets

SLACK = 1e-11
QUANTILE_FUZZ = 1e-10  # the quantile's bracket is found with p·W ± this fraction of W


def widen(lo: float, hi: float) -> tuple[float, float]:
    return lo - SLACK * (1 + abs(lo)), hi + SLACK * (1 + abs(hi))


def _before(br: Brackets) -> np.ndarray:
    """Units of the brackets below each bracket, C_{<b}."""
    return br.before


def _lists(br: Brackets):
    """units, low, high, mean_lo, mean_hi, C_{<b} as Python lists (loops over numpy scalars are slow)."""
    return tuple(v.tolist() for v in (br.units, br.low, br.high, br.mean_lo, br.mean_hi, br.before))


def total_interval(br: Brackets) -> tuple[float, float]:
    """[T_lo, T_hi] = Σ n_b·[ml_b, mh_b]."""
    return float((br.units * br.mean_lo).sum()), float((br.units * br.mean_hi).sum())


def mean_interval(br: Brackets) -> tuple[float, float]:
    lo, hi = total_interval(br)
    W = br.units.sum()
    return widen(lo / W, hi / W)


def _within_max(n, a, c, m):
    """Largest ½ΣΣ|x_i − x_j| inside a bracket of n units with mean m in [a, c]: n·q units at c and
    n·(1 − q) at a, q = (m − a)/(c − a), giving n²(c − m)(m − a)/(c − a); for c = inf, the limit n²(m − a)."""
    if c == a:
        return 0.0
    if math.isinf(c):
        return n * n * (m - a)
    return n * n * (c - m) * (m - a) / (c - a)


def _max_over_mean(k, n, a, c, ml, mh):
    """max over m in [ml, mh] of k·m + within max(m): a concave parabola, its vertex
    (a + c)/2 + k(c − a)/(2n²) clipped into [ml, mh] (for c = inf, linear: an end)."""
    if ml == mh:
        return k * ml + _within_max(n, a, c, ml)
    if math.isinf(c):  # the open top's mean is always known; kept for completeness
        return max(k * m + _within_max(n, a, c, m) for m in (ml, mh))
    m = min(max((a + c) / 2 + k * (c - a) / (2 * n * n), ml), mh)
    return k * m + _within_max(n, a, c, m)


def gini_interval(br: Brackets) -> tuple[float, float]:
    """Gini = N/(W·T), N = ½ΣΣ w w |x_i − x_j| = between + within.

    between = Σ_{b<b'} n_b n_b' (m_b' − m_b) = Σ_b k_b m_b with k_b = n_b (C_{<b} − C_{>b}) (linear in
    the means, coefficients known); within_b ∈ [0, n_b²(c − m)(m − a)/(c − a)].
    Every mean known: lo = between/(W T), hi = (between + Σ within max)/(W T), both attained.
    Otherwise the means m_b ∈ [ml_b, mh_b] enter N and T = Σ n_b m_b; the least and the largest N/T
    over them are the roots λ of min (resp. max) over m of N(m) − λ·T(m), a sum of one-variable
    problems per bracket (an end for the lower, a clipped parabola vertex for the upper), found by
    bisection keeping the side that certifies the bound.
    """
    n, a, c = br.units, br.low, br.high
    ml, mh = br.mean_lo, br.mean_hi
    W = n.sum()
    before = _before(br)
    k = n * (before - (W - before - n))
    t_lo, t_hi = total_interval(br)
    if t_hi <= 0:
        return (math.nan, math.nan)
    if t_lo <= 0:  # every value may be 0: no lower limit on T, the Gini is only known to lie in [0, 1]
        return (0.0, 1.0)
    parts = list(zip(k.tolist(), n.tolist(), a.tolist(), c.tolist(), ml.tolist(), mh.tolist()))
    if all(br.known):
        T = t_lo
        lo = float((k * ml).sum())
        hi = sum(_max_over_mean(*p) for p in parts)
        return widen(max(0.0, lo / (W * T)), min(1.0, hi / (W * T)))

    def least(lam):  # min over the means of N_lo(m) − λ T(m); decreasing in λ
        return sum(min((kb - lam * nb) * lo_, (kb - lam * nb) * hi_) for kb, nb, _, _, lo_, hi_ in parts)

    def most(lam):  # max over the means of N_hi(m) − λ T(m); decreasing in λ
        return sum(_max_over_mean(kb - lam * nb, nb, ab, cb, lo_, hi_) for kb, nb, ab, cb, lo_, hi_ in parts)

    lo = _root(least, W, keep="low")
    hi = _root(most, W, keep="high")
    return widen(max(0.0, lo / W), min(1.0, hi / W))


def _root(f, top: float, keep: str) -> float:
    """The root in [0, top] of a decreasing f, by bisection: keep="low" returns a λ with f(λ) ≥ 0 (a
    certified lower end), keep="high" one with f(λ) ≤ 0 (a certified upper end)."""
    lo, hi = 0.0, top
    if f(hi) >= 0:
        return hi
    if f(lo) <= 0:
        return lo
    for _ in range(200):
        mid = (lo + hi) / 2
        if mid <= lo or mid >= hi:
            break
        if f(mid) >= 0:
            lo = mid
        else:
            hi = mid
    return lo if keep == "low" else hi


def lorenz_interval(br: Brackets, p: float) -> tuple[float, float]:
    """L(p) = S/(S + R): S the value held by the lowest p·W units, R the rest.

    L rises with S and falls with R (values ≥ 0), and each bracket's part of S and R is bounded on its
    own, so the bounds are attained: a bracket wholly below p·W adds n·ml to S for the lowest L and
    n·mh for the highest, one wholly above adds to R the other way round. In the bracket holding
    p·W, with u of its units below and total τ ∈ [n·ml, n·mh]: the lowest L has s = max(u·a,
    τ − (n − u)·c), r = τ − s, least at τ = n·ml, n·mh or u·a + (n − u)·c (L is monotone between
    them); the highest has every unit at the mean, s = u·τ/n, at τ = n·ml or n·mh.
    """
    if p <= 0:
        return (0.0, 0.0)
    if p >= 1:
        return (1.0, 1.0)
    n, a, c, ml, mh, before = _lists(br)
    W = float(br.units.sum())
    target = p * W
    s_lo = s_hi = r_lo = r_hi = 0.0  # S and R of the configurations giving the lowest / highest L
    straddle = None
    for b in range(len(n)):
        if before[b] + n[b] <= target:
            s_lo += n[b] * ml[b]
            s_hi += n[b] * mh[b]
        elif before[b] >= target:
            r_lo += n[b] * mh[b]
            r_hi += n[b] * ml[b]
        else:
            straddle = b
    lows, highs = [(s_lo, r_lo)], [(s_hi, r_hi)]
    if straddle is not None:
        b = straddle
        u = target - before[b]
        taus = {n[b] * ml[b], n[b] * mh[b]}
        if not math.isinf(c[b]):
            taus.add(min(max(u * a[b] + (n[b] - u) * c[b], n[b] * ml[b]), n[b] * mh[b]))
        lows = []
        for tau in taus:
            least = u * a[b] if math.isinf(c[b]) else max(u * a[b], tau - (n[b] - u) * c[b])
            lows.append((s_lo + least, r_lo + tau - least))
        highs = [(s_hi + u * tau / n[b], r_hi + tau - u * tau / n[b]) for tau in (n[b] * ml[b], n[b] * mh[b])]
    # a configuration with S + R = 0 (every value 0) has no Lorenz curve: the others bound it
    low_shares = [v for v in (_share(s, r) for s, r in lows) if not math.isnan(v)]
    high_shares = [v for v in (_share(s, r) for s, r in highs) if not math.isnan(v)]
    if not low_shares or not high_shares:
        return (math.nan, math.nan)
    lo, hi = min(low_shares), max(high_shares)
    return widen(max(0.0, lo), min(1.0, hi))


def _share(s: float, r: float) -> float:
    return s / (s + r) if s + r > 0 else math.nan


def top_interval(br: Brackets, p: float) -> tuple[float, float]:
    """top_share(p) = 1 − L(1 − p)."""
    lo, hi = lorenz_interval(br, 1.0 - p)
    return (1.0 - hi, 1.0 - lo)


def ratio_interval(num: tuple[float, float], den: tuple[float, float]) -> tuple[float, float]:
    """num/den for non-negative intervals: [num_lo/den_hi, num_hi/den_lo]; hi = inf when den_lo ≤ 0."""
    if any(math.isnan(v) for v in (*num, *den)) or den[1] <= 0:
        return (math.nan, math.nan)
    lo = max(num[0], 0.0) / den[1]
    hi = num[1] / den[0] if den[0] > 0 else math.inf
    return (lo, hi)


def quantile_interval(br: Brackets, p: float) -> tuple[float, float]:
    """The weighted inverted-CDF quantile Q(p), the smallest value with at least p·W units at or below it.

    It lies in the bracket holding the p·W-th unit, at the fraction f = (p·W − C_{<b})/n_b of that
    bracket's units. Its mean m: at least f·n_b of the units are ≤ Q and the rest ≤ c, so
    m ≤ f·Q + (1 − f)·c; fewer than f·n_b are < Q and the rest ≥ a, so m ≥ f·a + (1 − f)·Q:
    Q ∈ [max(a, (ml − (1 − f)c)/f), min(c, (mh − f·a)/(1 − f))] (a mean not given: [a, c]). When
    p·W falls on a bracket's edge (within QUANTILE_FUZZ·W), both neighbours are candidates.
    """
    n, a, c, ml, mh, before = _lists(br)
    W = float(br.units.sum())
    lo_t, hi_t = p * W - QUANTILE_FUZZ * W, p * W + QUANTILE_FUZZ * W
    lows, highs = [], []
    for b in range(len(n)):
        if before[b] > hi_t or before[b] + n[b] < lo_t:
            continue
        f_lo = min(max((lo_t - before[b]) / n[b], 0.0), 1.0)
        f_hi = min(max((hi_t - before[b]) / n[b], 0.0), 1.0)
        if f_lo <= 0:
            lows.append(a[b])
        elif math.isinf(c[b]):
            lows.append(ml[b] if f_lo >= 1 else a[b])
        else:
            lows.append(max(a[b], (ml[b] - (1 - f_lo) * c[b]) / f_lo))
        highs.append(c[b] if f_hi >= 1 else min(c[b], (mh[b] - f_hi * a[b]) / (1 - f_hi)))
    return widen(min(lows), max(highs))
