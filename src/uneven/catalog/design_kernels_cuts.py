"""The cut-based standard errors with a survey design on the stream plan: ``lorenz_se``,
``bottom_share_se``, ``top_share_se``, ``generalized_lorenz_se``, ``palma_se``, ``s80s20_se``,
``quantile_w_se``, ``percentile_ratio_se`` and ``wolfson_se`` (and each ``_ci_lo``/``_ci_hi``) with
``strata :=`` and/or ``psu :=``.

The score is the one without a design (catalog/kernels_se.SCORES, the window plan's linearization of
catalog/linearize.py and catalog/poverty_lin.py): coefficients c_j per group on row terms t_j. The
stream sums the terms per (stratum, PSU) and, at each group's end, forms each PSU's score total and
the window plan's variance (compiler/passes/linearized.py) Σ_h n_h/(n_h − 1)·Σ_c (U_hc − Ū_h)²
(engine/streamdesign_cuts.py); the kernel takes the root. Its outcomes are the window plan's: NULL
where a stratum has one unit, where the estimate is NULL or no standard error exists (p at 0 or 1 for
a quantile, no density); exactly 0 where every value is equal and for L(0), L(1) (a score of 0).

The moment measures' errors (theil_se, mld_se, ge_se, atkinson_se, fgt_se) take the same kernels over
their own scores (catalog/design_kernels_moment.py).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from uneven.catalog import kernels_se
from uneven.catalog.design_kernels_moment import MOMENT_SCORES
from uneven.catalog.kernels import Need, Recorder

# the score of every error with a design kernel here: the cut-based ones and the moment measures'
DESIGN_SCORES = {**kernels_se.SCORES, **MOMENT_SCORES}


def design_variance(acc, base: str, params: tuple) -> tuple[np.ndarray, np.ndarray]:
    """(the fewest units of any stratum, v) per group of the score of ``base`` at ``params``."""
    need = Need("se_design", params=(base, tuple(params)))
    if isinstance(acc, Recorder):
        acc.read(Need("xmax"))  # (kernels_se.root reads it)
        acc.read(need)
        return np.ones(1), np.ones(1)
    rows = acc.read(need)
    return rows[:, 0], rows[:, 1]


def _kernel(base: str, role: str) -> Callable:
    def kernel(acc, params):
        level = params[-1] if role != "se" else 0.0
        params = tuple(params[:-1]) if role != "se" else tuple(params)  # (an error and its intervals share it)
        score = DESIGN_SCORES[base](acc, params)
        if not score.defined:
            return np.full(np.shape(score.est), np.nan)
        fewest, v = design_variance(acc, base, params)
        return kernels_se.output(role, score.est, kernels_se.root(acc, score.est, v, fewest > 1), level)
    kernel.__name__ = f"{base}_{role}_design"
    return kernel


CUT_BASES = tuple(base for base in kernels_se.SCORES if base != "gini")  # (the Gini's: design_kernels.py)
DESIGN_CUT_KERNELS: dict[str, Callable] = {f"{base}_{suffix}": _kernel(base, role)
                                           for base in CUT_BASES + tuple(MOMENT_SCORES)
                                           for suffix, role in (("se", "se"), ("ci_lo", "lo"), ("ci_hi", "hi"))}
