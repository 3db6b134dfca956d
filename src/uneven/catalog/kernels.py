"""The streamed ordered pass's kernels: each ordered measure's result from per-group quantities.

When uneven runs a query on DuckDB itself, an ordered pass may run as a stream
(compiler/passes/stream.py, engine/stream.py): DuckDB sorts the pass's rows by (group keys, x)
and hands them over in Arrow batches; numpy carries each group's running weight C_i across the
batches and sums, per group, the quantities below. A kernel turns them into the measure, one value
per group, with NaN for NULL. Written from the measure contract (docs/plans.md; the same formulas
as the window plan's builders in catalog/ordered.py):

``acc.W``            Σ w (the group's weight; the row count when unweighted)
``acc.n``            the row count
``acc.T``            Σ w·x (NaN where it is not a finite number: no measure is defined from it)
``acc.gini_ratio``   Σ w_i x_i (2C_i − w_i − W) / W / T, the numerator computed on x − m (m the
                     group's smallest value: the sum is unchanged by the shift and keeps its
                     digits); where its products overflow although T fits, on x·2⁻⁵¹² (as the
                     window plan's catalog/scaling.py)
``acc.below(p)``     Σ x_i · clamp(p·W − C_{i−1}, 0, w_i): the value held by the poorest fraction p
``acc.above(p)``     Σ x_i · clamp(C_i − (1−p)·W, 0, w_i): the value held by the richest fraction p
``acc.quantile(p)``  the smallest x_i with C_i/W ≥ p (the largest x when rounding leaves none)
``acc.curve(k)``     below(j/k) for j = 0 … k, one row of k+1 values per group (lorenz_curve)

Reading a quantity records it: the stream computes only what its kernels read (the kernels are
first run on a ``Recorder``).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

# quantities that need the group's totals beforehand
TOTAL_NEEDS = ("below", "above", "quantile", "chunk", "curve", "se_moments", "qband", "gini_design", "se_design")
# the needs that read the group's row count from the totals too (the cut-based errors: engine/streamse.py)
COUNT_NEEDS = ("se_moments", "qband", "se_design")


@dataclass(frozen=True)
class ChunkKernel:
    """A user's own order-based measure for the stream plan (``define_measure(kernel=…)``):

    ``start(W, T, n, *params)``            the state of a group from its totals (Σw, Σw·x, rows)
    ``update(state, x, w, c, *params)``    the state after a chunk of the group's rows, sorted by x:
                                           numpy arrays of values, weights (1.0 when unweighted) and
                                           running weights C_i (from the group's first row)
    ``finish(state, *params)``             the measure (a float; None or NaN for NULL)

    A group may arrive in any number of chunks; ``update`` must give the same state whatever the cuts.
    """

    start: Callable[..., Any]
    update: Callable[..., Any]
    finish: Callable[..., Any]


@dataclass(frozen=True)
class Need:
    name: str  # "W", "n", "T", "gini_a", "gini_b", "below", "above", "quantile", "xmax", "chunk", "curve"
    p: float | None = None  # a cut's fraction; for "curve", its number of segments k
    kernel: ChunkKernel | None = None  # "chunk": the user's kernel and its parameters
    params: tuple = ()


class Recorder:
    """Stands in for the group quantities while a kernel is run once to learn what it reads."""

    def __init__(self):
        self.needs: list[Need] = []

    def _add(self, need: Need) -> np.ndarray:
        if need not in self.needs:
            self.needs.append(need)
        return np.ones(1)

    @property
    def W(self):
        return self._add(Need("W"))

    @property
    def n(self):
        return self._add(Need("n"))

    @property
    def T(self):
        self._add(Need("W"))
        return self._add(Need("gini_b"))

    @property
    def gini_ratio(self):
        for name in ("W", "gini_b", "gini_a", "gini_b_s", "gini_a_s"):
            self._add(Need(name))
        return np.ones(1)

    def below(self, p: float):
        return self._add(Need("below", float(p)))

    def above(self, p: float):
        return self._add(Need("above", float(p)))

    def quantile(self, p: float):
        self._add(Need("xmax"))
        return self._add(Need("quantile", float(p)))

    def read(self, need: Need):
        """A quantity of a kernel module of its own (catalog/kernels_se.py), recorded like the others."""
        return self._add(need)

    def chunk(self, kernel: ChunkKernel, params: tuple):
        return self._add(Need("chunk", kernel=kernel, params=tuple(params)))

    @property
    def m(self):
        return np.ones(1)  # the group's smallest value: always known

    @property
    def xmax(self):
        return self._add(Need("xmax"))

    def curve(self, k: int):
        self._add(Need("W"))
        return self._add(Need("curve", float(k)))

    @property
    def gini_design(self):  # a survey design's (fewest units, variance): catalog/design_kernels.py
        self._add(Need("xmax"))
        self._add(Need("gini_design"))
        return np.ones(1), np.ones(1)



def _where(cond, value):
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(cond, value, np.nan)


def _div(num, den):
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den != 0, num / np.where(den != 0, den, 1.0), np.nan)


def gini(acc, params):
    return _where(acc.T > 0, acc.gini_ratio)


def gini_corrected(acc, params):
    n = acc.n
    return _where(n > 1, gini(acc, params) * _div(n, n - 1.0))


def lorenz(acc, params):
    return _where(acc.T > 0, _div(acc.below(params[0]), acc.T))


def top_share(acc, params):
    return _where(acc.T > 0, _div(acc.above(params[0]), acc.T))


def generalized_lorenz(acc, params):
    return _div(acc.below(params[0]), acc.W)


def _ratio(num, den):
    return _where(den != 0, _div(num, den))


def palma(acc, params):
    return _ratio(top_share(acc, (0.1,)), lorenz(acc, (0.4,)))


def s80s20(acc, params):
    return _ratio(top_share(acc, (0.2,)), lorenz(acc, (0.2,)))


def quantile_w(acc, params):
    return acc.quantile(params[0])


def percentile_ratio(acc, params):
    hi, lo = params
    return _ratio(acc.quantile(hi), acc.quantile(lo))


def wolfson(acc, params):
    """2·(μ/M)·(1 − 2·L(0.5) − G), as catalog/poverty.build_wolfson: NULL unless T > 0 and M > 0."""
    M, T = acc.quantile(0.5), acc.T
    inner = 1.0 - 2.0 * lorenz(acc, (0.5,)) - gini(acc, ())
    with np.errstate(invalid="ignore"):
        ok = (T > 0) & (M > 0)
    return _where(ok, 2.0 * _div(_div(T, acc.W), M) * inner)


def lorenz_curve(acc, params):
    """(groups, k+1): L(j/k) for j = 0 … k, a row of NaN where T ≤ 0 (the window plan's NULL list)."""
    k = int(params[0])
    T = acc.T
    with np.errstate(divide="ignore", invalid="ignore"):
        held = acc.curve(k) / T[:, None]
    return np.where((T > 0)[:, None], held, np.nan)


lorenz_curve.curve = True  # type: ignore[attr-defined]  # its result is a list column (engine/stream.py)
