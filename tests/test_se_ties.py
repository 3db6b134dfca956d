"""Standard errors around a quantile depend on the rows' values and weights, never on the order in
which the sort puts tied values.

The quantile's score is z_k = (p − 1(x_k ≤ Q_p)) / (W·f(Q_p)). Read as 1(C_k ≤ p·W) (the running
weight) the indicator splits the rows tied at Q_p by their order in the sort; read by value it
counts them alike. The data below has ties at every quantile used, with weights of several sizes,
and is loaded in three row orders; every engine of the matrix (tests/engines.py) must give the same
standard errors for all three, equal to a numpy linearization written here from the formula.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

from uneven.reference import se as RSE

P_USED = (0.1, 0.25, 0.5, 0.9)
SEED = 0


# --- the independent linearization --------------------------------------------------------------
# Quantile: z_k = (p − 1(x_k ≤ Q_p)) / (W f(Q_p)) (Serfling 1980, Approximation Theorems of
# Mathematical Statistics, §2.5, Bahadur representation; from memory). f by the Siddiqui (1960) /
# Bloch–Gastwirth (1968) difference quotient with the Hall–Sheather (1988) bandwidth
# h = n^(−1/3) z_{0.975}^(2/3) [1.5 φ(Φ⁻¹p)² / (2 Φ⁻¹(p)² + 1)]^(1/3) (all from memory).
# Variance: n/(n − 1) Σ (u_k − ū)², u_k = w_k z_k, rows as independent draws (with-replacement
# variance of a total; common practice, e.g. Wolter 2007, §1.4, from memory).

def _q(x, w, p):
    # numpy's weighted inverted CDF: the smallest x with cumulative weight ≥ p·W
    return float(np.quantile(x, p, method="inverted_cdf", weights=w))


def _hs(p, n):
    q = norm.ppf(p)
    return n ** (-1 / 3) * norm.ppf(0.975) ** (2 / 3) * (1.5 * norm.pdf(q) ** 2 / (2 * q * q + 1)) ** (1 / 3)


def _score(x, w, p):
    n, W = len(x), w.sum()
    h = _hs(p, n)
    hi, lo = min(p + h, 1.0), max(p - h, 0.0)
    f = (hi - lo) / (_q(x, w, hi) - _q(x, w, lo))
    Q = _q(x, w, p)
    return Q, (p - (x <= Q)) / (W * f)


def _se(u):
    n = len(u)
    return math.sqrt(n / (n - 1) * ((u - u.mean()) ** 2).sum())


def quantile_se(x, w, p):
    return _se(w * _score(x, w, p)[1])


def ratio_se(x, w, hi, lo):
    (a, za), (b, zb) = _score(x, w, hi), _score(x, w, lo)
    return _se(w * (za - a / b * zb) / b)  # delta method for a/b (common practice)


# --- data: ties at every quantile, split by the running weight ------------------------------------

def _split_ties(x, w, p):
    """Whether the rows tied at Q_p straddle p·W (so 1(C_k ≤ pW) splits them in some order),
    with every tie group's end away from p·W (the quantile is not at a jump)."""
    order = np.argsort(x, kind="stable")
    xs, ws = x[order], w[order]
    W = ws.sum()
    values, starts = np.unique(xs, return_index=True)
    ends = np.append(starts[1:], len(xs))
    C = np.cumsum(ws)
    for _v, a, b in zip(values, starts, ends):
        before, after = (C[a - 1] if a else 0.0), C[b - 1]
        if abs(after - p * W) < 1e-6 * W:
            return False
        if before < p * W < after:
            return b - a >= 2 and before + ws[a:b].min() <= p * W
    return False


def _away_from_jumps(x, w, p):
    """No tie group ends at p·W (so Q_p is not at a jump of the CDF, where rounding picks the side)."""
    order = np.argsort(x, kind="stable")
    xs, C = x[order], np.cumsum(w[order])
    ends = np.append(np.flatnonzero(np.diff(xs)), len(xs) - 1)
    return bool(np.all(np.abs(C[ends] - p * C[-1]) > 1e-6 * C[-1]))


def _valid(x, w, p):
    """A density at Q_p, and Q_p and the quantiles at p ± h away from a jump of the CDF."""
    h = _hs(p, len(x))
    inner = [q for q in (p, p + h, p - h) if 0.0 < q < 1.0]  # Q(0) and Q(1) are the minimum and maximum
    spread = _q(x, w, min(p + h, 1.0)) > _q(x, w, max(p - h, 0.0))
    return spread and all(_away_from_jumps(x, w, q) for q in inner)


def make_rows(seed=SEED):
    rng = np.random.default_rng(seed)
    frames = []
    for g, n in (("a", 41), ("b", 57), ("c", 73)):
        x = rng.integers(1, 16, n) * 10.0 + (5.0 if g == "b" else 0.0)  # fifteen values: ties
        w = rng.choice([0.5, 1.0, 2.5, 4.0], n)
        frames.append(pd.DataFrame({"g": g, "x": x, "w": w}))
    return pd.concat(frames, ignore_index=True)


ROWS = make_rows()


def test_the_data_ties_every_quantile_across_p_times_w():
    for p in P_USED:
        for label, weight in (("weighted", lambda d: d.w.to_numpy()), ("unweighted", lambda d: np.ones(len(d)))):
            groups = [(d.x.to_numpy(), weight(d)) for _, d in ROWS.groupby("g")]
            assert all(_valid(x, w, p) for x, w in groups), (p, label)
            assert any(_split_ties(x, w, p) for x, w in groups), (p, label)


def orders():
    """The same rows in three orders: ties by ascending weight, by descending weight, shuffled."""
    asc = ROWS.sort_values(["g", "x", "w"], kind="stable")
    desc = ROWS.sort_values(["g", "x", "w"], ascending=[True, True, False], kind="stable")
    shuffled = ROWS.sample(frac=1.0, random_state=5)
    return {"asc": asc, "desc": desc, "shuffled": shuffled}


CALLS = {
    "q50": ("quantile_w_se(x, 0.5{w})", lambda x, w: quantile_se(x, w, 0.5)),
    "q25": ("quantile_w_se(x, 0.25{w})", lambda x, w: quantile_se(x, w, 0.25)),
    "q90": ("quantile_w_se(x, 0.9{w})", lambda x, w: quantile_se(x, w, 0.9)),
    "pr": ("percentile_ratio_se(x, 0.9, 0.1{w})", lambda x, w: ratio_se(x, w, 0.9, 0.1)),
    "q50lo": ("quantile_w_ci_lo(x, 0.5{w})", lambda x, w: _q(x, w, 0.5) - norm.ppf(0.975) * quantile_se(x, w, 0.5)),
}
# other standard errors with an indicator at a quantile or a line set from the median: the same
# for every row order, and equal to the numpy reference (uneven.reference_se / reference_poverty)
ORDER_FREE = {
    "lor": ("lorenz_se(x, 0.5{w})", ("lorenz", (0.5,))),
    "palma": ("palma_se(x{w})", ("palma", ())),
    "gl": ("generalized_lorenz_se(x, 0.25{w})", ("generalized_lorenz", (0.25,))),
    "bls": ("below_line_share_se(x, 0.6{w})", ("below_line_share", (0.6,))),
    "fgt1": ("fgt_relative_se(x, 1, 0.6{w})", ("fgt_relative", (1.0, 0.6))),
    "wolf": ("wolfson_se(x{w})", ("wolfson", ())),
}


def _sql(weighted: bool) -> str:
    wt = ", w" if weighted else ""
    items = [f"{tpl.format(w=wt)} AS {k}" for k, (tpl, _) in {**CALLS, **ORDER_FREE}.items()]
    return f"SELECT g, {', '.join(items)} FROM t GROUP BY g ORDER BY g"


@pytest.fixture(scope="module")
def results(engine):
    out = {}
    for name, df in orders().items():
        engine.load(df.reset_index(drop=True), "t")
        out[name] = {wt: engine.run(_sql(wt)) for wt in (True, False)}
    return out


@pytest.mark.parametrize("weighted", [True, False], ids=["weighted", "unweighted"])
def test_quantile_se_equals_the_formula_in_every_row_order(engine, results, weighted):
    for order, by_w in results.items():
        got = by_w[weighted].set_index("g")
        for g, d in ROWS.groupby("g"):
            x = d.x.to_numpy()
            w = d.w.to_numpy() if weighted else np.ones(len(d))
            for k, (_, expected) in CALLS.items():
                want, value = expected(x, w), float(got.loc[g, k])
                assert value == pytest.approx(want, rel=1e-9), (engine.name, order, g, k, value, want)


@pytest.mark.parametrize("weighted", [True, False], ids=["weighted", "unweighted"])
def test_other_quantile_and_line_ses_do_not_depend_on_the_row_order(engine, results, weighted):
    for order, by_w in results.items():
        got = by_w[weighted].set_index("g")
        for g, d in ROWS.groupby("g"):
            x = d.x.tolist()
            w = d.w.tolist() if weighted else None
            for k, (_, (name, params)) in ORDER_FREE.items():
                want, value = RSE.se(name, x, params, w), got.loc[g, k]
                assert want is not None and value is not None, (engine.name, order, g, k, value, want)
                assert float(value) == pytest.approx(want, rel=1e-9), (engine.name, order, g, k, value, want)


def test_the_reference_agrees_with_the_formula_in_any_row_order():
    # the package's numpy reference of the score (uneven.reference_se) reads the indicator by value too
    rng = np.random.default_rng(3)
    for _g, d in ROWS.groupby("g"):
        for _perm in range(3):
            idx = rng.permutation(len(d))
            x, w = d.x.to_numpy()[idx], d.w.to_numpy()[idx]
            for p in P_USED:
                assert RSE.se("quantile_w", x.tolist(), (p,), w.tolist()) == pytest.approx(quantile_se(x, w, p), rel=1e-12)
