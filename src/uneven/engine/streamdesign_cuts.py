"""A survey design on the stream plan for the cut-based standard errors (lorenz_se, bottom_share_se,
top_share_se, generalized_lorenz_se, palma_se, s80s20_se, quantile_w_se, percentile_ratio_se,
wolfson_se and their intervals with ``strata :=`` and/or ``psu :=``; kernels in
catalog/design_kernels_cuts.py).

The score of each error is the one without a design (catalog/kernels_se.SCORES): u_k = Σ_j c_j·t_kj
over row terms of a few kinds (w, w·d, w·1(C ≤ p·W), w·d·1(C ≤ p·W), w·1(x ≤ Q_p), the Gini's rank
term less 2W·w·d), each known when its row passes (the cut p·W from the totals query, Q_p once a
row reaches it: engine/streamse.term_column). The variance is the window plan's
(compiler/passes/linearized.py): Σ_h n_h/(n_h − 1)·Σ_{u in h} (U_hu − Ū_h)², U_hu = Σ_j c_j·T_huj, T_huj
the total of term j over unit u (a PSU, or a row without ``psu``) of stratum h (one stratum without
``strata``). The cells are engine/streamdesign.DesignSums' (integer codes of the stratum and PSU
values; the open group's PSU sums merged as they double; strata alone: per (group, stratum) counts,
means and centred cross sums merged by the pairwise update).

The coefficients c_j read the group's L(p), Q_p, density and Gini, all known at the group's end:
each batch the score is formed (kernels_se.SCORES on the batch's groups' quantities, the open
group's carried in) and a group that ends in the batch takes its own. Each PSU's U is formed first,
then each stratum's centred Σ (U − Ū)² (two passes): U cancels the PSUs' sizes, which the terms'
totals carry (w and w·1(C ≤ p·W) with coefficients of opposite signs), so a quadratic form in the
totals' cross sums lost digits (2.6e-12 of Palma's variance on 1e12 plus small increments with 6
PSUs; formed first, 1e-13 or better). Each finished group gives one row [fewest units of a stratum, v].
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from uneven.catalog import kernels_se
from uneven.catalog.kernels import Need, Recorder
from uneven.engine import streamse
from uneven.engine.streamdesign import DesignSums

NEEDS = ("se_design",)
# how two partial values of one group combine (engine/streamsums._combine): the row is built by the
# design state when the group ends ("last"); the carriers as those of engine/streamse.py
KINDS = {"se_design": "last", "sed_q": "min", "sed_s": "sum"}


def score_terms(need: Need) -> tuple:
    """The row terms of the score of the need's measure ``(base, parameters)``, in a fixed order."""
    base, params = need.params
    return tuple(sorted(kernels_se.SCORES[base](Recorder(), params).parts))


class ScoreDesignSums(DesignSums):
    """DesignSums over the terms of a cut-based score: the coefficients of each segment are set before
    each ``feed`` (``coef``) and carried with the open group as its sums."""

    def __init__(self) -> None:
        super().__init__()
        self.coef = np.zeros((0, 0))

    def _group_sums(self, t: np.ndarray, c: np.ndarray, m: np.ndarray, seg: np.ndarray,
                    continues: bool) -> np.ndarray:
        return self.coef  # (the open group's: its coefficients so far, replaced once it has ended)

    def _coefficients(self, sums: np.ndarray) -> np.ndarray:
        return sums


def segment_values(need: Need, acc, x: np.ndarray, d: np.ndarray, w: np.ndarray | None, c: np.ndarray,
                   seg: np.ndarray, m: np.ndarray, wt: np.ndarray, carried: dict | None, designs: dict,
                   columns: dict, prefix: Callable, cache: dict) -> dict:
    """The need's row per segment ([fewest, v], NaN for the open group's) and its carriers: Q_p found
    (``sed_q``) and S_d (``sed_s``) of the open group. ``acc`` the segments' quantities (the open
    group's carried in: streamsums.GroupValues) for the coefficients, ``wt`` each segment's W from the
    totals query, ``designs`` the stream's design states by need, ``columns`` the batch's stratum and
    PSU columns, ``cache`` one dict per batch (a term's column is computed once for every error)."""
    n, nseg = len(x), len(seg)
    lens = np.diff(np.append(seg, n))
    wt_row = wt[0] if nseg == 1 else np.repeat(wt, lens)
    ww = np.ones(n) if w is None else w
    terms = score_terms(need)
    q_key, s_key = Need("sed_q", params=need.params), Need("sed_s", params=need.params)
    quantiles = [p for kind, p in terms if kind == "qle"]
    found = np.empty((nseg, len(quantiles)))
    out: dict = {}
    cols = []
    for kind, p in terms:
        key = ("design", kind, p)
        if key not in cache:
            cache[key] = streamse.term_column(kind, p, x, d, ww, c, seg, lens, wt_row, carried, q_key, s_key,
                                              prefix, quantiles)
        col, extra = cache[key]
        cols.append(np.broadcast_to(col, (n,)))
        if kind == "qle":
            found[:, quantiles.index(p)] = extra
        elif kind == "rank":
            out[s_key] = extra
    if quantiles:
        out[q_key] = found
    base, params = need.params
    score = kernels_se.SCORES[base](acc, params)
    design = designs.setdefault(need, ScoreDesignSums())
    design.coef = np.stack([np.broadcast_to(score.parts[t], (nseg,)) for t in terms], axis=1)
    out[need] = design.feed(np.stack(cols, axis=1), c, m, seg, columns, carried is not None)
    return out
