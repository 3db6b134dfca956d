"""The linearized influence z_k of each inequality measure, row by row, written from its published
formula (docs/uncertainty.md); ``reference.se`` turns them into standard errors, and the poverty
references build theirs on the Gini and Lorenz ones here."""

from __future__ import annotations

import math

import numpy as np

from uneven.reference import measures as R
from uneven.reference.density import density_at_quantile


def _sorted(x, w):
    x = np.asarray(x, dtype=np.float64)
    w = np.ones_like(x) if w is None else np.asarray(w, dtype=np.float64)
    order = np.argsort(x, kind="stable")
    return x, w, order


def _unsort(values_sorted, order):
    out = np.empty_like(values_sorted)
    out[order] = values_sorted
    return out


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
    # Binder & Kovacevic (1995, from memory) estimating-equation form:
    # z_k = [p Q_p + (x_k − Q_p) 1(x_k ≤ Q_p) − L x_k] / T
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


def _generalized_lorenz(x, p, w):
    # GL = B/W with B = Σ x_i clamp(pW − C_{i−1}, 0, w_i): z_k = [p Q_p + (x_k − Q_p) 1(C_k ≤ pW) − GL] / W
    # (the estimating-equation form of _lorenz with W in place of T, from memory). Defined for any x,
    # as the measure is: no division by the total T, so a total ≤ 0 has a linearization too
    x, w, o = _sorted(x, w)
    xs, ws = x[o], w[o]
    C = np.cumsum(ws)
    W = C[-1]
    GL, Q = R.generalized_lorenz(x, p, w), R.quantile_w(x, p, w)
    if GL is None or Q is None:
        return None, None
    below = (C <= p * W).astype(float)
    return GL, _unsort((p * Q + (xs - Q) * below - GL) / W, o)


def _quantile(x, p, w):
    # z_k = (p − 1(x_k ≤ Q_p)) / (W f(Q_p))
    # (common practice; e.g. Serfling 1980, §2.5; Francisco & Fuller 1991; from memory)
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
        name, params = ("mld" if params[0] == 0.0 else "theil"), ()
    est = getattr(R, name)(x, *params, w)  # R.theil(x, w), R.ge(x, alpha, w), R.atkinson(x, eps, w) …
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
    """(estimate, z per row in input order) of an inequality measure; z is None where no standard
    error exists. The poverty measures have theirs in ``reference.poverty``; ``reference.se.influence``
    answers for both."""
    if name == "gini":
        return _gini(x, w)
    if name in ("lorenz", "bottom_share"):
        return _lorenz(x, params[0], w)
    if name == "top_share":
        L, z = _lorenz(x, 1 - params[0], w)
        return R.top_share(x, params[0], w), -z
    if name == "generalized_lorenz":
        return _generalized_lorenz(x, params[0], w)
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
