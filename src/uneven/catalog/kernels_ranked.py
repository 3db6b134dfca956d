"""The streamed ranked pass's kernels (concentration indices, Kakwani, Reynolds–Smolensky): each
measure from the per-group sums of engine/streamranked.py, with the window plan's formulas and NULL
rules (catalog/structure.py, compiler/passes/ranked.RankedContext.conc):

C_i = (Σ_g Y_g (2c_g − W_g) − W·Σ_g Y_g) / (W·T_i), the concentration index of value i over the
mid-ranks of the ranking value (value 0, whose own C_0 is its Gini); NULL where T_i = 0, or T_i ≤ 0
for a Gini. The sums are on v − m (m the value of the group's first row), which leaves the numerator
unchanged; T_i = m·W + Σ_g Y_g. NaN stands for NULL.
"""

from __future__ import annotations

import numpy as np

from uneven.catalog.kernels import Need


def _read(acc, name: str, i: int) -> np.ndarray:
    return acc.read(Need(name, float(i)))


def total(acc, i: int) -> np.ndarray:
    """T_i = Σ w·v_i."""
    with np.errstate(over="ignore", invalid="ignore"):
        return _read(acc, "rank_m", i) * acc.read(Need("rank_W")) + _read(acc, "rank_b", i)


def conc(acc, i: int, gini: bool = False) -> np.ndarray:
    """The concentration index of value i (its Gini when i = 0 and ``gini``)."""
    W, T = acc.read(Need("rank_W")), total(acc, i)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        value = (_read(acc, "rank_a", i) - W * _read(acc, "rank_b", i)) / (W * T)
        defined = T > 0 if gini else T != 0
    return np.where(defined, value, np.nan)


def _mean(acc) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        return total(acc, 1) / acc.read(Need("rank_W"))


def _within(acc, lo: float, hi: float) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return (_read(acc, "rank_min", 1) >= lo) & (_read(acc, "rank_max", 1) <= hi)


def concentration(acc, params):
    return conc(acc, 1)


def wagstaff(acc, params):
    """C·(hi − lo)·μ / ((hi − μ)(μ − lo)) where lo ≤ y ≤ hi and lo < μ < hi."""
    lo, hi = params
    mu = _mean(acc)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        value = conc(acc, 1) * (hi - lo) * mu / ((hi - mu) * (mu - lo))
        inside = _within(acc, lo, hi) & (mu > lo) & (mu < hi)
    return np.where(inside, value, np.nan)


def erreygers(acc, params):
    """4·μ·C / (hi − lo) where lo ≤ y ≤ hi."""
    lo, hi = params
    with np.errstate(over="ignore", invalid="ignore"):
        value = 4.0 * _mean(acc) * conc(acc, 1) / (hi - lo)
    return np.where(_within(acc, lo, hi), value, np.nan)


def kakwani(acc, params):
    """C of the tax over the income's ranks less the income's Gini."""
    return conc(acc, 1) - conc(acc, 0, gini=True)


def reynolds_smolensky(acc, params):
    """The pre-tax Gini less C of post-tax income over the pre-tax ranks."""
    return conc(acc, 0, gini=True) - conc(acc, 1)
