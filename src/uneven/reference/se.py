"""numpy reference ("oracle") for the standard errors, confidence intervals and bootstrap of
uneven: each influence function written straight from its published formula (see
docs/uncertainty.md), per row, and the with-replacement variance of its weighted total computed
stratum by stratum, PSU by PSU. Written to be read, not to be fast; it shares no code with the
SQL lowering (which expands the variance into sums of products instead).

``influence(name, x, params, w)`` returns (estimate, z) with z in the input row order;
``se(name, x, params, w, strata, psu)`` the linearization standard error.
"""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np

from uneven.reference import linearized
from uneven.reference import measures as R
from uneven.reference import poverty as RP
from uneven.reference.density import density_at_quantile, hall_sheather  # noqa: F401  (part of this module's API)

__all__ = ["influence", "design_variance", "se", "ci", "hall_sheather", "density_at_quantile", "SE_MEASURES"]


def influence(name: str, x, params=(), w=None):
    """(estimate, z per row in input order); z is None where no standard error exists."""
    if name in RP.SE_MEASURES:  # poverty lines and Wolfson: reference.poverty.influence
        return RP.influence(name, x, params, w)
    return linearized.influence(name, x, params, w)


def design_variance(u, strata=None, psu=None) -> float | None:
    """Σ_h n_h/(n_h − 1) Σ_c (U_hc − Ū_h)², U_hc the total of u over PSU c of stratum h (each row its
    own PSU without ``psu``, one stratum without ``strata``): the with-replacement (ultimate
    cluster) variance of a total (common practice; e.g. Wolter 2007, Introduction to Variance
    Estimation, §1.4, cited from memory)."""
    u = np.asarray(u, dtype=np.float64)
    n = len(u)
    h = np.zeros(n, dtype=object) if strata is None else np.asarray(strata, dtype=object)
    c = np.arange(n).astype(object) if psu is None else np.asarray(psu, dtype=object)
    total = 0.0
    for stratum in dict.fromkeys(h.tolist()):
        in_h = h == stratum
        units: dict = {}
        for cc, uu in zip(c[in_h].tolist(), u[in_h]):
            units[cc] = units.get(cc, 0.0) + uu
        U = np.array(list(units.values()))
        if len(U) < 2:
            return None
        total += len(U) / (len(U) - 1) * ((U - U.mean()) ** 2).sum()
    return total


def _defined(name: str, x, params, w) -> bool:
    """The measure itself has a value here (a positive total, x in its domain): where it is NULL,
    so is its standard error."""
    if name in RP.SE_MEASURES:
        return RP.REFERENCES[name](list(x), *params, None if w is None else list(w)) is not None
    if name not in SE_MEASURES:
        return False
    return R.REFERENCES[name](list(x), *params, None if w is None else list(w)) is not None


def _kept(x, w, strata, psu):
    """Rows with weight 0 change nothing and are dropped (the measure contract), before n is counted."""
    if w is None:
        return x, w, strata, psu
    keep = [i for i, wi in enumerate(w) if wi != 0]
    def pick(v):
        return None if v is None else [v[i] for i in keep]

    return pick(x), pick(w), pick(strata), pick(psu)


def se(name: str, x, params=(), w=None, strata=None, psu=None) -> float | None:
    x, w, strata, psu = _kept(list(x), None if w is None else list(w), strata, psu)
    if not x or not _defined(name, x, params, w):
        return None
    est, z = influence(name, x, params, w)
    if est is None or z is None or len(x) < 2:
        return None
    wv = np.ones(len(x)) if w is None else np.asarray(w, dtype=np.float64)
    v = design_variance(wv * z, strata, psu)
    if v is None:
        return None
    sd = math.sqrt(max(v, 0.0))
    # below the estimate's own rounding an error carries no digit: θ itself is known to a few units
    # of its last place, and the float scores leave a residue of that order where the exact variance
    # is 0 (palma_se of the two rows 3.52e-9 and 42.5: exactly 0 by hand, 4.2e-7 here, with the
    # Palma at 3e9: 1.4e-16 of it). Common numerical practice; the bound 4·eps·|θ| is our own. (Not
    # more: a top share of 1 − 7e-15 over 265 rows has a real error of 1.03e-14, 46·eps of it, that
    # every plan and these scores give to 15 digits.)
    return 0.0 if sd <= 4.0 * np.finfo(np.float64).eps * abs(est) else sd


def ci(name: str, x, params=(), w=None, level=0.95, strata=None, psu=None):
    sd = se(name, x, params, w, strata, psu)
    if sd is None:
        return None, None
    est = influence(name, x, params, w)[0]
    if est is None or sd is None:
        return None, None
    zc = NormalDist().inv_cdf(0.5 + level / 2)
    return est - zc * sd, est + zc * sd


SE_MEASURES = ("gini", "lorenz", "bottom_share", "generalized_lorenz", "top_share", "palma", "s80s20",
               "quantile_w", "percentile_ratio", "theil", "mld", "ge", "atkinson")
