"""The moment measures' standard errors with a survey design on the stream plan: ``theil_se``,
``mld_se``, ``ge_se``, ``atkinson_se`` and ``fgt_se`` (a fixed line), with their ``_ci_lo``/``_ci_hi``,
with ``strata :=`` and/or ``psu :=``.

The score is the one without a design (catalog/kernels_se_moment.SCORES, the window plan's
linearization of catalog/linearize.py and catalog/poverty_lin.fgt): coefficients per group on the row
terms w·g(r) (r = x/μ, μ = T/W from the totals query), w·(x − μ)/μ, w and the fixed line's
w·1(x < z)·((z − x)/z)^α. The cells, each PSU's score total and the variance are the cut-based errors'
(engine/streamdesign_cuts.py, catalog/design_kernels_cuts.py): the row terms summed per (stratum, PSU),
at the group's end each PSU's U = Σ c_j·T_j, then each stratum's n_h/(n_h − 1)·Σ (U − Ū)².

Only the estimate is read differently: without a design the scores take the terms' means from their
centred cross sums (``se_moments``), which a design does not need (the cells give the variance); here
they come from each group's plain sums of the terms (``sed_sums``, engine/streamdesign_cuts.py), the
window plan's Σ w·term / Σ w.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from uneven.catalog import kernels_se_moment
from uneven.catalog.kernels import Need, Recorder
from uneven.catalog.kernels_se import Score

SUMS = "sed_sums"  # per group, Σ of each row term (its params: the terms, in kernels_se_moment's order)


class TermSums:
    """The group quantities ``acc`` as a moment score reads them, with its terms' means
    (kernels_se_moment.term_means: the ratio of a term's column to the weight's) read from the
    terms' sums per group instead of their moments."""

    def __init__(self, acc) -> None:
        self.acc = acc

    def __getattr__(self, name: str):
        return getattr(self.acc, name)

    def read(self, need: Need) -> np.ndarray:
        if need.name != "se_moments":
            return self.acc.read(need)
        sums = Need(SUMS, params=need.params)
        if isinstance(self.acc, Recorder):
            self.acc.read(Need("xmax"))  # (kernels_se.root reads it)
            self.acc.read(sums)
            return np.ones((1, 1 + len(need.params)))
        totals = self.acc.read(sums)
        return np.concatenate([np.ones((len(totals), 1)), totals], axis=1)  # [·, Σ term_j]: term_means' ratios


def _on_sums(score: Callable[..., Score]) -> Callable[..., Score]:
    def read(acc, params) -> Score:
        return score(TermSums(acc), params)
    return read


MOMENT_SCORES: dict[str, Callable[..., Score]] = {base: _on_sums(score)
                                                  for base, score in kernels_se_moment.SCORES.items()}
