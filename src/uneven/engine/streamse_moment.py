"""Row terms of the moment measures' standard errors on the stream (catalog/kernels_se_moment.py),
for engine/streamse.py's term machinery: the window plan's centred terms (catalog/moment.py) in
r = x/μ and d = (x − μ)/μ, μ = T/W of the group from the totals query (NaN where T ≤ 0: the window
plan's NULL μ; such a group's estimate is NULL whatever its terms), and the fixed line's gap term less
the gap at the group's smallest value.
"""

from __future__ import annotations

import numpy as np

from uneven.catalog.kernels_se_moment import GAP, gap_shifted, is_moment_kind

__all__ = ["is_moment_kind", "mean_rows", "power_term", "term"]


def mean_rows(tt: np.ndarray, wt: np.ndarray, lens: np.ndarray) -> np.ndarray:
    """μ = T/W of each segment's group on each of its rows, NaN where T ≤ 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        mu = np.where(tt > 0, tt / wt, np.nan)
    return np.full(int(lens[0]), mu[0]) if len(lens) == 1 else np.repeat(mu, lens)


def term(kind: str, p: float, x: np.ndarray, ww: np.ndarray, mu: np.ndarray, m: np.ndarray) -> np.ndarray:
    """w times the row term ``kind`` (parameter ``p``) on every row, ``m`` the group's smallest value."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if kind.startswith(GAP):  # w·(g(x) − g(m)), g the gap share at the line z (kernels_se_moment.fgt_score)
            alpha, z = float(kind[len(GAP):]), p
            return ww * gap_shifted(alpha, z, x, m)
        r = x / mu
        d = (x - mu) / mu
        if kind == "dev":
            return ww * d
        if kind == "theil":  # r ln r − (r − 1); a zero value adds 1
            return ww * np.where(r > 0, r * np.log(np.where(r > 0, r, 1.0)) - (r - 1.0), 1.0)
        if kind == "mld":  # (r − 1) − ln r, r > 0
            return ww * np.where(r > 0, (r - 1.0) - np.log(np.where(r > 0, r, 1.0)), np.nan)
        if kind == "pow":
            return ww * power_term(r, d, p)
    raise ValueError(f"unknown row term {kind}")


def power_term(r: np.ndarray, d: np.ndarray, a: float) -> np.ndarray:
    """r^a − 1 − a(r − 1), the closed forms of catalog/moment._closed_power_term for the usual
    parameters (through d² with d formed from x − μ), else expm1(a ln r) − a(r − 1), a − 1 at r = 0;
    NaN where the window plan's is NULL (r ≤ 0 for a negative closed form)."""
    positive = r > 0
    safe = np.where(positive, r, 1.0)
    if a == 2.0:
        return d * d
    if a == 3.0:
        return d * d * (r + 2.0)
    if a == -1.0:
        return np.where(positive, d * d / safe, np.nan)
    if a == -2.0:
        return np.where(positive, d * d * (2.0 * r + 1.0) / (safe * safe), np.nan)
    if a in (0.5, -0.5):
        root = np.sqrt(np.where(r >= 0, r, np.nan))
        half = d / (root + 1.0)  # √r − 1
        if a == 0.5:
            return -0.5 * (half * half)
        return np.where(positive, half * half * (root + 2.0) / (2.0 * root), np.nan)
    return np.where(positive, np.expm1(a * np.log(safe)) - a * (r - 1.0), a - 1.0)
