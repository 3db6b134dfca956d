"""The point estimate: one distribution that fits every bracket's units and mean (docs/brackets.md).

Inside a closed bracket [a, c] with mean m (units without a total
count at the midpoint), the density is
linear: on z = (x − lo)/h ∈ [0, 1], g(z) = 1 + s·(z − ½), whose mean is ½ + s/12. A linear density
on the whole bracket reaches every mean in the middle third (|s| ≤ 2); a mean nearer an end gets a
triangle against that end, on [a, a + 3(m − a)] (s = −2) or [c − 3(c − m), c] (s = +2). The open
top bracket [a, ∞) with mean m gets a Pareto tail with scale a and α = m/(m − a), the α whose mean
is m (an open bracket from 0, where no Pareto law starts, an exponential law of mean m). Every
bracket keeps its units and its mean, so the estimate is one of the distributions the bounds range
over and lies inside them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from uneven.brackets.table import Brackets

# 3-point Gauss–Legendre on [0, 1]: exact for polynomials of degree ≤ 5
_GL_Z = np.array([0.5 - math.sqrt(0.15), 0.5, 0.5 + math.sqrt(0.15)])
_GL_W = np.array([5 / 18, 8 / 18, 5 / 18])


@dataclass
class Shape:
    """The fitted distribution of one bracket's units: "linear" on [lo, lo + h] with slope s,
    "pareto" with scale lo and index alpha, "exponential" with mean alpha (an open bracket from 0,
    where no Pareto law starts), or "point" at lo."""

    kind: str
    lo: float
    h: float = 0.0
    s: float = 0.0
    alpha: float = 0.0

    def quantile(self, f: float) -> float:
        """The value below which the fraction f of the bracket's units lie."""
        if self.kind == "point":
            return self.lo
        if self.kind == "pareto":
            return self.lo * (1.0 - f) ** (-1.0 / self.alpha) if f < 1 else math.inf
        if self.kind == "exponential":
            return -self.alpha * math.log1p(-f) if f < 1 else math.inf
        return self.lo + self.h * self._z(f)

    def _z(self, f: float) -> float:
        # G(z) = z + s(z² − z)/2 = f, the root in [0, 1] written without cancellation
        if f <= 0:
            return 0.0
        b = 1.0 - self.s / 2
        return min(1.0, 2 * f / (b + math.sqrt(max(b * b + 2 * self.s * f, 0.0))))

    def partial(self, f: float) -> float:
        """Mean value of the lowest fraction f of the units, times f: ∫_0^f Q(u) du."""
        if f <= 0:
            return 0.0
        if self.kind == "point":
            return self.lo * f
        if self.kind == "pareto":
            al = self.alpha
            return self.lo * al / (al - 1) * (1.0 - (1.0 - min(f, 1.0)) ** (1.0 - 1.0 / al))
        if self.kind == "exponential":
            g = min(f, 1.0)
            return self.alpha * (g + ((1 - g) * math.log1p(-g) if g < 1 else 0.0))
        z = self._z(f)
        m1 = z * z / 2 + self.s * (z ** 3 / 3 - z * z / 4)  # ∫_0^z y g(y) dy
        return self.lo * min(f, 1.0) + self.h * m1

    def mean_difference(self) -> float:
        """E|X − Y| for two independent units of the bracket: 2∫F(1 − F)."""
        if self.kind == "point":
            return 0.0
        if self.kind == "pareto":
            al = self.alpha
            return 2 * al * self.lo / ((al - 1) * (2 * al - 1))
        if self.kind == "exponential":
            return self.alpha  # E|X − Y| of an exponential law is its mean
        z = _GL_Z
        g = z + self.s * (z * z - z) / 2
        return 2 * self.h * float(np.dot(_GL_W, g * (1 - g)))


def fit_shape(a: float, c: float, m: float) -> Shape:
    m = min(max(m, a), c)
    if math.isinf(c):
        if m <= a:
            return Shape("point", a)
        return Shape("pareto", a, alpha=m / (m - a)) if a > 0 else Shape("exponential", 0.0, alpha=m)
    h = c - a
    if h <= 0 or m <= a:
        return Shape("point", a)
    if m >= c:
        return Shape("point", c)
    z = (m - a) / h
    if z < 1 / 3:
        return Shape("linear", a, 3 * (m - a), -2.0)
    if z > 2 / 3:
        return Shape("linear", c - 3 * (c - m), 3 * (c - m), 2.0)
    return Shape("linear", a, h, 12 * (z - 0.5))


class Estimate:
    """The fitted distribution of one group: every measure's point estimate."""

    def __init__(self, br: Brackets):
        self.n = br.units
        self.W = float(br.units.sum())
        # units without a total are put at the bracket's midpoint (the top bracket always has its total)
        mid = np.where(np.isinf(br.high), br.low, (br.low + br.high) / 2)
        self.means = np.clip((br.total + br.unknown * mid) / br.units, br.low, br.high)
        self.shapes = [fit_shape(a, c, m) for a, c, m in zip(br.low, br.high, self.means)]
        self.before = np.concatenate([[0.0], np.cumsum(self.n)[:-1]])
        self.T = float((self.n * self.means).sum())

    def mean(self) -> float:
        return self.T / self.W

    def gini(self) -> float:
        if self.T <= 0:
            return math.nan
        k = self.n * (self.before - (self.W - self.before - self.n))
        between = float((k * self.means).sum())
        within = sum(nb * nb * sh.mean_difference() / 2 for nb, sh in zip(self.n, self.shapes))
        return (between + within) / (self.W * self.T)

    def _below(self, p: float) -> float:
        target = p * self.W
        total = 0.0
        for b, sh in enumerate(self.shapes):
            if self.before[b] + self.n[b] <= target:
                total += self.n[b] * self.means[b]
            elif self.before[b] < target:
                total += self.n[b] * sh.partial((target - self.before[b]) / self.n[b])
        return total

    def lorenz(self, p: float) -> float:
        if self.T <= 0:
            return math.nan
        if p <= 0:
            return 0.0
        if p >= 1:
            return 1.0
        return self._below(p) / self.T

    def top_share(self, p: float) -> float:
        return 1.0 - self.lorenz(1.0 - p)

    def quantile(self, p: float) -> float:
        target = p * self.W
        for b, sh in enumerate(self.shapes):
            if self.before[b] + self.n[b] >= target:
                return sh.quantile(max(0.0, (target - self.before[b]) / self.n[b]))
        return self.shapes[-1].quantile(1.0)
