"""Numpy reference of the structure measures: GE decomposition, concentration and progressivity,
paired Gini differences, Gini by income source and leave-one-out influence.

Same conventions as ``reference.py`` (rows with w == 0 dropped, negative or non-finite weights
raise ``ValueError``, ``None`` where a measure is undefined). Written to follow each published
definition literally, not to be fast.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from uneven.reference import measures as ref


def _arrays(*cols: Any, w: Any = None) -> tuple[list[np.ndarray], np.ndarray]:
    arrs = [np.atleast_1d(np.asarray(c, dtype=np.float64)).reshape(-1) for c in cols]
    ws = np.ones_like(arrs[0]) if w is None else np.asarray(w, dtype=np.float64).reshape(-1)
    for a in arrs:
        if a.shape != ws.shape:
            raise ValueError("columns and weights differ in length")
        if not np.all(np.isfinite(a)):
            raise ValueError("a value is not finite")
    if not np.all(np.isfinite(ws)) or np.any(ws < 0):
        raise ValueError("weights must be finite and non-negative")
    keep = ws > 0
    return [a[keep] for a in arrs], ws[keep]


# ---------------------------------------------------------------------------------------------
# GE(α) decomposition by subgroup (Shorrocks 1980, from memory: GE = between + within, exactly)
# ---------------------------------------------------------------------------------------------

def ge_parts(x, alpha, group, w=None) -> list[dict] | None:
    """One dict per subgroup: group_mean, weight_share v, value_share s, group_ge (own GE) and the
    within term v^(1−α) s^α GE_g. None when the total GE is undefined."""
    (xs,), ws = _arrays(x, w=w)
    g = np.asarray(group, dtype=object).reshape(-1)[(np.ones(len(group), bool) if w is None
                                                      else np.asarray(w, dtype=np.float64) > 0)]
    if ref.ge(xs, alpha, ws) is None:
        return None
    W, T = math.fsum(ws), math.fsum(ws * xs)
    out = []
    for key in sorted(set(g), key=repr):
        m = g == key
        Wg, Tg = math.fsum(ws[m]), math.fsum(ws[m] * xs[m])
        v, s = Wg / W, Tg / T
        own = ref.ge(xs[m], alpha, ws[m])
        if own is None:  # a subgroup of zeros (α > 0): its own GE is undefined, its term is 0
            term = 0.0
        else:
            term = v ** (1 - alpha) * s ** alpha * own if s > 0 else 0.0
        out.append({"subgroup": key, "group_mean": Tg / Wg, "weight_share": v, "value_share": s, "group_ge": own,
                    "within_term": term})
    return out


def ge_within(x, alpha, group, w=None) -> float | None:
    parts = ge_parts(x, alpha, group, w)
    return None if parts is None else math.fsum(p["within_term"] for p in parts)


def ge_between(x, alpha, group, w=None) -> float | None:
    """GE of the smoothed distribution: every member receives the mean of its subgroup."""
    (xs,), ws = _arrays(x, w=w)
    g = np.asarray(group, dtype=object).reshape(-1)[(np.ones(len(group), bool) if w is None
                                                      else np.asarray(w, dtype=np.float64) > 0)]
    if ref.ge(xs, alpha, ws) is None:
        return None
    smoothed = np.empty_like(xs)
    for key in set(g):
        m = g == key
        smoothed[m] = math.fsum(ws[m] * xs[m]) / math.fsum(ws[m])
    return ref.ge(smoothed, alpha, ws)


# ---------------------------------------------------------------------------------------------
# Concentration, normalised concentration, progressivity
# ---------------------------------------------------------------------------------------------

def fractional_ranks(r, w=None) -> np.ndarray:
    """Weighted fractional rank of each row (in input order), mid-rank for ties:
    R = (weight strictly below + half the weight of the tie group) / W
    (Kakwani, Wagstaff and van Doorslaer 1997, from memory)."""
    (rs,), ws = _arrays(r, w=w)
    W = math.fsum(ws)
    out = np.empty_like(rs)
    for v in np.unique(rs):
        m = rs == v
        out[m] = (math.fsum(ws[rs < v]) + math.fsum(ws[m]) / 2.0) / W
    return out


def concentration(y, rank_by, w=None) -> float | None:
    """C = 2 cov_w(y, R) / μ_y, R the fractional rank of ``rank_by``; None when Σw·y = 0."""
    (ys, rs), ws = _arrays(y, rank_by, w=w)
    if ys.size == 0:
        return None
    W, T = math.fsum(ws), math.fsum(ws * ys)
    if T == 0:
        return None
    R = fractional_ranks(rs, ws)
    mu, mr = T / W, math.fsum(ws * R) / W
    cov = math.fsum(ws * (ys - mu) * (R - mr)) / W
    return 2.0 * cov / mu


def _bounds_ok(ys, lo, hi) -> bool:
    return lo < hi and ys.size > 0 and float(ys.min()) >= lo and float(ys.max()) <= hi


def concentration_wagstaff(y, rank_by, lo, hi, w=None) -> float | None:
    """Wagstaff's (2005, from memory) normalisation for an outcome bounded in [lo, hi]:
    C·(hi − lo)·μ / ((hi − μ)(μ − lo)). None when a value lies outside the bounds or μ sits on a bound."""
    (ys, _), ws = _arrays(y, rank_by, w=w)
    c = concentration(y, rank_by, w)
    if c is None or not _bounds_ok(ys, lo, hi):
        return None
    mu = math.fsum(ws * ys) / math.fsum(ws)
    if not lo < mu < hi:
        return None
    return c * (hi - lo) * mu / ((hi - mu) * (mu - lo))


def concentration_erreygers(y, rank_by, lo, hi, w=None) -> float | None:
    """Erreygers (2009, from memory) corrected index for an outcome bounded in [lo, hi]: 4·μ·C / (hi − lo)."""
    (ys, _), ws = _arrays(y, rank_by, w=w)
    c = concentration(y, rank_by, w)
    if c is None or not _bounds_ok(ys, lo, hi):
        return None
    mu = math.fsum(ws * ys) / math.fsum(ws)
    return 4.0 * mu * c / (hi - lo)


def _gini_as_concentration(x, ws) -> float | None:
    """The Gini of x as the concentration index of x ranked by itself (mid-ranks: equal, a fact of the
    trade), so an index of x minus it is exactly 0 when the other argument is x itself; NULL where the
    Gini is (T ≤ 0)."""
    return None if ref.gini(x, ws) is None else concentration(x, x, ws)


def kakwani(tax, income, w=None) -> float | None:
    """Concentration of the tax ranked by pre-tax income minus the Gini of pre-tax income."""
    (ts, inc), ws = _arrays(tax, income, w=w)
    c, g = concentration(ts, inc, ws), _gini_as_concentration(inc, ws)
    return None if c is None or g is None else c - g


def reynolds_smolensky(pre, post, w=None) -> float | None:
    """Gini of pre-tax income minus the concentration of post-tax income ranked by pre-tax income."""
    (a, b), ws = _arrays(pre, post, w=w)
    g, c = _gini_as_concentration(a, ws), concentration(b, a, ws)
    return None if c is None or g is None else g - c


# ---------------------------------------------------------------------------------------------
# Paired Gini difference and its linearised standard error
# ---------------------------------------------------------------------------------------------

def gini_linearized(x, w=None) -> np.ndarray | None:
    """z_k = ∂G/∂w_k for G = Σ_i Σ_j w_i w_j |x_i − x_j| / (2 W T), written out pairwise:
    z_k = Σ_j w_j |x_k − x_j| / (W T) − G (1/W + x_k/T)   (rows in input order)."""
    (xs,), ws = _arrays(x, w=w)
    W, T = math.fsum(ws), math.fsum(ws * xs)
    if xs.size == 0 or T <= 0:
        return None
    D = np.array([math.fsum(ws * np.abs(v - xs)) for v in xs])
    G = math.fsum(ws * D) / (2.0 * W * T)
    return D / (W * T) - G * (1.0 / W + xs / T)


def _se_of_total(u: np.ndarray) -> float | None:
    """With-replacement variance of a total from one stratum: n/(n−1) Σ (u_k − ū)²."""
    n = u.size
    if n < 2:
        return None
    return math.sqrt(n / (n - 1) * math.fsum((u - u.mean()) ** 2))


def gini_diff(x1, x2, w=None) -> float | None:
    (a, b), ws = _arrays(x1, x2, w=w)
    g1, g2 = ref.gini(a, ws), ref.gini(b, ws)
    return None if g1 is None or g2 is None else g1 - g2


def gini_diff_se(x1, x2, w=None) -> float | None:
    """SE of gini(x1) − gini(x2) on the same rows: the linearised variables z1 − z2 of each row,
    weighted, as a with-replacement total (Taylor linearisation; the pairing enters through
    the row-by-row difference)."""
    (a, b), ws = _arrays(x1, x2, w=w)
    z1, z2 = gini_linearized(a, ws), gini_linearized(b, ws)
    if z1 is None or z2 is None:
        return None
    return _se_of_total(ws * (z1 - z2))


def gini_se(x, w=None) -> float | None:
    (xs,), ws = _arrays(x, w=w)
    z = gini_linearized(xs, ws)
    return None if z is None else _se_of_total(ws * z)


# ---------------------------------------------------------------------------------------------
# Gini by income source (Lerman and Yitzhaki 1985, from memory)
# ---------------------------------------------------------------------------------------------

def gini_sources(sources: dict[str, Any], w=None) -> list[dict] | None:
    """One dict per source: part_of_total S_k, own_gini G_k, conc_by_total C_k (the concentration of
    the source ranked by the total), corr_with_total R_k = C_k/G_k, gini_points S_k·C_k,
    part_of_gini S_k·C_k/G and the change of G when the source grows by 1%:
    gini_change_1pct 0.01·S_k·(C_k − G)."""
    names = list(sources)
    cols, ws = _arrays(*sources.values(), w=w)
    total = np.sum(np.vstack(cols), axis=0)
    G, T = ref.gini(total, ws), math.fsum(ws * total)
    if G is None:
        return None
    out = []
    for name, c in zip(names, cols):
        S = math.fsum(ws * c) / T
        Gk = ref.gini(c, ws)
        Ck = concentration(c, total, ws)
        if Ck is None:  # a source that adds up to 0 has no concentration, nor what is built on it
            out.append({"source": name, "part_of_total": S, "own_gini": Gk, "conc_by_total": None,
                        "corr_with_total": None, "gini_points": None, "part_of_gini": None,
                        "gini_change_1pct": None})
            continue
        out.append({"source": name, "part_of_total": S, "own_gini": Gk, "conc_by_total": Ck,
                    "corr_with_total": None if not Gk else Ck / Gk, "gini_points": S * Ck,
                    "part_of_gini": S * Ck / G, "gini_change_1pct": 0.01 * S * (Ck - G)})
    return out


# ---------------------------------------------------------------------------------------------
# Influence of single rows
# ---------------------------------------------------------------------------------------------

def gini_leave_one_out(x, w=None) -> np.ndarray | None:
    """Gini of the rows without row k, for each k (input order), by brute-force recomputation.
    NaN where the rest has no positive total."""
    (xs,), ws = _arrays(x, w=w)
    if xs.size < 2:
        return None
    out = np.empty_like(xs)
    for k in range(xs.size):
        keep = np.arange(xs.size) != k
        g = ref.gini(xs[keep], ws[keep])
        out[k] = np.nan if g is None else g
    return out


def without_top(measure, x, k: int, w=None, *params) -> float | None:
    """A reference measure of the rows without the k largest values (rows of equal value: the one
    with the larger weight counts as larger; fully equal rows are interchangeable)."""
    (xs,), ws = _arrays(x, w=w)
    order = np.lexsort((ws, xs))
    keep = order[: max(xs.size - k, 0)]
    if keep.size == 0:
        return None
    return measure(xs[keep], *params, ws[keep])


REFERENCES_STRUCTURE = {
    "ge_between": ge_between,
    "ge_within": ge_within,
    "concentration": concentration,
    "concentration_wagstaff": concentration_wagstaff,
    "concentration_erreygers": concentration_erreygers,
    "kakwani": kakwani,
    "reynolds_smolensky": reynolds_smolensky,
    "gini_diff": gini_diff,
    "gini_diff_se": gini_diff_se,
}
