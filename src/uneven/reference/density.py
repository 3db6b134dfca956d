"""Density of a weighted distribution at a quantile, for the linearized SEs of quantile-based measures
(read by the SE and the poverty references alike)."""

from __future__ import annotations

from statistics import NormalDist

from uneven.reference import measures as R


def hall_sheather(p: float, n: int, alpha: float = 0.05) -> float:
    """Hall & Sheather (1988, from memory) bandwidth: n^(−1/3) z_{1−α/2}^(2/3) [1.5 φ(Φ⁻¹p)² / (2(Φ⁻¹p)² + 1)]^(1/3)."""
    nd = NormalDist()
    q = nd.inv_cdf(p)
    return n ** (-1 / 3) * nd.inv_cdf(1 - alpha / 2) ** (2 / 3) * (1.5 * nd.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


def density_at_quantile(x, p, w=None) -> float | None:
    """Siddiqui (1960) / Bloch–Gastwirth (1968) (from memory) difference quotient with the Hall–Sheather bandwidth."""
    h = hall_sheather(p, len(x))
    hi, lo = min(p + h, 1.0), max(p - h, 0.0)
    q_hi, q_lo = R.quantile_w(x, hi, w), R.quantile_w(x, lo, w)
    if q_hi is None or q_lo is None:  # no rows
        return None
    spread = q_hi - q_lo
    return (hi - lo) / spread if spread > 0 else None
