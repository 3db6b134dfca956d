"""Stream kernels of the cut-based standard errors: lorenz_se, bottom_share_se, top_share_se,
generalized_lorenz_se, palma_se, s80s20_se, quantile_w_se, percentile_ratio_se, wolfson_se and gini_se,
with their _ci_lo/_ci_hi (no survey design). catalog/uncertainty.py takes these before catalog/kernels.py's
gini_se, whose plain rank term cancels against w·d where the Gini is near 1 (2.4e-10 of the variance off
exact fractions on values spanning 0 to 1e12, here 5e-13; tests/test_gini_se_span.py).

Each is the window plan's linearization (catalog/linearize.py, catalog/poverty_lin.py) written as a
score u_k = Σ_j c_j·t_kj with group-level coefficients c_j and row terms t_kj of a few kinds
(the same kinds as the refine plan's, compiler/passes/refine_se.py), d = x − m, m the group's
smallest value:

    ("one", 0)   w                       ("d", 0)     w·d
    ("bel", p)   w·1(C ≤ p·W)            ("dbel", p)  w·d·1(C ≤ p·W)
    ("qle", p)   w·1(x ≤ Q_p)            ("rank", 0)  2w((C − W)·d − S_d)   (the Gini's rank term − 2W·w·d)

The variance is the window plan's with-replacement n/(n−1)·Σ_k (u_k − ū)² = n/(n−1)·cᵀMc, M the
centred cross sums of the row terms. The stream carries each group's n, the terms' means and M
across batches (Chan's pairwise update, engine/streamse.py), so the coefficients, which need the
group's L(p), Q_p and Gini, are applied once the group has ended. The cut p·W is known ahead from
the totals query; Q_p is the first x with C/W ≥ p, so 1(x ≤ Q_p) is 1 before that row and on the
values tied with it. The quantile's density is the window plan's Hall–Sheather spacing
(catalog/linearize.density_at_quantile): the quantiles at p ± K(p)·n^(−1/3), n the group's rows.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from statistics import NormalDist

import numpy as np

from uneven.catalog import kernels as k
from uneven.catalog import variance_floor
from uneven.catalog.kernels import Need, Recorder
from uneven.catalog.linearize import hall_sheather

ONE, D = ("one", 0.0), ("d", 0.0)
RANK = ("rank", 0.0)
K_MEDIAN = hall_sheather(0.5)


def bel(p: float) -> tuple[str, float]:
    return ("bel", float(p))


def dbel(p: float) -> tuple[str, float]:
    return ("dbel", float(p))


def qle(p: float) -> tuple[str, float]:
    return ("qle", float(p))


@dataclass
class Score:
    """An estimate (one value per group) and its score's coefficients {term: coefficient per group}."""

    est: np.ndarray
    parts: dict[tuple[str, float], np.ndarray] = field(default_factory=dict)
    defined: bool = True

    def scaled(self, factor) -> dict[tuple[str, float], np.ndarray]:
        return {t: c * factor for t, c in self.parts.items()}


def _merge(*parts: dict) -> dict:
    out: dict = {}
    for part in parts:
        for t, c in part.items():
            out[t] = out[t] + c if t in out else c
    return out


def moments(acc, terms: tuple) -> tuple[np.ndarray, np.ndarray]:
    """(n, centred cross sums (groups, K, K)) of the row terms ``terms`` (engine/streamse.py)."""
    need = Need("se_moments", params=terms)
    K = len(terms)
    if isinstance(acc, Recorder):
        acc.read(Need("xmax"))
        acc.read(need)
        return np.ones(1), np.ones((1, K, K))
    rows = acc.read(need)
    return rows[:, 0], rows[:, 1 + K:].reshape(-1, K, K)


def term_means_of(acc, terms: tuple) -> np.ndarray:
    """The row terms' means (groups, K) from the moments ``moments`` reads."""
    if isinstance(acc, Recorder):
        return np.ones((1, len(terms)))
    return acc.read(Need("se_moments", params=terms))[:, 1:1 + len(terms)]


def band_quantile(acc, p: float, side: int) -> np.ndarray:
    """Q(p ± K(p)·n^(−1/3)) within [0, 1] (side +1 or −1): the smallest x with C/W ≥ that level, else the
    largest x."""
    q = acc.read(Need("qband", float(p), params=(side,)))
    xmax = acc.xmax
    return np.where(np.isinf(q), xmax, q)


def _with():
    return np.errstate(divide="ignore", invalid="ignore", over="ignore")


def deviation_sums(acc, p: float) -> tuple[np.ndarray, np.ndarray]:
    """(Σ w·d, Σ d·clamp(p·W − C_{i−1}, 0, w_i)) on d = x − m: the group's and the cut's value past the
    smallest value. With them p − L(p) = (p·Σw·d − B_d)/T and p·m − GL(p) = −B_d/W, exactly as the
    window plan's differences (Σ clamp(…) = p·W) but without their cancellation where the values are
    close together (L(p) near p: 1e12 plus small increments lose 3e-9 of the error's square)."""
    return acc.read(Need("gini_b")), acc.read(Need("below_d", float(p)))


def lorenz_score(acc, p: float) -> Score:
    # catalog/linearize.lorenz: z = [p Q_d + (d − Q_d) 1(C ≤ pW) − L d + m (p − L)] / T
    L = k.lorenz(acc, (p,))
    Q, m, T = acc.quantile(p), acc.m, acc.T
    Td, Bd = deviation_sums(acc, p)
    if p >= 1.0:  # L(1) = 1 whatever the sample: its score is 0 (the general form leaves rounding noise)
        return Score(L, {ONE: np.zeros(np.shape(L))})
    with _with():
        Qd = Q - m
        inv_T = 1.0 / T
        gap = (p * Td - Bd) / T  # p − L
        return Score(L, {ONE: (p * Qd + m * gap) * inv_T, dbel(p): inv_T, bel(p): -Qd * inv_T, D: -L * inv_T})


def top_score(acc, p: float) -> Score:
    low = lorenz_score(acc, 1.0 - p)
    return Score(k.top_share(acc, (p,)), low.scaled(-1.0))


def generalized_lorenz_score(acc, p: float) -> Score:
    # z = [p Q_d + (d − Q_d) 1(C ≤ pW) + (p m − GL)] / W
    GL = k.generalized_lorenz(acc, (p,))
    Q, m, W = acc.quantile(p), acc.m, acc.W
    _, Bd = deviation_sums(acc, p)
    with _with():
        Qd = Q - m
        inv_W = 1.0 / W
        return Score(GL, {ONE: (p * Qd - Bd / W) * inv_W, dbel(p): inv_W, bel(p): -Qd * inv_W})


def ratio_score(num: Score, den: Score) -> Score:
    # r = a/b: z_r = (z_a − r z_b)/b
    with _with():
        r = np.where(den.est != 0, num.est / np.where(den.est != 0, den.est, 1.0), np.nan)
        parts = _merge(num.scaled(1.0 / den.est), den.scaled(-r / den.est))
    return Score(r, parts, num.defined and den.defined)


def quantile_score(acc, p: float) -> Score:
    # z = (p − 1(x ≤ Q_p)) / (W f(Q_p)), f = (p⁺ − p⁻)/(Q(p⁺) − Q(p⁻)), p± = p ± K(p)·n^(−1/3) in [0, 1]
    Q = acc.quantile(p)
    if not 0.0 < p < 1.0:
        return Score(Q, defined=False)  # the sample minimum or maximum: no standard error
    n = acc.n
    with _with():
        h = hall_sheather(p) * np.power(n, -1.0 / 3.0)
        hi, lo = np.minimum(p + h, 1.0), np.maximum(p - h, 0.0)
        spread = band_quantile(acc, p, 1) - band_quantile(acc, p, -1)
        density = np.where(spread > 0, (hi - lo) / np.where(spread > 0, spread, 1.0), np.nan)
        scale = 1.0 / (acc.W * density)
    return Score(Q, {ONE: p * scale, qle(p): -scale})


def gini_score(acc) -> Score:
    """The Gini's score c1·rank + c2·w·d + c3·w (catalog/linearize.gini), the rank term less 2W·w·d."""
    G = k.gini(acc, ())
    W, T, m = acc.W, acc.T, acc.m
    with _with():
        Td = T - m * W
        # on the row term 2w((C − W)·d − S_d) = rank − 2W·w·d (engine/streamse.py): c2 + 2W·c1 = (1 − G)/T. On
        # the upper rows C − W is small, so the term does not grow with d there; with the plain rank
        # term its w·d part and c2·w·d cancel on the upper tail, and wolfson_se lost digits to it
        return Score(G, {RANK: 1.0 / (W * T), D: (1.0 - G) / T, ONE: (Td - G * T) / W / T - m * G / T})


def mean_score(acc) -> Score:
    # μ = T/W: z = (x − μ)/W = (d + m − μ)/W, m − μ = −Σw·d/W
    W, T = acc.W, acc.T
    Td = acc.read(Need("gini_b"))
    with _with():
        return Score(T / W, {D: 1.0 / W, ONE: -Td / W / W})


def wolfson_score(acc) -> Score:
    # catalog/poverty_lin.wolfson: P = 2(μ/M)(1 − 2L − G); ∂P/∂μ = P/μ, ∂P/∂M = −P/M, ∂P/∂L = −4μ/M,
    # ∂P/∂G = −2μ/M
    # (1 − 2L(½) as 2·(½·Σw·d − B_d)/T: its digits where L(½) is close to ½)
    mean, median = mean_score(acc), quantile_score(acc, 0.5)
    L, G = lorenz_score(acc, 0.5), gini_score(acc)
    Td, Bd = deviation_sums(acc, 0.5)
    with _with():
        mu, M = mean.est, median.est
        P = np.where((acc.T > 0) & (M > 0), 2.0 * mu / M * (2.0 * (0.5 * Td - Bd) / acc.T - G.est), np.nan)
        parts = _merge(mean.scaled(P / mu), median.scaled(-P / M), L.scaled(-4.0 * mu / M), G.scaled(-2.0 * mu / M))
    return Score(P, parts)


SCORES: dict[str, Callable[..., Score]] = {
    "lorenz": lambda acc, p: lorenz_score(acc, p[0]),
    "bottom_share": lambda acc, p: lorenz_score(acc, p[0]),
    "top_share": lambda acc, p: top_score(acc, p[0]),
    "generalized_lorenz": lambda acc, p: generalized_lorenz_score(acc, p[0]),
    "palma": lambda acc, p: ratio_score(top_score(acc, 0.1), lorenz_score(acc, 0.4)),
    "s80s20": lambda acc, p: ratio_score(top_score(acc, 0.2), lorenz_score(acc, 0.2)),
    "quantile_w": lambda acc, p: quantile_score(acc, p[0]),
    "percentile_ratio": lambda acc, p: ratio_score(quantile_score(acc, p[0]), quantile_score(acc, p[1])),
    "wolfson": lambda acc, p: wolfson_score(acc),
    "gini": lambda acc, p: gini_score(acc),
}


def standard_error(acc, score: Score) -> np.ndarray:
    """sqrt(n/(n−1)·cᵀMc): exactly 0 where every value is equal (or it rounds below 0), NULL where the
    estimate or a coefficient is, the group has one row or no standard error exists (the window plan's
    rule, compiler/passes/linearized.py)."""
    if not score.defined:
        return np.full(np.shape(score.est), np.nan)
    terms = tuple(sorted(score.parts))
    n, M = moments(acc, terms)
    with _with():
        c = np.stack([np.broadcast_to(score.parts[t], np.shape(n)) for t in terms], axis=1)
        v = np.einsum("gj,gjl,gl->g", c, M, c) * n / (n - 1.0)
        # within the rounding of an exactly vanishing form: 0 (catalog/variance_floor.py)
        diag = np.diagonal(M, axis1=1, axis2=2) * (n / (n - 1.0))[:, None]
        v = np.where(variance_floor.negligible(v, c, diag, n), 0.0, v)
        mean = term_means_of(acc, terms)  # the raw moments Σ t² = M + n·mean², Σ t = n·mean
        raw = diag + (mean * mean) * (n * n / (n - 1.0))[:, None]
        lost = variance_floor.lost(c, raw, mean)
    return root(acc, score.est, v, n > 1, lost)


def root(acc, est: np.ndarray, v: np.ndarray, enough: np.ndarray, lost=False) -> np.ndarray:
    """sqrt(v) where the estimate and v are finite and the group has ``enough`` units; exactly 0 where
    every value is equal or v rounds below 0, else NULL where the terms are ``lost`` to underflow
    (catalog/variance_floor.py; the window plan's rule; also the survey design's, catalog/design_kernels.py)."""
    with _with():
        known = np.isfinite(est) & enough & np.isfinite(v)
        value = np.where(lost, np.nan, np.where(v < 0, 0.0, np.sqrt(np.abs(v))))
        return np.where(known, np.where(acc.xmax == acc.m, 0.0, value), np.nan)


def output(role: str, est: np.ndarray, se: np.ndarray, level: float) -> np.ndarray:
    """The call's result from its estimate and standard error: the error itself, or an interval's
    bound at the level's normal quantile."""
    if role == "se":
        return se
    z = NormalDist().inv_cdf(0.5 + level / 2.0)
    return est - z * se if role == "lo" else est + z * se


def kernels_of(scores: dict[str, Callable[..., Score]]) -> dict[str, Callable]:
    """The ``_se``, ``_ci_lo`` and ``_ci_hi`` kernels of each score (the interval's level is the last
    parameter)."""
    def make(base: str, role: str) -> Callable:
        def kernel(acc, params):
            score = scores[base](acc, params)
            return output(role, score.est, standard_error(acc, score), params[-1] if role != "se" else 0.0)
        kernel.__name__ = f"{base}_{role}"
        return kernel
    return {f"{base}_{suffix}": make(base, role) for base in scores
            for suffix, role in (("se", "se"), ("ci_lo", "lo"), ("ci_hi", "hi"))}


KERNELS = kernels_of(SCORES)
