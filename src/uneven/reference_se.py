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

from uneven import reference as R
from uneven import reference_poverty as RP

__all__ = ["influence", "design_variance", "se", "ci", "hall_sheather", "density_at_quantile", "SE_MEASURES"]


def _sorted(x, w):
    x = np.asarray(x, dtype=np.float64)
    w = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    order = np.argsort(x, kind="stable")
    return x, w, order


def _unsort(values_sorted, order):
    out = np.empty_like(values_sorted)
    out[order] = values_sorted
    return out


def hall_sheather(p: float, n: int, alpha: float = 0.05) -> float:
    """Hall & Sheather (1988, from memory) bandwidth: n^(−1/3) z_{1−α/2}^(2/3) [1.5 φ(Φ⁻¹p)² / (2(Φ⁻¹p)² + 1)]^(1/3)."""
    nd = NormalDist()
    q = nd.inv_cdf(p)
    return n ** (-1 / 3) * nd.inv_cdf(1 - alpha / 2) ** (2 / 3) * (1.5 * nd.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


def density_at_quantile(x, p, w=None) -> float | None:
    """Siddiqui (1960) / Bloch–Gastwirth (1968) (from memory) difference quotient with the Hall–Sheather bandwidth."""
    h = hall_sheather(p, len(x))
    hi, lo = min(p + h, 1.0), max(p - h, 0.0)
    spread = R.quantile_w(x, hi, w) - R.quantile_w(x, lo, w)
    return (hi - lo) / spread if spread > 0 else None


def _gini(x, w):
    # Langel & Tillé (2013) / Deville (1999), from memory: with N̂_k = C_k, Ŷ_k = S_k (running sums, rows sorted),
    # z_k = [2 N̂_k x_k − 2 Ŷ_k + Ŷ − N̂ x_k − G (Ŷ + N̂ x_k)] / (N̂ Ŷ)
    x, w, o = _sorted(x, w)
    xs, ws = x[o], w[o]
    C, S = np.cumsum(ws), np.cumsum(ws * xs)
    W, T = ws.sum(), (ws * xs).sum()
    G = R.gini(x, w)
    if G is None:  # no positive total: no estimate, so no standard error (NULL, as the SQL gives)
        return None, None
    z = (2 * C * xs - 2 * S + T - W * xs - G * (T + W * xs)) / (W * T)
    return G, _unsort(z, o)


def _lorenz(x, p, w):
    # Binder & Kovacevic (1995, from memory) estimating-equation form: z_k = [p Q_p + (x_k − Q_p) 1(x_k ≤ Q_p) − L x_k] / T
    x, w, o = _sorted(x, w)
    xs, ws = x[o], w[o]
    C = np.cumsum(ws)
    W, T = C[-1], (ws * xs).sum()
    L, Q = R.lorenz(x, p, w), R.quantile_w(x, p, w)
    if L is None or Q is None:  # no positive total: no linearization
        return None, None
    below = (C <= p * W).astype(float)
    z = (p * Q + (xs - Q) * below - L * xs) / T
    return L, _unsort(z, o)


def _quantile(x, p, w):
    # z_k = (p − 1(x_k ≤ Q_p)) / (W f(Q_p))   (common practice; e.g. Serfling 1980, §2.5; Francisco & Fuller 1991; from memory)
    if not 0 < p < 1:
        return R.quantile_w(x, p, w), None
    x, w, o = _sorted(x, w)
    xs, ws = x[o], w[o]
    C = np.cumsum(ws)
    W = C[-1]
    f = density_at_quantile(x, p, w)
    if f is None:
        return R.quantile_w(x, p, w), None
    Q = R.quantile_w(x, p, w)
    below = (xs <= Q).astype(float)  # by value: rows tied at Q_p count alike, whatever their order
    return Q, _unsort((p - below) / (W * f), o)


def _ratio(a, b):
    (ea, za), (eb, zb) = a, b
    if eb == 0 or za is None or zb is None:
        return (ea / eb if eb else None), None
    r = ea / eb
    return r, (za - r * zb) / eb


def _moment(name, x, params, w):
    """Scores of the log and power measures in r = x/μ and d = r − 1 = (x − μ)/μ, through the
    reference's centred terms (each of the order of d², no cancellation: reference.py):
        Theil z = [g − Th·d − Th]/W, MLD z = [h − M]/W, GE(α) z = [p − P − α P d]/(W α(α−1)),
        Atkinson z = −E/(W(1 + P))·[(p_β − P)/β − P d] (β = 1 − ε, E = 1 − A), ε = 1: E (h − M)/W,
    with g, h, p the Theil, MLD and power terms and P their weighted mean (P = α(α−1)·GE). These
    are the textbook scores (e.g. Theil: [x ln x − (A/T + 1) x]/T + 1/W, A = Σ w x ln x) with
    x = μ r substituted (docs/uncertainty.md); in x itself the terms of order 1 cancel to d²."""
    x = np.asarray(x, dtype=np.float64)
    w = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    W = math.fsum(w)
    mu = math.fsum(w * x) / W
    if name == "ge" and params[0] in (0.0, 1.0):
        name = "mld" if params[0] == 0.0 else "theil"
    est = {"theil": lambda: R.theil(x, w), "mld": lambda: R.mld(x, w), "ge": lambda: R.ge(x, params[0], w),
           "atkinson": lambda: R.atkinson(x, params[0], w)}[name]()
    if est is None or not mu > 0:
        return est, None
    d = (x - mu) / mu
    with np.errstate(divide="ignore", invalid="ignore"):
        log_r = np.log(x) - math.log(mu)  # −inf at x = 0 (the terms take their r = 0 values there)
    if name == "theil":
        return est, (R.theil_terms(d, log_r) - est * d - est) / W
    if name == "mld":
        return est, (R.mld_terms(d, log_r) - est) / W
    if name == "ge":
        a = params[0]
        P = a * (a - 1) * est
        return est, (R.power_terms(d, log_r, a) - P - a * P * d) / (W * a * (a - 1))
    if name == "atkinson":
        eps = params[0]
        if eps == 0:
            return est, np.zeros_like(x)  # A = 0 wherever defined
        E = 1.0 - est
        if eps == 1:
            h = R.mld_terms(d, log_r)
            return est, E * (h - math.fsum(w * h) / W) / W
        b = 1.0 - eps
        p = R.power_terms(d, log_r, b)
        P = math.fsum(w * p) / W
        return est, -E / (W * (1.0 + P)) * ((p - P) / b - P * d)
    raise KeyError(name)


def influence(name: str, x, params=(), w=None):
    """(estimate, z per row in input order); z is None where no standard error exists."""
    if name in RP.SE_MEASURES:  # poverty lines and Wolfson: reference_poverty.influence
        return RP.influence(name, x, params, w)
    if name == "gini":
        return _gini(x, w)
    if name in ("lorenz", "bottom_share"):
        return _lorenz(x, params[0], w)
    if name == "top_share":
        L, z = _lorenz(x, 1 - params[0], w)
        return R.top_share(x, params[0], w), -z
    if name == "generalized_lorenz":
        p = params[0]
        L, zL = _lorenz(x, p, w)
        if L is None or zL is None:  # no positive total: its linearization is undefined
            return None, None
        x_, w_ = np.asarray(x, float), (np.ones(len(x)) if w is None else np.asarray(w, float))
        W, T = w_.sum(), (w_ * x_).sum()
        GL = L * T / W
        # GL = L·T/W: z = (T z_L + L x_k − GL) / W
        return GL, (T * zL + L * x_ - GL) / W
    if name == "palma":
        top = influence("top_share", x, (0.1,), w)
        return _ratio(top, _lorenz(x, 0.4, w))
    if name == "s80s20":
        return _ratio(influence("top_share", x, (0.2,), w), _lorenz(x, 0.2, w))
    if name == "quantile_w":
        return _quantile(x, params[0], w)
    if name == "percentile_ratio":
        return _ratio(_quantile(x, params[0], w), _quantile(x, params[1], w))
    return _moment(name, x, params, w)


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
        units = {}
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
    pick = (lambda v: None if v is None else [v[i] for i in keep])
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
    return None if v is None else math.sqrt(max(v, 0.0))


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
