"""Stream kernels of the moment measures' standard errors without a survey design: theil_se, mld_se,
ge_se, atkinson_se and fgt_se (a fixed line), with their _ci_lo/_ci_hi.

Each is the window plan's linearization (catalog/linearize.py, catalog/poverty_lin.fgt) written as
catalog/kernels_se.py writes the cut-based ones: a score u_k = Σ_j c_j·t_kj with coefficients known at
the group's end and row terms carried across batches as means and centred cross sums (Chan's
pairwise update, engine/streamse.py). The row terms (engine/streamse_moment.py) are the window plan's,
in r = x/μ with μ = T/W from the totals query, so each is of the order of the spread:

    ("theil", 0)  w·(r ln r − (r − 1)) (1 where r = 0)       ("mld", 0)   w·((r − 1) − ln r) (r > 0)
    ("pow", a)    w·(r^a − 1 − a(r − 1))                      ("dev", 0)   w·(x − μ)/μ
    ("gap<α>", z) w·(g(x) − g(m)), g = 1(x < z)·((z − x)/z)^α (a fixed line z, m the group's smallest value)

The estimates are the window plan's Σ w·term / W, here the ratio of the terms' means to the weight's
(the same sums divided by n), so an estimate and its error read one set of moments. The domains are the
window plan's: the log measures and the powers of a negative exponent need every x > 0, the others
x ≥ 0, each T > 0; outside them the estimate and its error are NULL.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from uneven.catalog.kernels import Need, Recorder
from uneven.catalog.kernels_se import ONE, Score, kernels_of

THEIL, MLD, DEV = ("theil", 0.0), ("mld", 0.0), ("dev", 0.0)
KINDS = ("theil", "mld", "pow", "dev")
GAP = "gap"


def is_moment_kind(kind: str) -> bool:
    return kind in KINDS or kind.startswith(GAP)


def reads_mean(needs) -> bool:
    """Whether a job's row terms read the group's mean μ = T/W: the totals query then brings T
    (compiler/passes/stream.py), so μ is on every row before the rows stream. (``sed_sums``: the terms'
    sums with a survey design, catalog/design_kernels_moment.py.)"""
    return any(n.name in ("se_moments", "sed_sums") and any(is_moment_kind(k) for k, _ in n.params) for n in needs)


def power(a: float) -> tuple[str, float]:
    return ("pow", float(a))


def gap(alpha: float, line: float) -> tuple[str, float]:
    return (f"{GAP}{float(alpha)!r}", float(line))


def _with():
    return np.errstate(divide="ignore", invalid="ignore", over="ignore")


def term_means(acc, terms: tuple) -> dict[tuple[str, float], np.ndarray]:
    """{term: Σ w·term / Σ w} per group, from the same moments as the error's (engine/streamse.py)."""
    terms = tuple(sorted(terms))
    need = Need("se_moments", params=terms)
    if isinstance(acc, Recorder):
        acc.read(Need("xmax"))
        acc.read(need)
        return {t: np.ones(1) for t in terms}
    rows = acc.read(need)
    weight = rows[:, 1 + terms.index(ONE)]
    with _with():
        return {t: rows[:, 1 + j] / weight for j, t in enumerate(terms)}


def _domain(acc, positive: bool) -> np.ndarray:
    """The window plan's domain: min x > 0 (or ≥ 0) and T > 0."""
    with _with():
        return ((acc.m > 0) if positive else (acc.m >= 0)) & (acc.T > 0)


def theil_score(acc) -> Score:
    # z = [g(r) − Th·d − Th] / W, g = r ln r − (r − 1), d = (x − μ)/μ (catalog/linearize._theil_centred)
    mean = term_means(acc, (THEIL, DEV, ONE))
    W = acc.W
    with _with():
        Th = np.where(_domain(acc, False), mean[THEIL], np.nan)
        return Score(Th, {THEIL: 1.0 / W, DEV: -Th / W, ONE: -Th / W})


def mld_score(acc) -> Score:
    # z = [h(r) − M] / W, h = (r − 1) − ln r
    mean = term_means(acc, (MLD, ONE))
    W = acc.W
    with _with():
        M = np.where(_domain(acc, True), mean[MLD], np.nan)
        return Score(M, {MLD: 1.0 / W, ONE: -M / W})


def ge_score(acc, alpha: float) -> Score:
    # z = [p(r) − P − α·P·d] / (W α(α−1)), p = r^α − 1 − α(r − 1), P = α(α−1)·GE
    if alpha == 0:
        return mld_score(acc)
    if alpha == 1:
        return theil_score(acc)
    a2 = alpha * (alpha - 1.0)
    mean = term_means(acc, (power(alpha), DEV, ONE))
    W = acc.W
    with _with():
        GE = np.where(_domain(acc, alpha <= 0), mean[power(alpha)] / a2, np.nan)
        return Score(GE, {power(alpha): 1.0 / (W * a2), ONE: -GE / W, DEV: -alpha * GE / W})


def atkinson_score(acc, eps: float) -> Score:
    # β = 1 − ε, P = mean p_β, E = 1 − A = (1 + P)^(1/β): z = −E/(W(1 + P))·[(p_β − P)/β − P·d];
    # ε = 1: E = exp(−M), z = E·(h − M)/W; ε = 0: A = 0 wherever defined, a score of exactly 0
    if eps == 0:
        term_means(acc, (ONE,))
        with _with():
            return Score(np.where(_domain(acc, False), 0.0, np.nan), {ONE: np.zeros(np.shape(acc.W))})
    W = acc.W
    if eps == 1:
        mean = term_means(acc, (MLD, ONE))
        with _with():
            M = mean[MLD]
            A = np.where(_domain(acc, True), -np.expm1(-M), np.nan)
            E = 1.0 - A
            return Score(A, {MLD: E / W, ONE: -E * M / W})
    beta = 1.0 - eps
    mean = term_means(acc, (power(beta), DEV, ONE))
    with _with():
        P = mean[power(beta)]
        grown = np.where(1.0 + P > 0, np.expm1(np.log1p(P) / beta), np.nan)  # (1 + P)^(1/β) − 1
        A = np.where(_domain(acc, eps > 1), -grown, np.nan)
        scale = (1.0 - A) / (W * (1.0 + P))
        return Score(A, {power(beta): -scale / beta, ONE: scale * P / beta, DEV: scale * P})


def gap_share(alpha: float, line: float, x):
    """g = 1(x < z)·((z − x)/z)^α at the line z (catalog/poverty.gap_term per unit of weight)."""
    with _with():
        share = 1.0 if alpha == 0 else ((line - x) / line if alpha == 1 else ((line - x) / line) ** alpha)
        return np.where(x < line, share, 0.0)


def gap_shifted(alpha: float, line: float, x, m):
    """g(x) − g(m), m ≤ x the group's smallest value, formed as catalog/poverty_lin.gap_shifted forms it."""
    with _with():
        if alpha == 0:
            diff = 0.0
        elif alpha == 1:
            diff = (m - x) / line
        elif alpha == 2:
            diff = ((m - x) / line) * (((line - x) + (line - m)) / line)
        else:
            diff = ((line - x) / line) ** alpha - ((line - m) / line) ** alpha
        return np.where(x < line, diff, -gap_share(alpha, line, m))


def fgt_score(acc, alpha: float, line: float) -> Score:
    # a fixed line: z = (g − F)/W, g = 1(x < z)·((z − x)/z)^α, written as the window plan writes it
    # (catalog/poverty_lin.fgt) on the term w·(g − g₀), g₀ = g(m) at the group's smallest value m:
    # z = (g − g₀ − D)/W, D = F − g₀ the term's mean, so both terms are of the order of the spread of g
    mean = term_means(acc, (gap(alpha, line), ONE))
    W = acc.W
    with _with():
        D = np.where(W > 0, mean[gap(alpha, line)], np.nan)
        return Score(D + gap_share(alpha, line, acc.m), {gap(alpha, line): 1.0 / W, ONE: -D / W})


SCORES: dict[str, Callable[..., Score]] = {
    "theil": lambda acc, p: theil_score(acc),
    "mld": lambda acc, p: mld_score(acc),
    "ge": lambda acc, p: ge_score(acc, float(p[0])),
    "atkinson": lambda acc, p: atkinson_score(acc, float(p[0])),
    "fgt": lambda acc, p: fgt_score(acc, float(p[0]), float(p[1])),
}


KERNELS = kernels_of(SCORES)
# the moment errors: auto keeps the window plan for a pass of these alone (compiler/plan.stream_pays)
MOMENT_ERRORS = frozenset(KERNELS)
# why the median-line errors have none (explain, through compiler/plan.stream_blocked): a relative line's score
# reads the group's median (and the densities at the line and at the median) on every row
LINE_ERRORS = frozenset(f"{base}_{suffix}" for base in ("below_line_share", "median_gap", "fgt_relative")
                        for suffix in ("se", "ci_lo", "ci_hi"))
LINE_ERRORS_WHY = "a median-line error's score reads the group's median on every row, known only when the group ends"
