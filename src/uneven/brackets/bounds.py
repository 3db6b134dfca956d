"""Certified bounds from a bracket table (proofs: docs/brackets.md).

Each bracket b has n_b units with values in [a_b, c_b] (c_b = +inf: open top) and, when known, the
total t_b (mean m_b = t_b/n_b); brackets do not overlap, so every comparison between two units of
different brackets is known. What is unknown is how the units spread inside their bracket, and, for a
bracket without a total, its mean (only m_b ∈ [a_b, c_b] is known).

    lower bounds put every unit of a bracket at its mean, upper bounds split its units between the
    two ends so that the mean is kept (Gastwirth 1972, from memory); with a missing total the mean
    itself ranges over [a_b, c_b].

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
    return np.concatenate([[0.0], np.cumsum(br.units)[:-1]])


def total_interval(br: Brackets) -> tuple[float, float]:
    """[T_lo, T_hi]: a missing total lies in [a·n, c·n] (the top bracket's total is always known)."""
    known = br.known
    t = br.total[known].sum()
    return (t + (br.units * br.low)[~known].sum(), t + (br.units * br.high)[~known].sum())


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


def gini_interval(br: Brackets) -> tuple[float, float]:
    """Gini = N/(W·T), N = ½ΣΣ w w |x_i − x_j| = between + within.

    between = Σ_{b<b'} n_b n_b' (m_b' − m_b) = Σ_b k_b m_b with k_b = n_b (C_{<b} − C_{>b}) (linear in
    the means, coefficients known); within_b ∈ [0, n_b²(c − m)(m − a)/(c − a)].
    Known totals only: lo = between/(W T), hi = (between + Σ within max)/(W T), both attained.
    Missing totals: the unknown means m_b ∈ [a_b, c_b] enter N and T = T_0 + Σ n_b m_b; the least and
    the largest N/T over them are the roots λ of min (resp. max) over m of N(m) − λ·T(m), a sum of
    one-variable problems per bracket (an end of [a, c] for the lower, a clipped parabola vertex for
    the upper), found by bisection keeping the side that certifies the bound.
    """
    n, a, c, t = br.units, br.low, br.high, br.total
    W = n.sum()
    before = _before(br)
    k = n * (before - (W - before - n))
    n_lo = n_hi = t0 = 0.0
    missing = []
    for b in range(len(n)):
        if br.known[b]:
            m = min(max(t[b] / n[b], a[b]), c[b])
            n_lo += k[b] * m
            n_hi += k[b] * m + _within_max(n[b], a[b], c[b], m)
            t0 += t[b]
        else:  # c finite here: an open top bracket always has its total
            missing.append((k[b], n[b], a[b], c[b]))
    t_lo, t_hi = total_interval(br)
    if t_hi <= 0:
        return (math.nan, math.nan)
    if t_lo <= 0:  # every value may be 0: no lower limit on T, the Gini is only known to lie in [0, 1]
        return (0.0, 1.0)
    if not missing:
        return widen(max(0.0, n_lo / (W * t0)), min(1.0, n_hi / (W * t0)))

    def least(lam):  # min over m of N_lo(m) − λ T(m); decreasing in λ
        return n_lo - lam * t0 + sum(min((kb - lam * nb) * ab, (kb - lam * nb) * cb) for kb, nb, ab, cb in missing)

    def most(lam):  # max over m of N_hi(m) − λ T(m); decreasing in λ
        return n_hi - lam * t0 + sum(_max_missing(kb - lam * nb, nb, ab, cb) for kb, nb, ab, cb in missing)

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


def _max_missing(k, n, a, c):
    """max over m in [a, c] of k·m + n²(c − m)(m − a)/(c − a): the vertex (a + c)/2 + k(c − a)/(2n²), clipped."""
    if c == a:
        return k * a
    m = min(max((a + c) / 2 + k * (c - a) / (2 * n * n), a), c)
    return k * m + _within_max(n, a, c, m)


def lorenz_interval(br: Brackets, p: float) -> tuple[float, float]:
    """L(p) = S/(S + R): S the value held by the lowest p·W units, R the rest.

    L rises with S and falls with R (values ≥ 0), and each bracket's share of S and R is bounded on
    its own, so the bounds are attained: a bracket wholly below p·W adds t_b to S (missing: a·n at the
    low end, c·n at the high end), one wholly above adds to R the same way round. In the bracket
    holding p·W, with u of its units below: known total, s ∈ [max(u·a, t − (n − u)·c), u·m] and
    r = t − s; missing total, lowest L at s = u·a, r = (n − u)·c and highest L at every unit on one
    value v, v = a or v = c, whichever gives the larger L.
    """
    if p <= 0:
        return (0.0, 0.0)
    if p >= 1:
        return (1.0, 1.0)
    n, a, c, t = br.units, br.low, br.high, br.total
    W = n.sum()
    target = p * W
    before = _before(br)
    s_lo = s_hi = r_lo = r_hi = 0.0  # S and R of the configurations giving the lowest / highest L
    straddle = None
    for b in range(len(n)):
        known = br.known[b]
        if before[b] + n[b] <= target:
            s_lo += t[b] if known else n[b] * a[b]
            s_hi += t[b] if known else n[b] * c[b]
        elif before[b] >= target:
            r_lo += t[b] if known else n[b] * c[b]
            r_hi += t[b] if known else n[b] * a[b]
        else:
            straddle = b
    lows, highs = [(s_lo, r_lo)], [(s_hi, r_hi)]
    if straddle is not None:
        b = straddle
        u = target - before[b]
        if br.known[b]:
            m = min(max(t[b] / n[b], a[b]), c[b])
            least = u * a[b] if math.isinf(c[b]) else max(u * a[b], t[b] - (n[b] - u) * c[b])
            lows = [(s_lo + least, r_lo + t[b] - least)]
            highs = [(s_hi + u * m, r_hi + t[b] - u * m)]
        else:
            lows = [(s_lo + u * a[b], r_lo + (n[b] - u) * c[b])]
            highs = [(s_hi + u * v, r_hi + (n[b] - u) * v) for v in (a[b], c[b])]
    # a configuration with S + R = 0 (every value 0) has no Lorenz curve: the others bound it
    lows = [v for v in (_share(s, r) for s, r in lows) if not math.isnan(v)]
    highs = [v for v in (_share(s, r) for s, r in highs) if not math.isnan(v)]
    if not lows or not highs:
        return (math.nan, math.nan)
    lo, hi = min(lows), max(highs)
    return widen(max(0.0, lo), min(1.0, hi))


def _share(s, r):
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
    bracket's units. With the bracket's mean m known: at least f·n_b of its units are ≤ Q and the rest
    ≤ c, so m ≤ f·Q + (1 − f)·c; fewer than f·n_b are < Q and the rest ≥ a, so m ≥ f·a + (1 − f)·Q:
    Q ∈ [max(a, (m − (1 − f)c)/f), min(c, (m − f·a)/(1 − f))]. Missing mean: Q ∈ [a, c]. When p·W
    falls on a bracket's edge (within QUANTILE_FUZZ·W), both neighbours are candidates.
    """
    n, a, c, t = br.units, br.low, br.high, br.total
    W = n.sum()
    before = _before(br)
    lo_t, hi_t = p * W - QUANTILE_FUZZ * W, p * W + QUANTILE_FUZZ * W
    lows, highs = [], []
    for b in range(len(n)):
        if before[b] > hi_t or before[b] + n[b] < lo_t:
            continue
        if not br.known[b]:
            lows.append(a[b]), highs.append(c[b])
            continue
        m = min(max(t[b] / n[b], a[b]), c[b])
        f_lo = min(max((lo_t - before[b]) / n[b], 0.0), 1.0)
        f_hi = min(max((hi_t - before[b]) / n[b], 0.0), 1.0)
        if f_lo <= 0:
            lows.append(a[b])
        elif math.isinf(c[b]):
            lows.append(m if f_lo >= 1 else a[b])
        else:
            lows.append(max(a[b], (m - (1 - f_lo) * c[b]) / f_lo))
        highs.append(c[b] if f_hi >= 1 else min(c[b], (m - f_hi * a[b]) / (1 - f_hi)))
    return widen(min(lows), max(highs))
