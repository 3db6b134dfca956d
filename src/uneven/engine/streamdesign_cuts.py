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
PSUs; formed first, at most 7e-14: tests/test_stream_design_cuts.py). The cells are shared by the pass's
errors: each term is summed once per cell however many errors read it (ScoreDesignSums). Each
finished group gives each error one row [fewest units of a stratum, v].

The moment measures' errors with a design (theil_se, mld_se, ge_se, atkinson_se, fgt_se: kernels in
catalog/design_kernels_moment.py) share the machinery: their row terms in r = x/μ (μ = T/W from the totals
query: engine/streamse_moment.py) join the cells, and their estimates read each group's plain sums of the
terms (``sed_sums``), summed here beside the cells.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from uneven.catalog import variance_floor
from uneven.catalog.design_kernels_cuts import DESIGN_SCORES
from uneven.catalog.design_kernels_moment import SUMS
from uneven.catalog.kernels import Need, Recorder
from uneven.engine import streamse, streamse_moment
from uneven.engine.streamdesign import DesignSums, design_rows

NEEDS = ("se_design", SUMS)
# how two partial values of one group combine (engine/streamsums._combine): the row is built by the
# design state when the group ends ("last"); the carriers as those of engine/streamse.py; the moment
# measures' term sums (catalog/design_kernels_moment.py) add up
KINDS = {"se_design": "last", "sed_q": "min", "sed_s": "sum", SUMS: "sum"}


def score_terms(need: Need) -> tuple:
    """The row terms of the score of the need's measure ``(base, parameters)``, in a fixed order."""
    base, params = need.params
    return tuple(sorted(DESIGN_SCORES[base](Recorder(), params).parts))


class ScoreDesignSums(DesignSums):
    """DesignSums over the row terms of every cut-based error of a pass (J terms, N errors): the cells
    sum each term once whatever the number of errors reading it; the coefficients of each segment,
    (J, N) flattened, are set before each ``feed`` (``coef``) and carried with the open group as its
    sums. A row per group: [fewest units of a stratum, v of each error (N)]."""

    def __init__(self, terms: int, errors: int) -> None:
        super().__init__()
        self.terms, self.errors = terms, errors
        self.width = 1 + errors
        self.coef = np.zeros((0, terms * errors))
        self.closed: np.ndarray | None = None  # the open group's row once it has ended (``close_once``)

    def feed(self, *args, **kwargs) -> np.ndarray:
        self.closed = None
        return super().feed(*args, **kwargs)

    def close_once(self) -> np.ndarray:
        """``close``'s row, computed once for the errors that read it."""
        if self.closed is None:
            self.closed = self.close()
        return self.closed

    def _group_sums(self, t: np.ndarray, c: np.ndarray, m: np.ndarray, seg: np.ndarray,
                    continues: bool) -> np.ndarray:
        return self.coef  # (the open group's: its coefficients so far, replaced once it has ended)

    def _rows(self, cells: tuple | None, sums: np.ndarray) -> np.ndarray:
        groups, J, N = len(sums), self.terms, self.errors
        if cells is None or len(cells[0]) == 0:
            return np.full((groups, self.width), np.nan)
        coef = sums.reshape(groups, J, N)
        with np.errstate(invalid="ignore", over="ignore"):
            if len(cells) == 4:  # complete PSU totals: each PSU's score totals U first, a unit of count 1
                g_c, h_c, _, totals = cells
                units = len(g_c)
                count, mean, M = np.ones(units), totals, np.zeros((units, J, J))
                U = np.einsum("uj,ujn->un", totals, coef[g_c])
                rows = design_rows(g_c, h_c, count, U, np.zeros((units, N, N)), groups)
            else:  # rows as units: the scores' means and spreads per stratum cell
                g_c, h_c, count, mean, M = cells
                U = np.einsum("uj,ujn->un", mean, coef[g_c])
                spread = np.einsum("ujn,ujl,ulm->unm", coef[g_c], M, coef[g_c])
                rows = design_rows(g_c, h_c, count, U, spread, groups)
            v = rows[:, 1:].reshape(groups, N, N).diagonal(axis1=1, axis2=2)
            v = _floor(v, coef, design_rows(g_c, h_c, count, mean, M, groups), np.bincount(g_c, count, groups))
        return np.concatenate([rows[:, :1], v], axis=1)


def _floor(v: np.ndarray, coef: np.ndarray, terms: np.ndarray, units: np.ndarray) -> np.ndarray:
    """v (groups, N), 0 where within the rounding of 0 (catalog/variance_floor.py): the bound reads the
    terms' own design variances Σ_h n_h/(n_h − 1)·M_h,jj (``terms``: design_rows of the terms, (groups,
    1 + J²)), the Cauchy–Schwarz bound on the products each error's form cancels."""
    J = coef.shape[1]
    diag = terms[:, 1:].reshape(len(terms), J, J).diagonal(axis1=1, axis2=2)
    out = v.copy()
    for n in range(v.shape[1]):
        out[:, n] = np.where(variance_floor.negligible(v[:, n], coef[:, :, n], diag, units), 0.0, v[:, n])
    return out


class ErrorView:
    """One error's share of a pass's ScoreDesignSums, as the stream closes each design need's group."""

    def __init__(self, shared: ScoreDesignSums, index: int) -> None:
        self.shared, self.index = shared, index

    def close(self) -> np.ndarray:
        return self.shared.close_once()[[0, 1 + self.index]]


def segment_values(needs: list[Need], acc, x: np.ndarray, d: np.ndarray, w: np.ndarray | None, c: np.ndarray,
                   seg: np.ndarray, m: np.ndarray, wt: np.ndarray, carried: dict | None, designs: dict,
                   columns: dict, prefix: Callable, tt: np.ndarray | None = None) -> dict:
    """Each need's row per segment ([fewest, v], NaN for the open group's) and the carriers: Q_p found
    (``sed_q``) and S_d (``sed_s``) of the open group; the moment terms' sums per segment (``sed_sums``).
    ``acc`` the segments' quantities (the open group's carried in: streamsums.GroupValues) for the
    coefficients, ``wt`` each segment's W from the totals query (``tt`` its Σ w·x, where a moment term reads
    μ = T/W: engine/streamse_moment.py), ``designs`` the stream's design states by need (one
    ScoreDesignSums shared by the pass's errors), ``columns`` the batch's stratum and PSU columns."""
    n, nseg = len(x), len(seg)
    lens = np.diff(np.append(seg, n))
    wt_row = wt[0] if nseg == 1 else np.repeat(wt, lens)
    ww = np.ones(n) if w is None else w
    sums = [need for need in needs if need.name == SUMS]
    needs = [need for need in needs if need.name != SUMS]
    per_need = [score_terms(need) for need in needs]
    terms = sorted(set().union(*per_need, *(need.params for need in sums)))
    q_key, s_key = Need("sed_q"), Need("sed_s")
    quantiles = [p for kind, p in terms if kind == "qle"]
    found = np.empty((nseg, len(quantiles)))
    out: dict = {}
    cols = []
    mu = m_row = None
    for kind, p in terms:
        if streamse_moment.is_moment_kind(kind):  # the moment measures' terms in r = x/μ
            if mu is None:
                assert tt is not None  # (the totals query sums w·x for them: kernels_se_moment.reads_mean)
                mu = streamse_moment.mean_rows(tt, wt, lens)
                m_row = m[0] if nseg == 1 else np.repeat(m, lens)  # each row's group smallest value (FGT's gap)
            assert m_row is not None
            col, extra = streamse_moment.term(kind, p, x, ww, mu, m_row), None
            # NaN only where the term's own estimate is NULL (μ where T ≤ 0, ln r where r ≤ 0 …); the cells
            # are shared by every error of the pass (0·NaN is NaN), so such rows add 0 instead
            col = np.where(np.isnan(col), 0.0, col)
        else:
            col, extra = streamse.term_column(kind, p, x, d, ww, c, seg, lens, wt_row, carried, q_key, s_key,
                                              prefix, quantiles)
        cols.append(np.broadcast_to(col, (n,)))
        streamse.keep_extra(kind, p, extra, found, quantiles, out, s_key)
    if quantiles:
        out[q_key] = found
    for need in sums:  # the estimates' sums (the open group's carried in for the coefficients below)
        part = np.stack([np.add.reduceat(cols[terms.index(t)], seg) for t in need.params], axis=1)
        out[need] = part
        acc.values[need] = part if carried is None else np.concatenate([part[:1] + carried[need], part[1:]])
    coef = np.zeros((nseg, len(terms), len(needs)))
    for i, (need, own) in enumerate(zip(needs, per_need)):
        base, params = need.params
        score = DESIGN_SCORES[base](acc, params)
        for t in own:
            coef[:, terms.index(t), i] = score.parts[t]
    if needs[0] not in designs:
        shared = ScoreDesignSums(len(terms), len(needs))
        designs.update({need: ErrorView(shared, i) for i, need in enumerate(needs)})
    design = designs[needs[0]].shared
    design.coef = coef.reshape(nseg, -1)
    rows = design.feed(np.stack(cols, axis=1), c, m, seg, columns, carried is not None)
    out.update({need: rows[:, [0, 1 + i]] for i, need in enumerate(needs)})
    return out
