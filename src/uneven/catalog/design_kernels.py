"""The Gini's linearized standard error with a survey design on the stream plan (``gini_se(x, w,
strata := h, psu := c)``, ``gini_ci_lo``, ``gini_ci_hi``).

The score is the one without a design (catalog/kernels_se.gini_score; catalog/linearize.gini):
u_k = c1·t1_k + c2·t2_k + c3·t3_k with t1 = w·2((C − W)·d − S_d) (the rank term less 2W·w·d: it stays
small on the upper rows, where the plain one cancels against w·d), t2 = w·d, t3 = w on d = x − m. The
variance is the window plan's (compiler/passes/linearized.py): the with-replacement variance of the
PSU totals within strata, Σ_h n_h/(n_h − 1) Σ_{c in h} (U_hc − Ū_h)², which engine/streamdesign.py
forms at each group's end from the PSUs' sums of the row terms. Its outcomes are the window
plan's: NULL where a stratum has one unit (PSU, or row without ``psu``), where the Gini is NULL, or
where the variance is not a finite number; exactly 0 where every value of the group is equal.
"""

from __future__ import annotations

from collections.abc import Callable

from uneven.catalog import kernels, kernels_se
from uneven.catalog.design_kernels_cuts import DESIGN_CUT_KERNELS


def gini_se(acc, params):
    fewest, v = acc.gini_design
    return kernels_se.root(acc, kernels.gini(acc, ()), v, fewest > 1)


def gini_ci_lo(acc, params):
    return kernels_se.output("lo", kernels.gini(acc, ()), gini_se(acc, params), params[-1])


def gini_ci_hi(acc, params):
    return kernels_se.output("hi", kernels.gini(acc, ()), gini_se(acc, params), params[-1])


DESIGN_KERNELS: dict[str, Callable] = {"gini_se": gini_se, "gini_ci_lo": gini_ci_lo, "gini_ci_hi": gini_ci_hi,
                                       **DESIGN_CUT_KERNELS}  # (the cut-based errors: design_kernels_cuts.py)


def stream_kernel(measure, designed: bool) -> Callable | None:
    """The stream kernel of a call on a pass with a survey design (``designed``) or without: a measure
    whose variance reads the design (it accepts ``strata``/``psu``) needs a design kernel; the plain
    measures sharing the pass keep theirs."""
    if designed and measure.pass_options:
        return DESIGN_KERNELS.get(measure.name)
    return measure.stream
