"""The stream's per-batch sums for the cut-based standard errors (catalog/kernels_se.py).

``se_moments`` (its ``params`` the row terms, kernels_se's kinds, or the moment measures' of
catalog/kernels_se_moment.py, whose columns engine/streamse_moment.py writes from μ = T/W of the
totals): per segment of a batch, the row count, the terms' means and their centred cross sums,
[n, means (K), M (K·K)]; two parts of a group merge by Chan, Golub and LeVeque's pairwise update
(common practice), so the variance's quadratic form keeps the digits that raw sums of squares lose.
The open group carries, besides its moments, Q_p where a quantile term has found it (the first x
with C/W ≥ p: later rows tied with it count as at or below it) and its running Σ w·d (the rank
term's S_d), as engine/streamsums.gini_terms does.

``below_d`` (p): Σ d·clamp(p·W − C_{i−1}, 0, w_i), the value held below the cut measured from the
group's smallest value, so p − L(p) = (p·Σw·d − below_d)/T keeps its digits where L(p) is close to p.

``qband`` (p, side): the quantile at p ± K(p)·n^(−1/3) clamped to [0, 1], n the group's rows from the
totals query: the smallest x with C/W ≥ that level (inf where none does; the kernel reads the largest
x then), the window plan's Hall–Sheather spacing (catalog/linearize.density_at_quantile).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from uneven.catalog.kernels import Need
from uneven.catalog.linearize import hall_sheather
from uneven.engine import streamse_moment


def merge_rows(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Two parts' [n, means (K), centred cross sums (K·K)] of one group as one (the earlier part first):
    M = M_a + M_b + δ δᵀ n_a n_b / n, δ = mean_b − mean_a."""
    K = int(round((np.sqrt(4.0 * len(a) - 3.0) - 1.0) / 2.0))  # len = 1 + K + K²
    na, nb = a[0], b[0]
    n = na + nb
    delta = b[1:1 + K] - a[1:1 + K]
    mean = a[1:1 + K] + delta * (nb / n)
    M = a[1 + K:] + b[1 + K:] + np.outer(delta, delta).ravel() * (na * nb / n)
    return np.concatenate(([n], mean, M))


NEEDS = ("se_moments", "qband", "below_d")
# how two partial values of one group combine (engine/streamsums._combine): a function, or "sum"/"min"
KINDS: dict[str, Any] = {"se_moments": merge_rows, "se_q": "min", "se_s": "sum", "qband": "min", "below_d": "sum"}


def _carrier(need: Need, name: str) -> Need:
    return Need(name, params=need.params)


def segment_values(need: Need, x: np.ndarray, d: np.ndarray, w: np.ndarray | None, c: np.ndarray,
                   seg: np.ndarray, wt: np.ndarray, nt: np.ndarray, carried: dict | None,
                   prefix: Callable, cache: dict, tt: np.ndarray | None = None) -> dict:
    """The need's value per segment (and its carriers), ``wt`` and ``nt`` each segment's group weight
    and row count from the totals query, ``carried`` the open group's values (its first segment);
    ``prefix(v, lens)`` the compensated running sums restarted per segment (streamsums.segmented_prefix);
    ``cache`` one dict per batch, shared by the batch's needs: a term's centred column and a pair's cross
    sums are computed once however many errors read them (and ``cache["m"]`` holds each segment's smallest
    value); ``tt`` each segment's Σ w·x from the totals
    query, where a moment measure's term reads the group's mean (engine/streamse_moment.py)."""
    n = len(x)
    lens = np.diff(np.append(seg, n))
    wt_row = wt[0] if len(seg) == 1 else np.repeat(wt, lens)
    if need.name == "qband":
        assert need.p is not None
        p, side = float(need.p), need.params[0]
        h = hall_sheather(p) * np.power(nt, -1.0 / 3.0)  # as the window plan's K·power(n, −1/3)
        level = np.minimum(p + h, 1.0) if side > 0 else np.maximum(p - h, 0.0)
        level_row = level[0] if len(seg) == 1 else np.repeat(level, lens)
        reached = c / wt_row >= level_row
        return {need: np.minimum.reduceat(np.where(reached, x, np.inf), seg)}
    if need.name == "below_d":  # Σ d·clamp(p·W − C_{i−1}, 0, w_i): the value below the cut, past the minimum
        assert need.p is not None
        ww = 1.0 if w is None else w
        return {need: np.add.reduceat(np.clip(float(need.p) * wt_row - (c - ww), 0.0, ww) * d, seg)}
    if tt is not None and "mu" not in cache and any(streamse_moment.is_moment_kind(k) for k, _ in need.params):
        cache["mu"] = streamse_moment.mean_rows(tt, wt, lens)
        cache["m_row"] = cache["m"][0] if len(lens) == 1 else np.repeat(cache["m"], lens)
    return _moments(need, x, d, w, c, seg, lens, wt_row, carried, prefix, cache)


def _moments(need: Need, x, d, w, c, seg, lens, wt_row, carried, prefix: Callable, cache: dict) -> dict:
    terms = need.params
    nseg, K = len(seg), len(terms)
    ww = np.ones(len(x)) if w is None else w
    out: dict = {}
    q_key, s_key = _carrier(need, "se_q"), _carrier(need, "se_s")
    quantiles = [p for kind, p in terms if kind == "qle"]
    found = np.empty((nseg, len(quantiles)))
    centred = []
    rows = np.empty((nseg, 1 + K + K * K))
    rows[:, 0] = lens
    for j, (kind, p) in enumerate(terms):
        if (kind, p) not in cache:  # a term's column is the same for every error of the batch
            if streamse_moment.is_moment_kind(kind):  # the moment measures' terms in r = x/μ
                col, extra = streamse_moment.term(kind, p, x, ww, cache["mu"], cache["m_row"]), None
            else:
                col, extra = term_column(kind, p, x, d, ww, c, seg, lens, wt_row, carried, q_key, s_key, prefix,
                                         quantiles)
            mean = np.add.reduceat(col, seg) / lens
            cache[(kind, p)] = (col - (mean[0] if nseg == 1 else np.repeat(mean, lens)), mean, extra)
        col, mean, extra = cache[(kind, p)]
        centred.append(col)
        rows[:, 1 + j] = mean
        keep_extra(kind, p, extra, found, quantiles, out, s_key)
    if quantiles:
        out[q_key] = found
    for j in range(K):
        for m in range(j, K):
            pair = (terms[j], terms[m])
            if pair not in cache:
                cache[pair] = np.add.reduceat(centred[j] * centred[m], seg)
            rows[:, 1 + K + j * K + m] = cache[pair]
            rows[:, 1 + K + m * K + j] = cache[pair]
    out[need] = rows
    return out


def keep_extra(kind: str, p: float, extra, found: np.ndarray, quantiles: list, out: dict, s_key: Need) -> None:
    """A term's by-product: a quantile term's row value (into ``found``), the rank term's sums (``out``)."""
    if kind == "qle":
        found[:, quantiles.index(p)] = extra
    elif kind == "rank":
        out[s_key] = extra


def term_column(kind: str, p: float, x, d, ww, c, seg, lens, wt_row, carried, q_key, s_key, prefix,
                quantiles) -> tuple:
    """A row term's column, and what its group carries: Q_p found (qle), the segments' Σ w·d (rank)."""
    nseg = len(seg)
    if kind == "one":
        return ww, None
    if kind == "d":
        return ww * d, None
    if kind in ("bel", "dbel"):
        # the window plan's 1(C ≤ p·W); at p = 1 every row, as C_n = W (the rounding of the running
        # and the total weight would leave the last row out, and L(1) = 1 a standard error of noise)
        below = c <= p * wt_row if p < 1.0 else np.ones(len(c), dtype=bool)
        return (ww * below if kind == "bel" else ww * d * below), None
    if kind == "qle":
        reached = c / wt_row >= p  # as the quantile: the first such row holds Q_p
        q = np.minimum.reduceat(np.where(reached, x, np.inf), seg)
        if carried is not None:
            q[0] = min(q[0], carried[q_key][quantiles.index(p)])
        return ww * (~reached | (x == (q[0] if nseg == 1 else np.repeat(q, lens)))), q
    if kind == "rank":  # 2w((C − W)·d − S_d): the Gini's rank term less 2W·w·d (kernels_se.gini_score)
        wd = ww * d
        hi, lo = prefix(wd, lens)
        if carried is not None:  # the open group's S_d so far
            hi[:lens[0]] += carried[s_key]
        return 2.0 * ww * ((c - wt_row) * d - (hi + lo)), np.add.reduceat(wd, seg)
    raise ValueError(f"unknown row term {kind}")
